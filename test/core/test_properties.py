"""Property-based tests (hypothesis) on the core and the message converters.

Properties and their sources:
* any finite sample sequence keeps the filter state finite and its covariance symmetric
  positive definite: the defining invariant of a Kalman filter's covariance (Simon,
  "Optimal State Estimation", 2006, section 5.1; filterpy documents ``P`` as the
  covariance matrix), and the project rule "never a NaN reaching the filter state";
* processing does not depend on message arrival order within the reorder window: a
  delivery order in which every message is late by less than the window gives exactly
  the result of stamp order (the guarantee of a fixed-lag reorder buffer; Akidau et al.,
  "The Dataflow Model", VLDB 2015, section 3.3, for the watermark rule);
* converters never raise: they return a sample whose used fields are finite or a
  ``Rejected`` with a documented reason; the yaw of any non-degenerate quaternion equals
  transforms3d's ``quat2euler(..., 'rzyx')[0]`` of the normalised quaternion
  (transforms3d documentation, euler module).
Bounded examples (deadline=None) keep the module well under the time budget.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from kinematic_monitor.config import validation
from kinematic_monitor.config.validation import validate
from kinematic_monitor.core import ordering
from kinematic_monitor.core.monitor import Monitor
from kinematic_monitor.core.samples import (
    ChassisSample,
    GnssSample,
    ImuSample,
    LocalizationSample,
)
from kinematic_monitor.io import convert

GEOMETRY = {"vehicle.wheelbase": 2.70, "vehicle.cg_to_rear_axle": 1.35,
            "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55}
CFG = validation.validate({**GEOMETRY, "inputs.gnss.topic": ""})
T0 = 1_800_000_000.0
SETTINGS = settings(max_examples=50, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
small = st.floats(-1e3, 1e3, allow_nan=False)
steer = st.floats(-0.8, 0.8, allow_nan=False)  # a little beyond the 0.7 rad default range
wheel = st.floats(-150.0, 150.0, allow_nan=False)  # rad/s
cov9 = st.tuples(*[st.floats(-1.0, 10.0, allow_nan=False)] * 9)  # not necessarily PSD


def _chassis(t: float, d: Any) -> ChassisSample:
    return ChassisSample(t, steer_left=d[0], steer_right=d[1], wheel_front_left=d[2],
                         wheel_front_right=d[3], wheel_rear_left=d[4], wheel_rear_right=d[5])


chassis_data = st.tuples(steer, steer, wheel, wheel, wheel, wheel)
loc_data = st.tuples(small, small, st.floats(-4.0, 4.0), st.floats(-60.0, 60.0),
                     st.floats(-20.0, 20.0), st.floats(-3.0, 3.0), cov9)
imu_data = st.tuples(st.floats(-3.0, 3.0), st.floats(-30.0, 30.0), st.floats(-30.0, 30.0))


@st.composite
def sample_sequences(draw: Any, max_size: int = 60) -> list[Any]:
    """Stamp-ordered mixed samples with finite fields (gaps 0.1 ms .. 2 s)."""
    n = draw(st.integers(1, max_size))
    t = T0
    out: list[Any] = []
    for _ in range(n):
        t += draw(st.sampled_from([1e-4, 0.005, 0.01, 0.02, 0.1, 0.6, 2.0]))
        kind = draw(st.sampled_from(["js", "js", "loc", "imu"]))
        if kind == "js":
            out.append(_chassis(t, draw(chassis_data)))
        elif kind == "loc":
            x, y, yaw, vx, vy, wz, c = draw(loc_data)
            out.append(LocalizationSample(t, x, y, yaw, vx=vx, vy=vy, yaw_rate=wz, pose_cov=c,
                                          twist_cov=c))
        else:
            wz, ax, ay = draw(imu_data)
            out.append(ImuSample(t, wz, ax, ay))
    return out


def _healthy(mon: Monitor) -> None:
    assert mon.counters["internal_errors"] == 0, mon.notes[-3:]
    ekf = mon.filter.ekf  # the core's filter
    if ekf is None:
        return
    x = np.asarray(ekf.state, dtype=float)
    p = np.asarray(ekf.covariance, dtype=float)
    assert np.all(np.isfinite(x)) and np.all(np.isfinite(p)), (x, p)
    assert np.allclose(p, p.T, rtol=1e-9, atol=1e-12)
    assert np.linalg.eigvalsh(0.5 * (p + p.T)).min() > 0.0


@SETTINGS
@given(seq=sample_sequences())
def test_any_finite_sequence_keeps_state_finite_and_covariance_spd(seq: list[Any]) -> None:
    mon = Monitor(validate(CFG))
    for s in seq:
        mon.process(s)
        _healthy(mon)
    mon.flush(seq[-1].stamp + 1.0)
    for st_ in mon.statuses():
        assert 0 <= int(st_.level) <= 3  # REP 107 levels
    for ev in mon.events:
        assert math.isfinite(ev.start) and math.isfinite(ev.end)


def _result(mon: Monitor) -> Any:
    pred = mon.prediction()
    evs = [(e.kind, e.level, e.start, e.end, e.detected_at) for e in mon.events]
    p = None if pred is None else (pred.x, pred.y, pred.yaw, pred.v, tuple(pred.pose_cov))
    return evs, p, {k: v for k, v in mon.counters.items()}


@st.composite
def streams_with_delays(draw: Any) -> tuple[list[tuple[str, Any]], list[float]]:
    """Three streams (own stamp grids, no ties across streams), per-message delays."""
    seconds = draw(st.floats(0.5, 3.0))
    items: list[tuple[str, Any]] = []
    speed = draw(st.floats(-5.0, 20.0))
    r = GEOMETRY["vehicle.wheel_radius"]
    for name, period, offset in (("joint_states", 0.01, 0.0), ("localization", 0.02, 0.0031),
                                 ("imu", 0.005, 0.0017)):
        n = int(seconds / period)
        for i in range(n):
            t = T0 + offset + i * period
            if name == "joint_states":
                d = draw(st.floats(-0.3, 0.3))
                w = speed / r + draw(st.floats(-0.5, 0.5))
                items.append((name, _chassis(t, (d, d, w, w, w, w))))
            elif name == "localization":
                x = speed * (t - T0) + draw(st.floats(-0.05, 0.05))
                c = (4e-4, 0, 0, 0, 4e-4, 0, 0, 0, 1e-5)
                items.append((name, LocalizationSample(t, x, 0.0, 0.0, vx=speed, vy=0.0,
                                                       yaw_rate=0.0, pose_cov=c)))
            else:
                items.append((name, ImuSample(t, draw(st.floats(-0.01, 0.01)), 0.0, 0.0)))
    items.sort(key=lambda it: it[1].stamp)
    lag = CFG.inputs.reorder_window
    delays = [draw(st.floats(0.0, 0.95 * lag)) for _ in items]
    return items, delays


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.data_too_large])
@given(data=streams_with_delays(), watermark=st.booleans())
def test_result_independent_of_arrival_order_within_the_window(
        data: tuple[list[tuple[str, Any]], list[float]], watermark: bool) -> None:
    items, delays = data
    lag = CFG.inputs.reorder_window
    ref = Monitor(validate(CFG))
    for _, s in items:
        ref.process(s)
    # arrival = stamp + delay (< window): a different delivery order across streams; with
    # the node's watermark release each stream keeps its own order (one DDS topic does)
    arrival = [s.stamp + d for (_, s), d in zip(items, delays, strict=True)]
    if watermark:
        latest: dict[str, float] = {}
        for i, (name, _) in enumerate(items):
            arrival[i] = latest[name] = max(arrival[i], latest.get(name, -math.inf))
    order = sorted(range(len(items)), key=lambda i: arrival[i])
    to = CFG.timeouts
    buf = ordering.ReorderBuffer(
        lag, reset_threshold=max(1.0, 2.0 * lag + 0.5), watermark=watermark,
        stream_timeouts={"joint_states": to.joint_states, "localization": to.localization,
                         "imu": to.imu}, default_timeout=1.0)
    mon = Monitor(validate(CFG))
    for i in order:
        name, s = items[i]
        for out in buf.push(s, name):
            mon.process(out)
    for out in buf.flush():
        mon.process(out)
    assert buf.late_dropped == 0
    assert _result(mon) == _result(ref)


# --- converters -----------------------------------------------------------------------------

JMAP = convert.JointMap(("fl_steer", "fr_steer"), ("fl", "fr"), ("rl", "rr"))
NAMES = ["fl_steer", "fr_steer", "fl", "fr", "rl", "rr", "other", ""]
any_float = st.floats(width=64)  # NaN and infinities included


@SETTINGS
@given(sec=st.integers(-2**31, 2**31 - 1), ns=st.integers(0, 2**32 - 1),
       names=st.lists(st.sampled_from(NAMES), max_size=9),
       pos=st.lists(any_float, max_size=9), vel=st.lists(any_float, max_size=9))
def test_joint_state_converter_never_raises(sec: int, ns: int, names: list[str],
                                            pos: list[float], vel: list[float]) -> None:
    got = convert.chassis_from_joint_state(convert.stamp_seconds(sec, ns), names, pos, vel,
                                           JMAP, max_steer=0.7)
    if isinstance(got, convert.Rejected):
        assert got.reason in convert.REASONS
        return
    assert isinstance(got, ChassisSample)
    used = (got.stamp, got.steer_left, got.steer_right, got.wheel_front_left,
            got.wheel_front_right, got.wheel_rear_left, got.wheel_rear_right)
    assert all(math.isfinite(v) for v in used) and got.stamp > 0
    assert abs(got.steer_left) <= 0.7 and abs(got.steer_right) <= 0.7
    # the values are the ones of the named joints (sensor_msgs/JointState: parallel arrays)
    assert got.steer_left == pos[names.index("fl_steer")]
    assert got.wheel_rear_right == vel[names.index("rr")]


@SETTINGS
@given(stamp=any_float, frame=st.sampled_from(["map", "odom", "/map", "base_link", ""]),
       pos=st.tuples(any_float, any_float, any_float),
       q=st.tuples(any_float, any_float, any_float, any_float),
       cov=st.lists(any_float, min_size=0, max_size=40),
       lin=st.tuples(any_float, any_float, any_float),
       ang=st.tuples(any_float, any_float, any_float))
def test_localization_converter_never_raises(stamp: float, frame: str, pos: Any, q: Any,
                                             cov: list[float], lin: Any, ang: Any) -> None:
    got = convert.localization_from_odometry(stamp, frame, pos, q, cov, lin, ang, cov)
    if isinstance(got, convert.Rejected):
        assert got.reason in convert.REASONS
        return
    vals = (got.stamp, got.x, got.y, got.yaw, got.vx, got.vy, got.yaw_rate,
            *got.pose_cov, *got.twist_cov)
    assert all(math.isfinite(v) for v in vals)
    assert -math.pi <= got.yaw <= math.pi
    assert got.frame_id in ("map", "odom")


unit = st.floats(-1.0, 1.0, allow_nan=False)


@SETTINGS
@given(q=st.tuples(unit, unit, unit, unit), scale=st.floats(1e-3, 1e3))
def test_yaw_of_any_quaternion_matches_transforms3d(q: tuple[float, ...], scale: float) -> None:
    from transforms3d.euler import quat2euler

    n = math.sqrt(sum(c * c for c in q))
    got = convert.localization_from_pose(T0, "map", (0.0, 0.0, 0.0),
                                         tuple(scale * c for c in q), [0.0] * 36)
    if n < 1e-3:
        return  # (almost) no rotation information; the reject rule is tested elsewhere
    assert isinstance(got, LocalizationSample)
    ref, pitch, _ = quat2euler((q[3] / n, q[0] / n, q[1] / n, q[2] / n), "rzyx")
    assume(abs(math.cos(pitch)) > 1e-3)  # at pitch ±90° yaw and roll are not separable
    assert math.isclose(math.remainder(got.yaw - ref, 2 * math.pi), 0.0, abs_tol=1e-9)


@SETTINGS
@given(stamp=any_float, q=st.tuples(any_float, any_float, any_float, any_float),
       w=st.tuples(any_float, any_float, any_float), a=st.tuples(any_float, any_float, any_float),
       c0=st.sampled_from([0.0, -1.0, 1e-4, math.nan]),
       lat=any_float, lon=any_float, alt=any_float, status=st.integers(-2, 3))
def test_imu_and_gnss_converters_never_raise(stamp: float, q: Any, w: Any, a: Any, c0: float,
                                             lat: float, lon: float, alt: float,
                                             status: int) -> None:
    cov = [c0] + [0.0] * 8
    got = convert.imu_from_fields(stamp, q, cov, w, cov, a, cov)
    if isinstance(got, convert.Rejected):
        assert got.reason in convert.REASONS
    else:
        assert isinstance(got, ImuSample)
        assert math.isfinite(got.stamp) and math.isfinite(got.yaw_rate)
        assert not any(math.isinf(v) for v in (got.ax, got.ay, got.yaw))
    fix = convert.gnss_from_fields(stamp, status, lat, lon, alt)
    if isinstance(fix, convert.Rejected):
        assert fix.reason in convert.REASONS
    else:
        assert isinstance(fix, GnssSample)
        assert -90 <= fix.latitude <= 90 and -180 <= fix.longitude <= 180


@SETTINGS
@given(seq=st.lists(st.one_of(st.none(), st.integers(), st.text(max_size=3), any_float,
                              st.builds(ImuSample, any_float, any_float, any_float, any_float),
                              st.builds(ChassisSample, any_float, any_float, any_float,
                                        any_float, any_float, any_float, any_float),
                              st.builds(LocalizationSample, any_float, any_float, any_float,
                                        any_float, any_float, any_float, any_float)),
                    max_size=60))
def test_monitor_survives_anything_handed_to_it(seq: list[Any]) -> None:
    # garbage handed straight to the core (bypassing the converters): counted, never raised
    mon = Monitor(validate(CFG))
    for item in seq:
        mon.process(item)
    _healthy(mon)
