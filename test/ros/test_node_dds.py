"""The live node over real DDS: separate processes on localhost, one ROS domain per test.

What is checked and against what:
* start-up refusal of a bad value with exit code 2 and a message naming parameter, value
  and allowed range: the interface contract, docs/interface.md sections 2 and 4;
* the parameter file of the launch file (config/kinematic_monitor.yaml) is what the node
  reports: values compared with the file read independently by PyYAML;
* /diagnostics levels OK / STALE (REP 107: OK=0, WARN=1, ERROR=2, STALE=3; names
  "component: ..." as REP 107 / diagnostic_msgs describe);
* events on ~/events and in the JSON-lines log (docs/interface.md section 3; kinds and levels of
  the events.json schema in section 4);
* SIGINT/SIGTERM ends the node within 2 s (the project brief; common practice, no source).
"""

from __future__ import annotations

import importlib.util
import json
import math
import shutil
import signal
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import yaml

pytest.importorskip("rclpy")

from dds_helpers import (  # noqa: E402  (after the importorskip)
    EVENTS_LOG_NO_GNSS,
    REPO,
    DdsRun,
    Proc,
    new_domain_id,
    write_params,
)

pytestmark = pytest.mark.dds

OK, WARN, ERROR, STALE = 0, 1, 2, 3  # REP 107 / diagnostic_msgs/DiagnosticStatus
HAVE_CORE = importlib.util.find_spec("kinematic_monitor.core.monitor") is not None
needs_core = pytest.mark.skipif(not HAVE_CORE, reason="kinematic_monitor.core.monitor missing")
TEST_EXTRA = EVENTS_LOG_NO_GNSS
Run = DdsRun


@pytest.fixture
def run(tmp_path: Path) -> Iterator[Run]:
    r = Run(tmp_path)
    try:
        yield r
    finally:
        r.close()


def _wait_output(proc: Proc, text: str, timeout: float) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if text in proc.output():
            return True
        if proc.p.poll() is not None:
            return text in proc.output()
        time.sleep(0.05)
    return False


# --- start-up refusal ------------------------------------------------------------------

@pytest.mark.parametrize(
    ("vehicle", "name", "value_text", "allowed_text"),
    [
        # docs/interface.md section 2: the geometry must be physical; wheelbase (0, 20] m
        ({"wheelbase": -1.0}, "vehicle.wheelbase", "-1.0", "(0, 20]"),
    ],
)
def test_bad_parameter_file_exits_2_naming_the_parameter(
        run: Run, vehicle: dict[str, float], name: str, value_text: str,
        allowed_text: str) -> None:
    params = write_params(run.tmp / "bad.yaml", vehicle)
    node = run.node(params)
    code = node.wait(timeout=20.0)
    out = node.output()
    assert code == 2, out  # docs/interface.md section 4: 2 = bad parameters
    assert name in out and value_text in out and allowed_text in out, out


def test_missing_required_geometry_exits_2(run: Run) -> None:
    # docs/interface.md section 2: defaults exist for everything except the vehicle geometry
    p = run.tmp / "nogeo.yaml"
    p.write_text("kinematic_monitor:\n  ros__parameters:\n    inputs:\n      qos: reliable\n")
    node = run.node(p)
    assert node.wait(timeout=20.0) == 2
    assert "vehicle.wheelbase" in node.output() and "required" in node.output()


# --- parameters over DDS ---------------------------------------------------------------

@needs_core
def test_launch_params_file_is_loaded_and_reported(run: Run) -> None:
    cfg_path = REPO / "config" / "kinematic_monitor.yaml"
    if not cfg_path.exists():
        pytest.skip("config/kinematic_monitor.yaml missing")
    # reference: the file read by PyYAML, independent of params.py
    tree = yaml.safe_load(cfg_path.read_text())["kinematic_monitor"]["ros__parameters"]
    node = run.node(cfg_path)
    lis = run.listen()
    names = ["vehicle.wheelbase", "vehicle.cg_to_rear_axle", "inputs.qos",
             "checks.nis_window", "inputs.joint_states.steering_joints"]
    got = lis.get_parameters(names, timeout=15.0)
    assert got, node.output()
    assert got["vehicle.wheelbase"] == pytest.approx(tree["vehicle"]["wheelbase"])
    assert got["vehicle.cg_to_rear_axle"] == pytest.approx(tree["vehicle"]["cg_to_rear_axle"])
    assert got["inputs.qos"] == tree["inputs"]["qos"]
    assert got["checks.nis_window"] == tree["checks"]["nis_window"]
    assert list(got["inputs.joint_states.steering_joints"]) == \
        tree["inputs"]["joint_states"]["steering_joints"]
    # values are also printed at start-up
    assert "vehicle.wheelbase = 2.7" in node.output()

    # runtime change of a threshold: validated like start-up
    bad = lis.set_parameter("checks.min_speed", -5.0)
    assert bad is not None and not bad.successful
    assert "checks.min_speed" in bad.reason or "-5" in bad.reason
    good = lis.set_parameter("checks.min_speed", 2.0)
    assert good is not None and good.successful, good.reason
    assert lis.get_parameters(["checks.min_speed"])["checks.min_speed"] == 2.0
    # geometry is read-only at run time (ParameterDescriptor.read_only)
    ro = lis.set_parameter("vehicle.wheelbase", 3.0)
    assert ro is not None and not ro.successful


# --- data path: OK, STALE, events ----------------------------------------------------------

def _monitor_levels(arr: object) -> dict[str, int]:
    return {s.name: s.level[0] if isinstance(s.level, bytes) else int(s.level)
            for s in arr.status  # type: ignore[attr-defined]
            if s.name.startswith("kinematic_monitor: ")}


@needs_core
@pytest.mark.parametrize("executor", ["single"])  # EventsExecutor: the jump test below
def test_drive_gives_ok_then_stale_when_imu_stops(run: Run, executor: str) -> None:
    params = write_params(run.tmp / "p.yaml", extra=TEST_EXTRA)
    node = run.node(params, executor=executor)
    lis = run.listen()
    assert _wait_output(node, "running (", 15.0), node.output()
    if executor == "single":
        assert "running (SingleThreadedExecutor)" in node.output()
    pub = run.publisher("--duration", "3.5", "--imu-stop", "2.0")

    def all_ok() -> bool:
        # REP 107: every check of the monitor reports OK=0 while the drive is clean
        return any(lv and all(v == OK for v in lv.values())
                   for lv in map(_monitor_levels, lis.diagnostics))

    assert lis.spin_until(all_ok, timeout=10.0, alive=lambda: node.p.poll() is None), (
        [_monitor_levels(a) for a in lis.diagnostics[-3:]], node.output())
    names = {n for a in lis.diagnostics for n in _monitor_levels(a)}
    assert len(names) >= 3  # one status per check

    def imu_stale() -> bool:
        return any(s.level == bytes([STALE]) and "imu" in (s.name + s.message)
                   for a in lis.diagnostics[-5:] for s in a.status)

    assert lis.spin_until(imu_stale, timeout=8.0), [
        _monitor_levels(a) for a in lis.diagnostics[-3:]]
    assert pub.wait(timeout=10.0) == 0
    assert lis.predictions, "no ~/prediction received"
    assert math.isfinite(lis.predictions[-1].pose.pose.position.x)
    # output.prediction_rate (default 20 Hz) in header-stamp time: never faster; a few
    # may be lost on the way (best-effort reception), so the lower bound is loose
    stamps = [p.header.stamp.sec + 1e-9 * p.header.stamp.nanosec for p in lis.predictions]
    span = stamps[-1] - stamps[0]
    assert span > 1.0, stamps
    assert 10.0 <= (len(stamps) - 1) / span <= 20.0 + 1e-3, (len(stamps), span)


@needs_core
def test_localization_jump_raises_event_on_topic_and_log(run: Run) -> None:
    params = write_params(run.tmp / "p.yaml", extra=TEST_EXTRA)
    node = run.node(params, executor="events")
    lis = run.listen()
    assert _wait_output(node, "running (", 15.0), node.output()
    # the event is sent once on a volatile topic: the listener must hear the node first
    assert lis.wait_matched(15.0), node.output()
    run.publisher("--duration", "2.5", "--jump-at", "1.5", "--jump", "3.0")

    def got_event() -> bool:
        return any("localization_fault" in e.name for e in lis.events)

    assert lis.spin_until(got_event, timeout=12.0), node.output()
    ev = next(e for e in lis.events if "localization_fault" in e.name)
    assert ev.name.startswith("kinematic_monitor: ")
    assert ev.level in (bytes([WARN]), bytes([ERROR]))
    assert {kv.key for kv in ev.values} >= {"type", "kind", "start", "detected_at"}
    # the log is flushed at each start: readable while the node still runs
    log = run.tmp / "events.jsonl"
    recs = [json.loads(line) for line in log.read_text().splitlines() if line.strip()]
    starts = [r for r in recs if r["type"] == "start" and r["kind"] == "localization_fault"]
    assert starts and starts[0]["level"] in ("WARN", "ERROR")
    # the operator's console line: printed just after the event is published, so the
    # listener may hear the event first
    assert _wait_output(node, "localization_fault", 5.0), node.output()


@pytest.mark.parametrize(("executor", "sig"), [
    ("events", signal.SIGINT), ("events", signal.SIGTERM), ("single", signal.SIGTERM)])
@needs_core
def test_signal_shuts_down_within_2_s_and_closes_events(run: Run, executor: str,
                                                        sig: int) -> None:
    params = write_params(run.tmp / "p.yaml", extra=TEST_EXTRA)
    node = run.node(params, executor=executor)
    assert _wait_output(node, "running (", 15.0), node.output()
    if sig == signal.SIGINT:
        # an open event at shutdown must be closed in the log: inputs go stale and stay
        pub = run.publisher("--duration", "0.5", "--wait-subscriber", "5")
        assert pub.wait(timeout=10.0) == 0
        assert _wait_output(node, "input_stale", 5.0), node.output()
    node.signal(sig)
    code = node.wait(timeout=2.0)
    assert code == 0, node.output()
    assert "stopped" in node.output()
    if sig == signal.SIGINT:
        recs = [json.loads(x) for x in (run.tmp / "events.jsonl").read_text().splitlines()]
        opened = {(r["kind"], r["start"]) for r in recs if r["type"] == "start"}
        closed = {(r["kind"], r["start"]) for r in recs if r["type"] == "end"}
        assert opened and opened <= closed, recs


def test_console_script_entry_exists() -> None:
    # setup.py console_scripts: kinematic_monitor = kinematic_monitor.ros.node:main
    import sys

    exe = shutil.which("kinematic_monitor", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip("console script not installed (re-install the package)")
    assert Path(exe).read_text().find("kinematic_monitor.ros.node") >= 0


# --- message conversions (in-process, no DDS traffic) ------------------------------------

def test_odometry_round_trip_and_quaternion_against_transforms3d() -> None:
    import sample_msgs as rm
    from rclpy.serialization import serialize_message
    from transforms3d.euler import euler2quat

    from kinematic_monitor.core.samples import LocalizationSample
    from kinematic_monitor.io import convert, decode

    yaw = 2.5  # rad, REP 103: counter-clockwise about +z
    cov = (0.01, 0.002, 0.0, 0.002, 0.04, 0.0, 0.0, 0.0, 0.0009)
    s = LocalizationSample(1_800_000_000.25, x=3.0, y=-4.0, yaw=yaw, vx=5.0, vy=0.1,
                           yaw_rate=0.2, pose_cov=cov)
    msg = rm.odometry_msg(s)
    w, x, y, z = euler2quat(0.0, 0.0, yaw, "sxyz")  # transforms3d: (w, x, y, z)
    q = msg.pose.pose.orientation
    assert (q.x, q.y, q.z, q.w) == pytest.approx((x, y, z, w), abs=1e-12)
    # nav_msgs/Odometry covariance: 6x6 row-major over (x, y, z, roll, pitch, yaw)
    assert msg.pose.covariance[0 * 6 + 1] == pytest.approx(0.002)
    assert msg.pose.covariance[5 * 6 + 5] == pytest.approx(0.0009)
    back = decode.odometry(serialize_message(msg))
    assert not isinstance(back, convert.Rejected)
    assert back.stamp == pytest.approx(s.stamp, abs=1e-6)  # float64 spacing at 1.8e9 s
    assert back.yaw == pytest.approx(yaw - 2 * math.pi if yaw > math.pi else yaw)
    assert back.pose_cov == pytest.approx(cov)


def test_event_status_levels_follow_rep107() -> None:
    from diagnostic_msgs.msg import DiagnosticStatus
    from rclpy.serialization import deserialize_message

    from kinematic_monitor.core import events
    from kinematic_monitor.io import outgoing
    from kinematic_monitor.ros import messages as rm

    def status(tr: events.Transition) -> DiagnosticStatus:
        # the bytes the node publishes, read back by rclpy's own deserialiser
        data = outgoing.event_status(tr.type, tr.event.to_dict(), int(tr.event.level))
        return deserialize_message(data, DiagnosticStatus)

    ev = events.Event(start=10.0, detected_at=10.2, kind="lateral_slip", level=events.ERROR,
                      summary="understeer")
    start = status(events.Transition("start", ev))
    assert start.level == bytes([ERROR]) and start.name == "kinematic_monitor: event lateral_slip"
    assert {kv.key: kv.value for kv in start.values}["type"] == "start"
    ev.end = 11.0
    end = status(events.Transition("end", ev))
    assert end.level == bytes([OK])  # the episode is over
    assert rm.event_console_line(events.Transition("start", ev), t0=0.0).startswith(
        "[10.20 s] ERROR lateral_slip: understeer")
    with pytest.raises(ValueError, match="REP 107"):
        rm.level_byte(7)


def test_descriptors_carry_range_and_read_only() -> None:
    from kinematic_monitor.config import schema
    from kinematic_monitor.ros import node

    d = node.descriptor_for(schema.SPEC_BY_NAME["vehicle.wheelbase"])
    assert d.read_only and d.floating_point_range[0].to_value == 20.0
    assert "(0, 20]" in d.additional_constraints
    n = node.descriptor_for(schema.SPEC_BY_NAME["checks.nis_window"])
    assert not n.read_only and n.integer_range[0].from_value == 1


# --- steering and speed from other message types ------------------------------------------
# Float64 steering (no header: receive-time stamped) and a field path on a standard stamped
# type (geometry_msgs/Vector3Stamped, field vector.z as speed in km/h); layouts from the
# ROS 2 message definitions. Expected speed 36 km/h / 3.6 = 10 m/s.

SCALAR_EXTRA = """\
    inputs:
      gnss:
        topic: ""
      imu:
        topic: ""
      steering:
        topic: "/vehicle/steer"
        type: "float64"
      speed:
        topic: "/vehicle/speed_report"
        type: "field"
        type_name: "geometry_msgs/msg/Vector3Stamped"
        field: "{field}"
        scale: 0.2777777777777778
    output:
      events_log: "events.jsonl"
"""


@needs_core
def test_float64_steering_and_field_path_speed_over_dds(run: Run) -> None:
    import sample_msgs as rm
    from geometry_msgs.msg import Vector3Stamped
    from nav_msgs.msg import Odometry
    from rclpy.qos import qos_profile_sensor_data
    from std_msgs.msg import Float64

    from kinematic_monitor.core.samples import LocalizationSample

    params = write_params(run.tmp / "p.yaml", extra=SCALAR_EXTRA.format(field="vector.z"))
    node = run.node(params, executor="single")
    lis = run.listen()
    n = lis.node
    pub_steer = n.create_publisher(Float64, "/vehicle/steer", qos_profile_sensor_data)
    pub_speed = n.create_publisher(Vector3Stamped, "/vehicle/speed_report",
                                   qos_profile_sensor_data)
    pub_odom = n.create_publisher(Odometry, "/localization/odom", qos_profile_sensor_data)
    assert lis.spin_until(lambda: pub_speed.get_subscription_count() > 0
                          and pub_steer.get_subscription_count() > 0, 20.0,
                          alive=lambda: node.p.poll() is None), node.output()
    t_start = time.time()
    k = 0
    while time.time() - t_start < 2.5:
        now = time.time()
        pub_steer.publish(Float64(data=0.0))
        sp = Vector3Stamped()
        sp.header.stamp = rm.sec_to_stamp(now)
        sp.vector.z = 36.0
        pub_speed.publish(sp)
        if k % 2 == 0:
            x = 10.0 * (now - t_start)
            cov = (0.0025, 0.0, 0.0, 0.0, 0.0025, 0.0, 0.0, 0.0, 1e-4)
            pub_odom.publish(rm.odometry_msg(LocalizationSample(
                now, x=x, y=0.0, yaw=0.0, vx=10.0, vy=0.0, yaw_rate=0.0, pose_cov=cov)))
        k += 1
        lis.executor.spin_once(timeout_sec=0.01)

    def node_values() -> dict[str, str]:
        st = lis.statuses("kinematic_monitor: node")
        return {kv.key: kv.value for kv in st[-1].values} if st else {}

    assert lis.spin_until(lambda: float(node_values().get("received.speed", 0)) > 20, 5.0), \
        node_values()
    vals = node_values()
    assert float(vals["received.steering"]) > 20
    # Float64 has no header: every steering sample is counted as receive-time stamped
    assert float(vals["receive_time_stamped.steering"]) > 20
    assert "receive_time_stamped.speed" not in vals  # Vector3Stamped carries a header
    assert "rejected.speed" not in vals and "rejected.steering" not in vals
    assert lis.predictions, node.output()
    assert lis.predictions[-1].twist.twist.linear.x == pytest.approx(10.0, abs=0.5)


@pytest.mark.parametrize(("field", "words"), [
    ("vector.w", "no field 'w'"),
    ("header.frame_id", "not a number"),
])
def test_bad_field_path_stops_start_up_naming_topic_type_and_path(
        run: Run, field: str, words: str) -> None:
    params = write_params(run.tmp / "p.yaml", extra=SCALAR_EXTRA.format(field=field))
    node = run.node(params)
    assert node.wait(timeout=20.0) == 2
    out = node.output()
    for part in ("/vehicle/speed_report", "geometry_msgs/msg/Vector3Stamped", field, words):
        assert part in out, out


def test_unknown_message_type_stops_start_up_naming_it(run: Run) -> None:
    extra = SCALAR_EXTRA.format(field="report.speed").replace(
        "geometry_msgs/msg/Vector3Stamped", "acme_msgs/msg/SpeedReport")
    node = run.node(write_params(run.tmp / "p.yaml", extra=extra))
    assert node.wait(timeout=20.0) == 2
    assert "acme_msgs/msg/SpeedReport" in node.output() and "not installed" in node.output()


# --- batches (inputs.batch_size / inputs.batch_delay), in this process ----------------------

def _node_here(monkeypatch: pytest.MonkeyPatch, tmp_path: Path, **overrides: object
               ) -> tuple[object, object]:
    """A node in this process (own context and domain) with parameter overrides."""
    import rclpy
    from rclpy.context import Context

    from kinematic_monitor.ros import node as km_node

    monkeypatch.chdir(tmp_path)  # the default events log goes here
    values = {"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
              "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55, **overrides}
    args = ["--ros-args"] + [a for k, v in values.items() for a in ("-p", f"{k}:={v}")]
    ctx = Context()
    rclpy.init(args=args, context=ctx, domain_id=new_domain_id())
    return ctx, km_node.KinematicMonitorNode(context=ctx, console=lambda _line: None)


@needs_core
def test_samples_processed_in_batches(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    import rclpy

    from kinematic_monitor.core.samples import ImuSample

    ctx, n = _node_here(monkeypatch, tmp_path, **{"inputs.batch_size": 3,
                                                   "inputs.batch_delay": 0.2})
    try:
        done = n.monitor.counters  # type: ignore[attr-defined]
        imu = [ImuSample(1.8e9 + 0.01 * i, 0.0) for i in range(6)]
        n._queue_released([imu[0]])  # type: ignore[attr-defined]
        n._queue_released([imu[1]])  # type: ignore[attr-defined]
        assert done["samples"] == 0  # waiting for the batch
        n._queue_released([imu[2]])  # type: ignore[attr-defined]
        assert done["samples"] == 3  # batch_size reached: all three, in order
        n._queue_released([imu[3]])  # type: ignore[attr-defined]
        time.sleep(0.25)
        n._queue_released([imu[4]])  # type: ignore[attr-defined]
        assert done["samples"] == 5  # the oldest waited batch_delay
        n._queue_released([imu[5]])  # type: ignore[attr-defined]
        n._on_tick()  # type: ignore[attr-defined]
        assert done["samples"] == 6  # the tick takes what waits
        assert done["rejected_out_of_order"] == 0
    finally:
        n.destroy_node()  # type: ignore[attr-defined]
        rclpy.shutdown(context=ctx)


@needs_core
def test_batch_size_one_processes_each_sample_at_once(monkeypatch: pytest.MonkeyPatch,
                                                       tmp_path: Path) -> None:
    import rclpy

    from kinematic_monitor.core.samples import ImuSample

    ctx, n = _node_here(monkeypatch, tmp_path, **{"inputs.batch_size": 1})
    try:
        n._queue_released([ImuSample(1.8e9, 0.0)])  # type: ignore[attr-defined]
        assert n.monitor.counters["samples"] == 1  # type: ignore[attr-defined]
    finally:
        n.destroy_node()  # type: ignore[attr-defined]
        rclpy.shutdown(context=ctx)
