"""Tests of the monitor core on hand-built sample sequences (test/fixtures/drives.py).

The sequences are made with the kinematic bicycle equations (Rajamani 2012, CG reference:
β = atan(l_r tan δ / L), ψ̇ = v cos β tan δ / L) and Ackermann geometry, with Gaussian
noise of the standard deviations stated in the configuration (so the thresholds derived
from that noise are tested against data that has exactly that noise). Faults are injected
by construction; see ``drive``.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from fixtures.drives import Faults, config, drive, run, sine_steer
from kinematic_monitor.config.validation import validate
from kinematic_monitor.core import model
from kinematic_monitor.core.levels import ERROR, OK, STALE, WARN
from kinematic_monitor.core.monitor import Monitor
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample
from kinematic_monitor.io.event_files import events_to_json


@pytest.fixture(scope="module")
def clean_drive() -> list[object]:
    # 90 s at 12 m/s, steering ±0.045 rad: |a_y| up to v² tan δ / L ≈ 2.4 m/s² ≈ 0.25 g,
    # inside the kinematic envelope 0.5·μ·g for dry road (Polack et al. 2017, from memory)
    return drive(90.0, lambda t: 12.0, sine_steer(0.045, 9.0), seed=7)


def test_no_warning_on_clean_dry_driving(clean_drive: list[object]) -> None:
    m = run(clean_drive)
    m.flush(clean_drive[-1].stamp)  # type: ignore[attr-defined]
    assert m.events == [], [e.to_dict() for e in m.events]
    levels = {s.name: s.level for s in m.statuses()}
    assert all(lv == OK for lv in levels.values()), levels
    assert m.counters["rejected_nan"] == 0 and m.counters["internal_errors"] == 0
    assert m.counters["filter_errors"] == 0
    # the 0.25 g drive really was moderate (grip in use reported as |a_y|/g)
    grip = next(s for s in m.statuses() if s.name.endswith("grip"))
    assert 0.0 < float(grip.values["grip_in_use [g]"]) < 0.3


def test_statuses_names_and_units(clean_drive: list[object]) -> None:
    m = run(clean_drive[:3000])
    names = [s.name for s in m.statuses()]
    assert all(n.startswith("kinematic_monitor: ") for n in names)  # REP 107 naming
    assert "kinematic_monitor: yaw rate" in names
    yaw = next(s for s in m.statuses() if s.name == "kinematic_monitor: yaw rate")
    assert any("[rad/s]" in k for k in yaw.values)
    assert all(isinstance(v, str) for v in yaw.values.values())


def test_prediction_tracks_localisation(clean_drive: list[object]) -> None:
    m = run(clean_drive[:6000])
    pred = m.prediction()
    assert pred is not None
    last_loc = [s for s in clean_drive[:6000] if isinstance(s, LocalizationSample)][-1]
    assert math.hypot(pred.x - last_loc.x, pred.y - last_loc.y) < 0.5
    assert len(pred.pose_cov) == 9


def test_causality_prefix_gives_same_events() -> None:
    # an understeer episode from 10 s to 14 s
    f = Faults(yaw_factor=lambda t: 0.6 if 10.0 <= t < 14.0 else 1.0)
    samples = drive(20.0, lambda t: 12.0, lambda t: 0.06, f, seed=3)
    full = run(samples)
    full.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    assert full.events
    cut = 1000.0 + 12.0
    prefix = run([s for s in samples if s.stamp < cut])  # type: ignore[attr-defined]
    early = [e for e in full.events if e.detected_at < cut]
    assert [(e.kind, e.start, e.detected_at) for e in prefix.events] == [
        (e.kind, e.start, e.detected_at) for e in early
    ]


def test_standstill_reports_inactive() -> None:
    samples = drive(5.0, lambda t: 0.0, lambda t: 0.1, seed=2)
    m = run(samples)
    assert m.events == []
    yaw = next(s for s in m.statuses() if s.name == "kinematic_monitor: yaw rate")
    assert yaw.level == OK and yaw.message == "inactive below 1.0 m/s"


def test_nan_sample_is_counted_not_raised() -> None:
    m = Monitor(validate(config()))
    m.process(ImuSample(stamp=1.0, yaw_rate=math.nan))
    m.process(LocalizationSample(stamp=math.nan, x=0.0, y=0.0, yaw=0.0))
    m.process(ChassisSample(stamp=1.1))  # no steering at all
    m.process("not a sample")
    assert m.counters["rejected_nan"] == 3
    assert m.counters["rejected_type"] == 1
    assert all(math.isfinite(float(v)) or v == "nan" for s in m.statuses()
               for v in s.values.values())


def test_out_of_order_sample_rejected() -> None:
    m = Monitor(validate(config()))
    m.process(ImuSample(stamp=2.0, yaw_rate=0.0))
    m.process(ImuSample(stamp=1.0, yaw_rate=0.0))
    assert m.counters["rejected_out_of_order"] == 1


def test_time_reset_marker_restarts_cleanly() -> None:
    samples = drive(3.0, lambda t: 10.0, lambda t: 0.0, seed=4)
    m = run(samples)
    m.process(TimeReset(stamp=5.0, previous=1003.0))
    assert m.counters["time_resets"] == 1
    for s in drive(3.0, lambda t: 10.0, lambda t: 0.0, seed=5, t0=5.0):
        m.process(s)
    assert m.counters["rejected_out_of_order"] == 0
    assert m.events == []


def test_silent_input_gives_input_stale_and_stale_status() -> None:
    f = Faults(silent_imu=(5.0, 8.0))
    samples = drive(10.0, lambda t: 10.0, lambda t: 0.02, f, seed=6)
    m = run([s for s in samples if s.stamp < 1007.0])  # type: ignore[attr-defined]
    st = {s.name: s for s in m.statuses()}
    assert st["kinematic_monitor: input imu"].level == STALE
    assert st["kinematic_monitor: yaw rate"].level == STALE
    for s in samples:
        if s.stamp >= 1007.0:  # type: ignore[attr-defined]
            m.process(s)
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    stale = [e for e in m.events if e.kind == "input_stale"]
    assert len(stale) == 1
    e = stale[0]
    # the IMU is optional: WARN; silent from 1005.0, timeout 0.5 s
    assert e.level == WARN
    assert 1005.0 <= e.start <= 1005.6 and e.detected_at <= 1005.7
    assert 1007.9 <= e.end <= 1008.2


def test_check_stale_with_external_clock() -> None:
    m = run(drive(2.0, lambda t: 10.0, lambda t: 0.0, seed=8))
    m.check_stale(1010.0)
    levels = {s.name: s.level for s in m.statuses()}
    assert levels["kinematic_monitor: input joint_states"] == STALE
    trans = m.pop_transitions()
    assert [t.type for t in trans] == ["start"]
    assert trans[0].event.kind == "input_stale" and trans[0].event.level == ERROR


def test_event_json_matches_contract_schema() -> None:
    f = Faults(yaw_factor=lambda t: 0.6 if 5.0 <= t < 8.0 else 1.0)
    samples = drive(11.0, lambda t: 12.0, lambda t: 0.06, f, seed=9)
    m = run(samples)
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    doc = json.loads(json.dumps(events_to_json("/bags/x", m.events), allow_nan=False))
    # docs/interface.md section 4: schema name and exactly these keys
    assert set(doc) == {"schema", "source", "events"}
    assert doc["schema"] == "kinematic_monitor.events/1"
    assert doc["events"]
    for e in doc["events"]:
        assert set(e) == {"start", "end", "detected_at", "kind", "level", "position", "peak",
                          "summary"}
        assert e["level"] in ("WARN", "ERROR")
        assert e["start"] <= e["detected_at"] and e["start"] <= e["end"]
        assert len(e["position"]) == 2
        assert all(isinstance(v, float) for v in e["peak"].values())


def test_transitions_pair_up() -> None:
    f = Faults(yaw_factor=lambda t: 0.6 if 5.0 <= t < 8.0 else 1.0)
    samples = drive(12.0, lambda t: 12.0, lambda t: 0.06, f, seed=10)
    m = run(samples)
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    trans = m.pop_transitions()
    assert m.pop_transitions() == []
    starts = [t.event for t in trans if t.type == "start"]
    ends = [t.event for t in trans if t.type == "end"]
    assert starts == ends == m.events


# ----------------------------------------------------------------------- simulated drive
def test_simulated_ice_patch_raises_lateral_slip_within_one_second() -> None:
    """Dynamic single-track simulation (kinematic_monitor.sim, Pacejka tyres) of a 40 m
    skid-pad circle crossing an ice patch; truth onset from the simulator's own truth."""
    from kinematic_monitor.core.ordering import ReorderBuffer
    from kinematic_monitor.io import convert
    from kinematic_monitor.sim import scenarios, sensors, truth
    from kinematic_monitor.sim.bagout import vehicle_params

    sc = scenarios.circle_ice_patch()
    trace = scenarios.simulate(sc, duration=20.0, seed=1)
    scfg = sensors.SensorConfig()
    series = sensors.sample_truth(trace, scfg)
    sensors.add_noise(series, scfg, seed=1)
    epoch = scfg.epoch_ns * 1e-9
    js, od, im = scfg.joint_states, scfg.odometry, scfg.imu
    jmap = convert.JointMap(js.steer_joints, js.wheel_joints[:2], js.wheel_joints[2:])
    cfg = dict(vehicle_params(sc.vehicle))
    cfg.update({
        "noise.steering_angle_std": js.steer_std, "noise.wheel_speed_std": js.wheel_speed_std,
        "noise.imu_yaw_rate_std": im.gyro_std, "noise.imu_accel_std": im.accel_std,
        "noise.localization_position_std": od.position_std,
        "noise.localization_yaw_std": od.yaw_std,
        "noise.localization_velocity_std": od.velocity_std,
    })
    m = Monitor(validate(cfg))
    buf = ReorderBuffer(lag=0.05, reset_threshold=1.0)
    for r in sensors.iter_records(series, scfg):
        st = r.stamp_ns * 1e-9
        if isinstance(r, sensors.JointStateRecord):
            s = convert.chassis_from_joint_state(st, r.name, r.position, r.velocity, jmap)
        elif isinstance(r, sensors.OdometryRecord):
            s = convert.localization_from_odometry(
                st, r.frame_id, r.position, r.orientation, r.pose_covariance, r.linear,
                r.angular, r.twist_covariance)
        elif isinstance(r, sensors.ImuRecord):
            s = convert.imu_from_fields(
                st, r.orientation, r.orientation_covariance, r.angular_velocity,
                r.angular_velocity_covariance, r.linear_acceleration,
                r.linear_acceleration_covariance)
        else:
            continue
        assert not isinstance(s, convert.Rejected), s
        for x in buf.push(s):
            m.process(x)
    for x in buf.flush():
        m.process(x)
    m.flush(m.now)
    # the ice episode: the longest true lateral-slip interval
    ice = max((iv for iv in truth.truth_intervals(trace) if iv.kind == "lateral_slip"),
              key=lambda iv: iv.duration)
    assert ice.duration > 1.0
    onset = epoch + ice.start
    slips = [e for e in m.events if e.kind == "lateral_slip"]
    assert slips, [e.to_dict() for e in m.events]
    hit = [e for e in slips if abs(e.detected_at - onset) <= 1.0]
    assert hit, (onset, [e.to_dict() for e in slips])
    assert "understeer" in hit[0].summary
    # nothing raised on the dry part of the circle before the ice
    assert all(e.detected_at >= onset - 0.5 for e in m.events), [e.to_dict() for e in m.events]


def test_hostile_but_finite_samples_never_raise() -> None:
    # extreme finite values: steering beyond range, reverse, zero covariance, huge rates
    rng = np.random.default_rng(99)
    m = Monitor(validate(config()))
    t = 10.0
    for _ in range(3000):
        t += float(rng.uniform(0.0, 0.02))
        k = int(rng.integers(0, 3))
        big = float(rng.choice([1e-9, 1.0, 1e3, 1e9])) * float(rng.normal())
        if k == 0:
            m.process(ChassisSample(t, steer_left=float(rng.normal(0, 0.5)),
                                    steer_right=float(rng.normal(0, 0.5)),
                                    wheel_front_left=big, wheel_front_right=big,
                                    wheel_rear_left=big, wheel_rear_right=-big))
        elif k == 1:
            m.process(LocalizationSample(t, x=big, y=-big, yaw=big, vx=big, vy=big,
                                         yaw_rate=big, pose_cov=(0.0,) * 9))
        else:
            m.process(ImuSample(t, yaw_rate=big, ax=big, ay=-big))
    m.flush(t)
    assert m.counters["internal_errors"] == 0, m.notes[:3]
    for st in m.statuses():
        assert st.level in (0, 1, 2, 3)
    json.dumps(events_to_json("x", m.events), allow_nan=False)


# ------------------------------------------------------ steering and speed on separate topics
def _split_chassis(samples: list[object], speed_lag: float = 0.004) -> list[object]:
    """Each JointState-like sample -> a steer-only sample (bicycle angle) and, ``speed_lag``
    s later, a speed-only sample (CG speed), as from Float64 and TwistStamped topics."""
    p = model.VehicleParams(2.70, 1.35, 0.31, 1.55)
    out: list[object] = []
    for s in samples:
        if isinstance(s, ChassisSample):
            d = model.ackermann_to_bicycle(s.steer_left, s.steer_right, p)
            v = model.cg_speed_from_rear_wheels(s.wheel_rear_left, s.wheel_rear_right, d, p)
            out.append(ChassisSample(s.stamp, steer=d))
            out.append(ChassisSample(s.stamp + speed_lag, speed=v))
        else:
            out.append(s)
    out.sort(key=lambda s: s.stamp)  # type: ignore[attr-defined]
    return out


def test_separate_steer_only_and_speed_only_samples_drive_the_monitor() -> None:
    # steady circle, delta = 0.05 rad at 10 m/s; kinematic bicycle (Rajamani 2012, CG form):
    # yaw rate = v cos(beta) tan(delta) / L, beta = atan(l_r tan(delta) / L)
    delta, v = 0.05, 10.0
    samples = _split_chassis(drive(8.0, lambda t: v, lambda t: delta, seed=3))
    m = run(samples)
    assert m.counters["rejected_nan"] == 0
    assert m.counters.get("chassis_partial", 0) == 1  # only the very first steer-only sample
    pred = m.prediction()
    assert pred is not None
    beta = math.atan(1.35 * math.tan(delta) / 2.70)
    expected = v * math.cos(beta) * math.tan(delta) / 2.70
    assert pred.yaw_rate == pytest.approx(expected, rel=0.05)
    assert pred.v == pytest.approx(v, rel=0.02)
    m.flush(samples[-1].stamp)  # type: ignore[attr-defined]
    assert m.events == [], [e.to_dict() for e in m.events]


def test_held_steering_expires_after_the_joint_states_timeout() -> None:
    # steering stops after 1 s; speed-only samples may reuse it for timeouts.joint_states
    # (0.5 s), after which they only update the speed (counted as partial)
    t0 = 1000.0
    m = Monitor(validate(config()))
    m.process(ChassisSample(t0, steer=0.02))
    for k in range(1, 301):  # 3 s of speed at 100 Hz
        m.process(ChassisSample(t0 + 0.01 * k + 0.005, speed=5.0))
    # speed samples up to t0 + 0.5 s (49 of them) complete a chassis sample; the rest are
    # partial, plus the lone steering sample at the start
    assert m.counters["chassis_partial"] == 1 + (300 - 49)
    assert m.counters["rejected_nan"] == 0


def test_series_values_carry_the_statuses_levels_and_figures() -> None:
    # the cheap numeric read-out for time-series rows must say what statuses() says
    # (consistency of two read-outs of one state; no outside source involved)
    f = Faults(silent_imu=(5.0, 6.5))
    samples = drive(12.0, lambda t: 12.0, sine_steer(0.05, 4.0), f, seed=5)
    m = Monitor(validate(config()))
    seen_stale = False
    for i, s in enumerate(samples):
        m.process(s)
        if i % 97:
            continue
        levels, values = m.series_values()
        statuses = m.statuses()
        assert len(levels) == len(statuses)
        expected: dict[str, float] = {}
        for st in statuses:
            check = st.name.split(": ", 1)[1].replace(" ", "_")
            assert levels[check] == st.level, check
            seen_stale = seen_stale or st.level == STALE
            for key, text in st.values.items():
                v = float(text)
                if math.isfinite(v):
                    expected[f"{check}.{key}"] = v
        assert set(values) == set(expected)
        for key, v in values.items():
            assert f"{v:.6g}" == f"{expected[key]:.6g}", key
    assert seen_stale


def test_stamp_no_message_can_carry_is_rejected_and_counted() -> None:
    # builtin_interfaces/msg/Time holds int32 sec + uint32 nanosec (ROS 2 interface
    # definition), so a stamp >= 2**31 s or <= 0 cannot come from a message
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.core.samples import ImuSample

    mon = Monitor(validate({"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
                            "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55}))
    for stamp in (1.797693134862316e307, float(2**31), -5.0, 0.0):
        mon.process(ImuSample(stamp, 0.0, 0.0, 0.0))
    assert mon.counters["rejected_bad_stamp"] == 4
    assert mon.counters["internal_errors"] == 0 and mon.counters["samples"] == 0
