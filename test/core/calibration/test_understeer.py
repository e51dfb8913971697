"""Understeer gradient K from steady-state cornering (Gillespie 1992, ch. 6: delta = L/R +
K a_y; ISO 4138 constant-radius method), on drives from test/fixtures and the simulator."""

from __future__ import annotations

import math

import pytest

from fixtures.calibration import circle_ramp, config, make_drive
from kinematic_monitor.config import validation
from kinematic_monitor.core import calibration as cal

NAME = "vehicle.understeer_gradient"


def test_understeer_gradient_from_circle_speed_ramp() -> None:
    # constant radius 40 m, speed rising slowly (ISO 4138 constant-radius method)
    Kt = 0.0035
    drive = make_drive(6, 120.0, K=Kt, pair=False, curv=(0.0, 0.0))
    res = cal.calibrate([drive, circle_ramp(Kt, seed=6)], config(), seed=6)
    e = res.estimates[NAME]
    assert e.observable, e.reason
    assert abs(e.value - Kt) < 0.05 * Kt
    assert res.k_usable_seconds > res.usable_seconds - 1.0


def test_degrees_per_g() -> None:
    # deg/g conversion: K [rad/(m/s^2)] * g * 180/pi; 0.0035 -> 1.9665 deg/g [C]
    # (g = 9.80665 m/s^2, ISO 80000-3)
    assert cal.per_g_degrees(0.0035) == pytest.approx(0.0035 * 9.80665 * 180 / math.pi)
    assert cal.per_g_degrees(0.0035) == pytest.approx(1.9665, abs=1e-4)


def test_too_little_lateral_acceleration_spread() -> None:
    e = cal.calibrate(make_drive(3, 120.0, straight=True), config(), seed=3).estimates[NAME]
    assert not e.observable and e.value == e.prior
    assert "lateral acceleration spread" in e.reason and "ISO 4138" in e.reason


@pytest.mark.slow
def test_understeer_gradient_from_simulated_ramp_steer() -> None:
    # the simulator's dynamic single-track model with Magic-Formula tyres; its linear
    # understeer gradient K = W_f/C_af - W_r/C_ar (Gillespie 1992, ch. 6) is
    # SimVehicle.understeer_gradient(). Constant radius 40 m, speed ramp 6 -> 11.5 m/s in
    # 60 s (ISO 4138 constant-radius method, quasi-steady); acceptance: within 10 %.
    from kinematic_monitor.io import convert
    from kinematic_monitor.sim import sensors
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    sc = SCENARIOS["skidpad_circle"](radius=40.0, speed=6.0, ramp_to=11.5, ramp_time=60.0,
                                     duration=70.0)
    trace = simulate(sc, seed=2)
    scfg = sensors.SensorConfig()
    scfg.gnss.rate_hz = 0.0
    scfg.imu.rate_hz = 50.0
    series = sensors.sample_truth(trace, scfg)
    sensors.add_noise(series, scfg, 3)
    jm = convert.JointMap(sensors.STEER_JOINTS, sensors.WHEEL_JOINTS[:2],
                          sensors.WHEEL_JOINTS[2:])
    samples: list[object] = []
    for r in sensors.iter_records(series, scfg):
        st = r.stamp_ns * 1e-9
        if isinstance(r, sensors.JointStateRecord):
            s = convert.chassis_from_joint_state(st, r.name, r.position, r.velocity, jm)
        elif isinstance(r, sensors.OdometryRecord):
            s = convert.localization_from_odometry(st, r.frame_id, r.position, r.orientation,
                                                   r.pose_covariance, r.linear, r.angular,
                                                   r.twist_covariance)
        else:
            continue
        if not isinstance(s, convert.Rejected):
            samples.append(s)
    samples.sort(key=lambda s: s.stamp)  # type: ignore[attr-defined]
    v = trace.vehicle
    cfg = validation.validate({"vehicle.wheelbase": v.wheelbase,
                               "vehicle.cg_to_rear_axle": v.cg_to_rear_axle,
                               "vehicle.wheel_radius": v.wheel_radius,
                               "vehicle.track_width": v.track_width})
    res = cal.calibrate(samples, cfg, cal.SelectionRules(min_usable=20.0), seed=0)
    e = res.estimates[NAME]
    k_true = v.understeer_gradient()
    assert e.observable, e.reason
    assert abs(e.value / k_true - 1.0) < 0.10
    assert any("one turn direction" in n for n in res.notes)
