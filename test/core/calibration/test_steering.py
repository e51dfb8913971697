"""Steering offset, ratio and wheelbase: drives built in code and commonroad-vehicle-models.

Kinematic drives (test/fixtures/calibration.py) inject known offsets and geometry with white
noise of stated size; the estimator must recover them within its stated standard errors.
The commonroad kinematic single-track model (``vehicle_dynamics_ks``, rear-axle
referenced: psi' = v tan(delta) / l_wb) is an outside reference for the measurement
equation.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np
import pytest

from fixtures.calibration import FILE, config, make_drive
from kinematic_monitor.config import validation
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.samples import ChassisSample, LocalizationSample


def test_recovers_injected_offset() -> None:
    # injected: steering reads 1.0 deg high (calibration offset -1.0 deg); acceptance of the
    # calibration issue: +-0.05 deg, and within 4 standard errors
    off = -math.radians(1.0)
    res = cal.calibrate(make_drive(1, 300.0, offset=off, scale=1.0 / 0.98, K=0.0035), config(),
                        seed=1)
    e_off = res.estimates["vehicle.steering_offset"]
    assert e_off.observable
    assert abs(math.degrees(e_off.value - off)) < 0.05
    assert abs(e_off.value - off) < 4 * e_off.uncertainty
    assert res.usable_seconds >= 60.0
    # calibration removes the mean yaw-rate residual
    yaw = res.residuals[0]
    assert abs(yaw.mean_after) < 0.2 * abs(yaw.mean_before) and yaw.rms_after < yaw.rms_before


def test_offset_is_unbiased_with_understeer_present() -> None:
    # Gillespie: delta = L/R + K a_y. Ignoring K would bias the offset on a drive with more
    # left than right turns; the fit carries K as a nuisance term.
    off = math.radians(0.5)
    drive = make_drive(2, 200.0, offset=off, K=0.004, pair=False, curv=(0.004, 0.006))
    e = cal.calibrate(drive, config(), seed=2).estimates["vehicle.steering_offset"]
    assert abs(e.value - off) < 4 * e.uncertainty
    assert abs(math.degrees(e.value - off)) < 0.02


def test_standard_errors_cover_truth_over_seeds() -> None:
    # about 95 % of |error| < 1.96 se; with 20 seeds, P(X <= 16 | p = 0.95) = 1.6 %
    # (binomial, scipy.stats.binom.cdf(16, 20, 0.95) = 0.0159), so >= 17 is required.
    from scipy.stats import binom

    assert binom.cdf(16, 20, 0.95) == pytest.approx(0.0159, abs=5e-4)
    off, scale = -math.radians(1.0), 1.0 / 0.98
    hits_o = hits_s = 0
    z_o: list[float] = []
    for seed in range(20):
        drive = make_drive(100 + seed, 80.0, offset=off, scale=scale, pair=False, K=0.003)
        res = cal.calibrate(drive, config(), cal.SelectionRules(min_usable=30.0),
                            seed=seed, n_boot=100, fit_wheelbase=False, fit_cg=False)
        eo, es = res.estimates["vehicle.steering_offset"], \
            res.estimates["vehicle.wheel_speed_scale"]
        hits_o += abs(eo.value - off) < 1.96 * eo.uncertainty
        hits_s += abs(es.value - scale) < 1.96 * es.uncertainty
        z_o.append((eo.value - off) / eo.uncertainty)
    assert hits_o >= 17 and hits_s >= 17
    # and not grossly conservative: the spread of z is not far below 1
    assert np.std(z_o) > 0.5


def test_straight_drive_leaves_the_wheelbase_unobservable() -> None:
    res = cal.calibrate(make_drive(3, 120.0, straight=True, offset=0.01), config(), seed=3)
    e = res.estimates["vehicle.wheelbase"]
    assert not e.observable and e.reason and e.value == e.prior
    assert "vehicle.wheelbase" not in res.parameter_updates()
    assert res.estimates["vehicle.steering_offset"].observable


def test_constant_speed_leaves_understeer_and_wheelbase_apart() -> None:
    # at one speed a_y = v^2 kappa is proportional to kappa: L and K cannot be separated
    res = cal.calibrate(make_drive(4, 150.0, constant_speed=10.0, wheelbase=2.70), config(),
                        seed=4)
    e = res.estimates["vehicle.wheelbase"]
    assert not e.observable
    assert "correlation" in e.reason or "standard error" in e.reason


def test_wheelbase_recovered_when_excited() -> None:
    drive = make_drive(5, 300.0, wheelbase=2.76, lr=1.45, curv=(0.02, 0.01), pair=False)
    res = cal.calibrate(drive, config(), cal.SelectionRules(max_lateral_accel=3.0), seed=5)
    L = res.estimates["vehicle.wheelbase"]
    assert L.observable, L.reason
    assert abs(L.value - 2.76) < max(4 * L.uncertainty, 0.005)


# --------------------------------------------------------------------------------------------
# commonroad-vehicle-models: kinematic single-track model, rear-axle reference
def commonroad_drive(seed: int, duration: float, lf: float, lr: float, offset: float
                     ) -> list[Any]:
    """Rear-axle pose and twist from ``vehicle_dynamics_ks`` (own parameter values: a = l_f,
    b = l_r), integrated with scipy's solve_ivp; base_link at the rear axle."""
    from scipy.integrate import solve_ivp
    from vehiclemodels.utils.longitudinal_parameters import LongitudinalParameters
    from vehiclemodels.utils.steering_parameters import SteeringParameters
    from vehiclemodels.vehicle_dynamics_ks import vehicle_dynamics_ks
    from vehiclemodels.vehicle_parameters import VehicleParameters

    p = VehicleParameters(a=lf, b=lr,
                          steering=SteeringParameters(min=-0.6, max=0.6, v_min=-0.5, v_max=0.5),
                          longitudinal=LongitudinalParameters(v_min=0.0, v_max=40.0,
                                                              v_switch=20.0, a_max=3.0))
    rng = np.random.default_rng(seed)
    ph = rng.uniform(0, 2 * math.pi, 3)

    def inputs(t: float) -> list[float]:
        # steering rate and acceleration: delta = 0.03 sin + 0.015 sin, v = 9 + 3 sin
        steer_rate = (0.03 * 2 * math.pi / 37 * math.cos(2 * math.pi * t / 37 + ph[0])
                      + 0.015 * 2 * math.pi / 13 * math.cos(2 * math.pi * t / 13 + ph[1]))
        return [steer_rate, 3.0 * 2 * math.pi / 51 * math.cos(2 * math.pi * t / 51 + ph[2])]

    x0 = [0.0, 0.0, 0.03 * math.sin(ph[0]) + 0.015 * math.sin(ph[1]),
          9.0 + 3.0 * math.sin(ph[2]), 0.0]
    t = np.arange(0.0, duration, 0.01)
    sol = solve_ivp(lambda tt, x: vehicle_dynamics_ks(x, inputs(tt), p), (0.0, t[-1]), x0,
                    t_eval=t, rtol=1e-9, atol=1e-9, max_step=0.01)
    sx, sy, delta, v, yaw = sol.y
    r = v * np.tan(delta) / (lf + lr)
    out: list[Any] = []
    for k in range(len(t)):
        s = 2000.0 + t[k]
        w = v[k] / 0.31
        out.append(ChassisSample(s, steer=float(delta[k] - offset + rng.normal(0, 2e-4)),
                                 wheel_rear_left=float(w - r[k] * 0.775 / 0.31),
                                 wheel_rear_right=float(w + r[k] * 0.775 / 0.31)))
        if k % 2 == 0:
            out.append(LocalizationSample(s, float(sx[k]), float(sy[k]), float(yaw[k]),
                                          vx=float(v[k] + rng.normal(0, 0.02)), vy=0.0,
                                          yaw_rate=float(r[k] + rng.normal(0, 0.003))))
    return out


def test_commonroad_kinematic_drive_gives_offset_and_wheelbase() -> None:
    lf, lr, off = 1.32, 1.43, math.radians(0.6)
    drive = commonroad_drive(21, 200.0, lf, lr, off)
    cfg = config(**{"vehicle.cg_to_rear_axle": lr, "inputs.localization.reference_x": -lr})
    res = cal.calibrate(drive, cfg, seed=21)
    eo, eL = res.estimates["vehicle.steering_offset"], res.estimates["vehicle.wheelbase"]
    assert eo.observable and abs(eo.value - off) < 4 * eo.uncertainty
    assert eL.observable, eL.reason
    assert abs(eL.value - (lf + lr)) < 4 * eL.uncertainty
    # base_link at the rear axle: the CG lateral velocity l_r r (vy_cg = vy - reference_x r)
    lr_est = res.estimates["vehicle.cg_to_rear_axle"]
    assert abs(lr_est.fitted - lr) < 4 * lr_est.uncertainty


# --------------------------------------------------------------------------------------------
# steering given as a steering-wheel angle
def test_steering_wheel_angle_gives_ratio_and_offset() -> None:
    # steering read as a steering-wheel angle: delta_sw = rho (delta_true - offset); the
    # converter divides by the file's ratio (14), the calibration sees delta_sw / 14 and
    # reports new ratio = 14 x fitted factor (the rule of vehicle.steering_ratio)
    rho, off, rho_file = 15.5, math.radians(0.4), 14.0
    base = make_drive(11, 150.0, offset=off, pair=False, K=0.003)
    drive = [ChassisSample(s.stamp, steer=s.steer * rho / rho_file,
                           wheel_rear_left=s.wheel_rear_left,
                           wheel_rear_right=s.wheel_rear_right)
             if isinstance(s, ChassisSample) else s for s in base]
    res = cal.calibrate(drive, config(**{"vehicle.steering_ratio": rho_file}), seed=11)
    er, eo = res.estimates["vehicle.steering_ratio"], res.estimates["vehicle.steering_offset"]
    assert res.steering_input == "steering_wheel"
    assert er.observable and abs(er.value - rho) < max(4 * er.uncertainty, 0.01 * rho)
    assert abs(eo.value - off) < max(4 * eo.uncertainty, 1e-4)
    assert not res.estimates["vehicle.wheelbase"].observable
    # with the file's ratio right the factor is 1: the calibration does not divide again
    same = [ChassisSample(s.stamp, steer=s.steer, wheel_rear_left=s.wheel_rear_left,
                          wheel_rear_right=s.wheel_rear_right)
            if isinstance(s, ChassisSample) else s for s in base]
    er2 = cal.calibrate(same, config(**{"vehicle.steering_ratio": rho}),
                        seed=11).estimates["vehicle.steering_ratio"]
    assert abs(er2.value - rho) < max(4 * er2.uncertainty, 0.01 * rho)


def test_steering_input_rule() -> None:
    # JointState steering is a steering-wheel angle exactly when the ratio is not 1; a
    # single-value input says so with inputs.steering.kind
    def rule(**over: object) -> bool:
        return cal.steering_wheel_input(validation.validate({**FILE, **over}))

    assert not rule()
    assert rule(**{"vehicle.steering_ratio": 15.0})
    assert not rule(**{"vehicle.steering_ratio": 15.0, "inputs.steering.topic": "/steer",
                       "inputs.steering.kind": "road_wheel"})
    assert rule(**{"vehicle.steering_ratio": 15.0, "inputs.steering.topic": "/steer",
                   "inputs.steering.kind": "steering_wheel"})


def test_calibrate_recovers_wrong_ratio_from_joint_states() -> None:
    # true ratio 15.5, file says 14: the converter divides the steering-wheel joints by 14;
    # calibrate must report 15.5 (= 14 x fitted factor). Kinematic drive of make_drive.
    from kinematic_monitor.io import convert

    rho, rho_file = 15.5, 14.0
    jm = convert.JointMap(("sl", "sr"), ("fl", "fr"), ("rl", "rr"), steering_ratio=rho_file)
    names = ("sl", "sr", "fl", "fr", "rl", "rr")
    drive: list[object] = []
    for s in make_drive(13, 150.0, pair=True, K=0.003):
        if isinstance(s, ChassisSample):
            c = convert.chassis_from_joint_state(
                s.stamp, names, (s.steer_left * rho, s.steer_right * rho, 0, 0, 0, 0),
                (0, 0, s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left,
                 s.wheel_rear_right), jm)
            assert isinstance(c, ChassisSample)
            drive.append(c)
        else:
            drive.append(s)
    res = cal.calibrate(drive, config(**{"vehicle.steering_ratio": rho_file}), seed=13)
    er = res.estimates["vehicle.steering_ratio"]
    assert res.steering_input == "steering_wheel"
    assert er.observable, er.reason
    assert abs(er.value - rho) < max(4 * er.uncertainty, 0.005 * rho)
    assert abs(er.value - rho) < 0.02 * rho


# --------------------------------------------------------------------------------------------
# steering ratio convention on JointState: converters divide, the core never does
def _sim_records(duration: float, seed: int, faults: list[object]
                 ) -> tuple[list[object], object, object]:
    from kinematic_monitor.sim import sensors
    from kinematic_monitor.sim.faults import apply_faults
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS["gentle_loop"](), duration=duration, seed=seed)
    scfg = sensors.SensorConfig()
    scfg.gnss.rate_hz = 0.0
    series = sensors.sample_truth(trace, scfg)
    apply_faults(series, faults)  # type: ignore[arg-type]
    sensors.add_noise(series, scfg, seed + 1000)
    return list(sensors.iter_records(series, scfg)), scfg, trace


def _as_steering_wheel(records: list[object], ratio: float) -> list[object]:
    """JointState records whose steer joints report steering-wheel angles (x ratio)."""
    from kinematic_monitor.sim import sensors

    out: list[object] = []
    for r in records:
        if isinstance(r, sensors.JointStateRecord):
            pos = tuple(p * ratio if i < 2 else p for i, p in enumerate(r.position))
            r = replace(r, position=pos)
        out.append(r)
    return out


def _samples(records: list[object], scfg: object, ratio: float) -> list[object]:
    from grading import sample_from_record
    from kinematic_monitor.io import convert

    js = scfg.joint_states  # type: ignore[attr-defined]
    jmap = convert.JointMap(js.steer_joints, js.wheel_joints[:2], js.wheel_joints[2:],
                            steering_ratio=ratio)
    out = [s for r in records if (s := sample_from_record(r, jmap)) is not None
           and not isinstance(s, convert.Rejected)]
    out.sort(key=lambda s: s.stamp)  # type: ignore[attr-defined]
    return out


def test_joint_state_steering_wheel_angles_match_road_wheel_run() -> None:
    # ratio 15 with steering-wheel joints must give the monitor exactly what ratio 1 with
    # road-wheel joints gives: same events, same predictions (the core never divides)
    from grading import monitor_config
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.sim.faults import SteeringOffset

    records, scfg, trace = _sim_records(45.0, 4, [SteeringOffset(offset=math.radians(3.0))])
    runs = []
    for ratio, recs in ((1.0, records), (15.0, _as_steering_wheel(records, 15.0))):
        samples = _samples(recs, scfg, ratio)
        m = Monitor(validation.validate(monitor_config(trace.vehicle,
                                                   {"vehicle.steering_ratio": ratio})))
        preds = []
        for s in samples:
            m.process(s)
            if isinstance(s, LocalizationSample):
                p = m.prediction()
                if p is not None:
                    preds.append((p.stamp, p.x, p.y, p.yaw, p.v, p.yaw_rate))
        m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
        runs.append((samples, [(e.kind, e.start, e.end) for e in m.events], np.array(preds)))
    (s1, ev1, p1), (s15, ev15, p15) = runs
    # the converter hands over road-wheel angles (x 15 / 15 is exact to rounding)
    c1 = [s for s in s1 if isinstance(s, ChassisSample)]
    c15 = [s for s in s15 if isinstance(s, ChassisSample)]
    assert len(c1) == len(c15) > 1000
    assert max(abs(a.steer_left - b.steer_left) for a, b in zip(c1, c15, strict=True)) < 1e-15
    assert ev1 == ev15
    assert ev1, "the 3 deg offset should raise an event (otherwise the comparison is empty)"
    assert p1.shape == p15.shape and len(p1) > 100
    np.testing.assert_allclose(p15, p1, rtol=0, atol=1e-9)


def test_steering_wheel_joint_angles_beyond_range_rejected_after_division() -> None:
    # max_road_wheel_angle applies to the road-wheel angle, i.e. after the division
    from kinematic_monitor.io import convert

    jm = convert.JointMap(("sl", "sr"), steering_ratio=15.0)
    ok = convert.chassis_from_joint_state(1.0, ("sl", "sr"), (6.0, 6.0), (), jm, 0.5)
    assert isinstance(ok, ChassisSample) and ok.steer_left == pytest.approx(0.4)
    bad = convert.chassis_from_joint_state(1.0, ("sl", "sr"), (9.0, 9.0), (), jm, 0.5)
    assert isinstance(bad, convert.Rejected) and bad.reason == "steer_out_of_range"
    with pytest.raises(ValueError, match="steering_ratio"):
        convert.JointMap(("sl", "sr"), steering_ratio=0.0)
