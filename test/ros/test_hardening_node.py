"""Bad-input matrix over real DDS: ONE node process, one scripted publisher, row by row.

The test process publishes an invented clean drive (our proving-ground test car) stamped
with wall time and, row after row, injects one kind of bad input; between rows it reads
the node's own diagnostic status ("kinematic_monitor: node" key-values on /diagnostics)
and checks the row's defined outcome from the change of the counters:
rejected and counted per input and reason (``rejected.<input>.<reason>``, reasons of
``convert.REASONS``), dropped by the reorder buffer (``late_dropped``,
``duplicates_dropped``), reset (``time_resets``), or STALE (REP 107 level 3) on the
checks that need a silent input, then recovery. After every row: no callback error
(``callback_errors`` absent), no internal error in the core, every ~/prediction finite.

Sources: REP 107 levels (diagnostic_msgs/DiagnosticStatus OK=0 .. STALE=3); message field
meanings from the ROS 2 definitions (builtin_interfaces/Time nanosec < 1e9, JointState
parallel arrays); REP 105 (localisation pose in map/odom). DDS will not match a
subscription to a publisher of another type on the same topic (ROS 2 topic typing), so a
topic that changes type is, for the node, a silent topic: defined outcome STALE.
Reliable QoS on both sides so the counts are exact.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

pytest.importorskip("rclpy")

from dds_helpers import (  # noqa: E402
    Listener,
    Proc,
    new_domain_id,
    node_status,
    numeric_values,
    start_node,
    write_params,
)

pytestmark = pytest.mark.dds

OK, WARN, ERROR, STALE = 0, 1, 2, 3  # REP 107
EXTRA = """\
    inputs:
      qos: reliable
      gnss:
        topic: ""
    output:
      events_log: "events.jsonl"
      diagnostics_period: 0.1
"""
RATES = {"joint_states": 100.0, "localization": 50.0, "imu": 100.0}  # Hz
R_WHEEL = 0.31  # m
COV = (4e-4, 0.0, 0.0, 0.0, 4e-4, 0.0, 0.0, 0.0, 1e-5)
NODE = "kinematic_monitor: node"

Hook = Callable[[str, Any, float], Any]


class Script:
    """Publishes the clean drive with optional per-message hooks; reads the node status."""

    def __init__(self, lis: Listener) -> None:
        from nav_msgs.msg import Odometry
        from rclpy.qos import QoSProfile, ReliabilityPolicy
        from sensor_msgs.msg import Imu, JointState

        self.lis = lis
        qos = QoSProfile(depth=1000, reliability=ReliabilityPolicy.RELIABLE)
        n = lis.node
        self.qos = qos
        self.pub = {"joint_states": n.create_publisher(JointState, "/joint_states", qos),
                    "localization": n.create_publisher(Odometry, "/localization/odom", qos),
                    "imu": n.create_publisher(Imu, "/imu/data", qos)}
        self.x = 0.0  # m, along the straight
        self.v = 8.0  # m/s
        self.t_last = math.nan
        self.published = 0

    def send(self, name: str, msg: Any) -> None:
        self.pub[name].publish(msg)
        self.published += 1

    def _msg(self, name: str, stamp: float, accel: float) -> Any:
        import sample_msgs as rm

        from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

        if name == "joint_states":
            w = self.v / R_WHEEL
            return rm.joint_state_msg(ChassisSample(
                stamp, steer_left=0.0, steer_right=0.0, wheel_front_left=w,
                wheel_front_right=w, wheel_rear_left=w, wheel_rear_right=w))
        if name == "localization":
            return rm.odometry_msg(LocalizationSample(
                stamp, x=self.x, y=0.0, yaw=0.0, vx=self.v, vy=0.0, yaw_rate=0.0,
                pose_cov=COV, twist_cov=COV))
        return rm.imu_msg(ImuSample(stamp, yaw_rate=0.0, ax=accel, ay=0.0))

    def drive(self, seconds: float, *, factor: float = 1.0, hook: Hook | None = None,
              skip: tuple[str, ...] = (), offset: float = 0.0, to_speed: float | None = None,
              accel: float = 3.0) -> None:
        """Publish for ``seconds`` of wall time; ``offset`` [s] shifts the stamps (a clock
        error); ``to_speed`` [m/s] ramps the speed at ``accel`` [m/s²]."""
        t0 = time.time()
        due = {k: t0 for k in RATES}
        while True:
            now = time.time()
            if now - t0 >= seconds:
                break
            name = min(due, key=due.__getitem__)
            if due[name] > now:
                self.lis.executor.spin_once(timeout_sec=min(0.002, due[name] - now))
                continue
            due[name] += 1.0 / (RATES[name] * factor)
            a = 0.0
            if math.isfinite(self.t_last) and now > self.t_last:
                dt = now - self.t_last
                if to_speed is not None and self.v != to_speed:
                    step = math.copysign(min(accel * dt, abs(to_speed - self.v)),
                                         to_speed - self.v)
                    a = step / dt
                    self.x += (self.v + 0.5 * step) * dt
                    self.v += step
                else:
                    self.x += self.v * dt
            self.t_last = now
            if name in skip:
                continue
            stamp = now + offset
            msg = self._msg(name, stamp, a)
            if hook is not None:
                msg = hook(name, msg, stamp)
            if msg is not None:
                self.send(name, msg)

    def silence(self, seconds: float) -> None:
        deadline = time.monotonic() + seconds
        while time.monotonic() < deadline:
            self.lis.executor.spin_once(timeout_sec=0.02)
        self.t_last = math.nan  # the vehicle is taken to stand still meanwhile

    # --- reading the node's diagnostics ---
    def values(self) -> dict[str, float]:
        return numeric_values(node_status(self.lis, NODE))

    def levels(self) -> dict[str, int]:
        for arr in reversed(self.lis.diagnostics):
            lv = {s.name: s.level[0] if isinstance(s.level, bytes) else int(s.level)
                  for s in arr.status if s.name.startswith("kinematic_monitor: ")}
            if len(lv) > 1:
                return lv
        return {}


def _delta(after: dict[str, float], before: dict[str, float]) -> dict[str, float]:
    return {k: v - before.get(k, 0.0) for k, v in after.items() if v != before.get(k, 0.0)}


def _bad(n: int, fn: Callable[[Any], None], only: str) -> Hook:
    """Hook: for the first ``n`` messages of input ``only``, also send a spoilt copy."""
    left = {"n": n}

    def hook(name: str, msg: Any, stamp: float) -> Any:
        if name == only and left["n"] > 0:
            left["n"] -= 1
            import copy

            bad = copy.deepcopy(msg)
            fn(bad)
            script_ref[0].send(name, bad)
        return msg

    return hook


script_ref: list[Script] = []  # the hooks publish through the running script


def _chain(*hooks: Hook) -> Hook:
    def hook(name: str, msg: Any, stamp: float) -> Any:
        for h in hooks:
            msg = h(name, msg, stamp)
        return msg
    return hook


def _set_list(attr: str, i: int, value: float) -> Callable[[Any], None]:
    def f(m: Any) -> None:
        seq = list(getattr(m, attr))
        seq[i] = value
        setattr(m, attr, seq)
    return f


@pytest.fixture
def setup(tmp_path: Path) -> Iterator[tuple[Proc, Script]]:
    domain = new_domain_id()
    node = start_node(write_params(tmp_path / "p.yaml", extra=EXTRA), domain, tmp_path)
    lis = Listener(domain)
    try:
        script = Script(lis)
        script_ref[:] = [script]
        ok = lis.spin_until(
            lambda: all(p.get_subscription_count() > 0 for p in script.pub.values()), 20.0,
            alive=lambda: node.p.poll() is None)
        assert ok, node.output()
        yield node, script
    finally:
        node.stop(grace=2.0)
        lis.close()


def test_bad_input_matrix_over_dds(setup: tuple[Proc, Script], tmp_path: Path) -> None:
    node, sc = setup
    lis = sc.lis
    results: dict[str, dict[str, float]] = {}

    def row(label: str, action: Callable[[], None], settle: float = 0.3) -> dict[str, float]:
        before = sc.values()
        action()
        sc.drive(settle)  # clean data behind the row: everything of it is processed
        after = sc.values()
        d = _delta(after, before)
        results[label] = d
        assert node.p.poll() is None, node.output()[-3000:]
        assert "callback_errors" not in after, (label, after)
        assert after.get("core.internal_errors", 0) == 0, (label, after)
        return d

    def rejected(d: dict[str, float]) -> dict[str, float]:
        return {k: v for k, v in d.items() if k.startswith("rejected.")}

    # warm-up: filter initialised, predictions flowing
    sc.drive(3.0)
    assert lis.spin_until(lambda: bool(sc.values()), 5.0), node.output()[-3000:]
    assert lis.predictions, node.output()[-3000:]

    # NaN / inf in used fields of each input
    d = row("nan_inf", lambda: sc.drive(1.0, hook=_chain(
        _bad(1, _set_list("position", 0, math.nan), "joint_states"),
        _bad(1, _set_list("velocity", 4, math.inf), "joint_states"),
        _bad(1, lambda m: setattr(m.pose.pose.position, "x", math.inf), "localization"),
        _bad(1, lambda m: setattr(m.twist.twist.linear, "y", math.nan), "localization"),
        _bad(1, _set_list_attr("pose", "covariance", 35, math.nan), "localization"),
        _bad(1, lambda m: setattr(m.angular_velocity, "z", -math.inf), "imu"),
        _bad(1, lambda m: setattr(m.linear_acceleration, "x", math.nan), "imu"))))
    assert rejected(d) == {"rejected.joint_states": 2, "rejected.joint_states.nan": 2,
                           "rejected.localization": 3, "rejected.localization.nan": 3,
                           "rejected.imu": 2, "rejected.imu.nan": 2}, d

    # JointState shape errors
    def short(m: Any) -> None:
        m.position = list(m.position)[:-1]

    def missing(m: Any) -> None:
        m.name = ["x" if n == "rear_right_wheel_joint" else n for n in m.name]

    def dup(m: Any) -> None:
        m.name = [*m.name, "rear_right_wheel_joint"]
        m.position = [*m.position, 0.0]
        m.velocity = [*m.velocity, 0.0]

    d = row("joint_state_shape", lambda: sc.drive(1.0, hook=_chain(
        _bad(2, short, "joint_states"), _bad(2, missing, "joint_states"),
        _bad(2, dup, "joint_states"))))
    assert rejected(d) == {"rejected.joint_states": 6,
                           "rejected.joint_states.length_mismatch": 2,
                           "rejected.joint_states.missing_joint": 2,
                           "rejected.joint_states.duplicate_joint": 2}, d

    # zero and garbage stamps
    def stamp(sec: int, ns: int) -> Callable[[Any], None]:
        def f(m: Any) -> None:
            m.header.stamp.sec, m.header.stamp.nanosec = sec, ns
        return f

    d = row("bad_stamps", lambda: sc.drive(1.0, hook=_chain(
        _bad(1, stamp(0, 0), "joint_states"), _bad(1, stamp(-7, 0), "joint_states"),
        _bad(1, stamp(int(time.time()), 1_500_000_000), "joint_states"),
        _bad(1, stamp(0, 0), "localization"), _bad(1, stamp(0, 0), "imu"))))
    assert rejected(d) == {"rejected.joint_states": 3, "rejected.joint_states.bad_stamp": 3,
                           "rejected.localization": 1, "rejected.localization.bad_stamp": 1,
                           "rejected.imu": 1, "rejected.imu.bad_stamp": 1}, d

    # one JointState 1 ms older than the previous one of its stream
    prev: dict[str, Any] = {}

    def back_1ms(name: str, msg: Any, st: float) -> Any:
        if name == "joint_states":
            if "done" not in prev and "msg" in prev:
                import copy

                late = copy.deepcopy(prev["msg"])
                t = late.header.stamp.sec + late.header.stamp.nanosec * 1e-9 - 0.001
                late.header.stamp.sec = int(t)
                late.header.stamp.nanosec = int(round((t - int(t)) * 1e9)) % 1_000_000_000
                sc.send(name, msg)
                prev["done"] = True
                return late
            prev["msg"] = msg
        return msg

    d = row("back_1ms", lambda: sc.drive(1.0, hook=back_1ms))
    assert not rejected(d) and "time_resets" not in d, d
    assert d.get("late_dropped", 0) in (0, 1), d  # dropped as late, or reordered in time

    # the same message twice (3 JointState, 2 Imu duplicates)
    def dup_hook() -> Hook:
        left = {"joint_states": 3, "imu": 2}

        def hook(name: str, msg: Any, st: float) -> Any:
            if left.get(name, 0) > 0:
                left[name] -= 1
                sc.send(name, msg)
            return msg
        return hook

    d = row("duplicates", lambda: sc.drive(1.0, hook=dup_hook()))
    assert d.get("duplicates_dropped") == 5 and not rejected(d), d

    # localisation in an unexpected frame (REP 105: map or odom)
    d = row("frame", lambda: sc.drive(1.0, hook=_bad(
        3, lambda m: setattr(m.header, "frame_id", "base_link"), "localization")))
    assert rejected(d) == {"rejected.localization": 3,
                           "rejected.localization.unexpected_frame": 3}, d

    # quaternions not normalised (accepted, normalised) and zero (rejected)
    def scale_q(name: str, msg: Any, st: float) -> Any:
        if name == "localization":
            o = msg.pose.pose.orientation
            o.x, o.y, o.z, o.w = 5.0 * o.x, 5.0 * o.y, 5.0 * o.z, 5.0 * o.w
        return msg

    def zero_q(m: Any) -> None:
        o = m.pose.pose.orientation
        o.x = o.y = o.z = o.w = 0.0

    n_pred = len(lis.predictions)
    d = row("quaternion", lambda: sc.drive(1.0, hook=_chain(
        scale_q, _bad(2, zero_q, "localization"))))
    assert rejected(d) == {"rejected.localization": 2,
                           "rejected.localization.bad_quaternion": 2}, d
    assert d.get("received.localization", 0) >= 40  # the scaled ones are used
    yaws = [2 * math.atan2(p.pose.pose.orientation.z, p.pose.pose.orientation.w)
            for p in lis.predictions[n_pred:]]
    assert yaws and max(abs(y) for y in yaws) < 0.05, yaws[-5:]  # heading stays 0

    # steering beyond the physical range (vehicle.max_road_wheel_angle 0.7 rad default)
    d = row("steer_range", lambda: sc.drive(1.0, hook=_bad(
        3, _set_list("position", 0, 1.2), "joint_states")))
    assert rejected(d) == {"rejected.joint_states": 3,
                           "rejected.joint_states.steer_out_of_range": 3}, d

    # every stamp one hour back for 2 s, then back to the node's time
    d = row("back_1h", lambda: (sc.drive(2.0, offset=-3600.0), sc.drive(3.0)), settle=0.5)
    assert d.get("time_resets", 0) >= 1 and d.get("core.time_resets", 0) >= 1, d
    assert not rejected(d), d
    # stamps an hour behind the node's clock: inputs STALE once, not toggling every tick
    assert d.get("events", 0) <= 12, d

    # 10 s burst at 10x the rates
    # (on this shared 2-core machine the node can fall behind: what arrives later than the
    # reorder window is dropped and counted as late, data older than a timeout is stale)
    pub0 = sc.published
    n_ev = len(lis.events)
    d = row("burst_10x", lambda: sc.drive(10.0, factor=10.0), settle=1.0)
    sent = sc.published - pub0
    got = sum(v for k, v in d.items() if k.startswith("received."))
    assert got >= 0.9 * sent, (sent, sorted(d.items()))  # reliable QoS: (almost) all arrive
    assert d.get("core.samples", 0) + d.get("late_dropped", 0) >= 0.98 * got, sorted(d.items())
    assert not rejected(d), d
    burst_events = {e.name for e in lis.events[n_ev:]}
    assert burst_events <= {"kinematic_monitor: event input_stale"}, burst_events
    results["burst_10x"]["sent"] = sent

    # the localisation topic changes type: DDS does not match it -> STALE, then recovery
    from nav_msgs.msg import Odometry
    from sensor_msgs.msg import Imu

    # one participant may not hold two types on one topic: swap the publisher
    lis.node.destroy_publisher(sc.pub["localization"])
    wrong = lis.node.create_publisher(Imu, "/localization/odom", sc.qos)

    def wrong_type(name: str, msg: Any, st: float) -> Any:
        if name == "localization":
            import sample_msgs as rm

            from kinematic_monitor.core.samples import ImuSample

            wrong.publish(rm.imu_msg(ImuSample(st, 0.0, 0.0, 0.0)))
            return None
        return msg

    def type_change() -> None:
        sc.drive(3.0, hook=wrong_type)
        lv = sc.levels()
        assert lv.get("kinematic_monitor: localization jump") == STALE, lv
        assert lv.get("kinematic_monitor: yaw rate") != STALE, lv  # IMU + wheels still fine
        lis.node.destroy_publisher(wrong)
        sc.pub["localization"] = lis.node.create_publisher(Odometry, "/localization/odom",
                                                           sc.qos)
        assert lis.spin_until(lambda: sc.pub["localization"].get_subscription_count() > 0,
                              5.0)
        sc.drive(3.0)

    d = row("type_change", type_change)
    lv = sc.levels()
    assert not [n for n, v in lv.items() if v == STALE], lv

    # 30 s of silence, then recovery
    n_ev = len(lis.events)

    def silence() -> None:
        sc.silence(30.0)
        lv = sc.levels()
        assert lv.get("kinematic_monitor: yaw rate") == STALE, lv
        assert lv.get("kinematic_monitor: localization jump") == STALE, lv
        sc.drive(3.0)

    d = row("silence_30s", silence)
    lv = sc.levels()
    assert not [n for n, v in lv.items() if v == STALE], lv
    stale_ev = [e for e in lis.events[n_ev:] if "input_stale" in e.name]
    assert stale_ev, "the silence raises input_stale events"
    phases = [{kv.key: kv.value for kv in e.values}.get("type") for e in stale_ev]
    assert "end" in phases, phases  # and they end on recovery

    # minutes of standstill and reverse driving are a core row; here a few seconds each
    n_ev = len(lis.events)
    d = row("standstill_reverse", lambda: (
        sc.drive(3.0, to_speed=0.0), sc.drive(4.0), sc.drive(2.0, to_speed=-3.0),
        sc.drive(4.0)))
    kinds = {e.name for e in lis.events[n_ev:]}
    assert not kinds, kinds  # no slip, localisation or calibration alarm
    assert not rejected(d), d

    # never a NaN out of the filter
    for p in lis.predictions:
        pos = p.pose.pose.position
        assert math.isfinite(pos.x) and math.isfinite(pos.y)
        assert all(math.isfinite(c) for c in p.pose.covariance)
    print({k: {kk: vv for kk, vv in v.items() if not kk.startswith("received")}
           for k, v in results.items()})


def _set_list_attr(obj: str, attr: str, i: int, value: float) -> Callable[[Any], None]:
    def f(m: Any) -> None:
        holder = getattr(m, obj)
        seq = list(getattr(holder, attr))
        seq[i] = value
        setattr(holder, attr, seq)
    return f
