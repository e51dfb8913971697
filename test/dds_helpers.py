"""Helpers for tests (and the load bench) that run real processes over DDS on this machine.

* ``ros_env(domain)``: environment for a subprocess: discovery limited to localhost
  (``ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST``) and its own ``ROS_DOMAIN_ID``.
* ``new_domain_id()``: a domain id in 1..101 unique per call within this process.
* ``Proc``: a subprocess with stdout/stderr in files, always killed on ``stop()``.
* ``Listener``: an in-process rclpy node in its own context and domain that records
  /diagnostics, the node's ~/events and ~/prediction, and can query parameters.
* Run as a script (``python test/dds_helpers.py publish ...``) it is a publisher process
  playing an invented straight drive (JointState, Odometry, Imu) stamped with wall time,
  optionally stopping the IMU or adding a localisation jump part-way.
"""

from __future__ import annotations

import argparse
import heapq
import itertools
import math
import os
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
_counter = itertools.count()


def new_domain_id() -> int:
    """A ROS domain id in 1..101 (safe on Linux), different for each call in this process."""
    return 1 + (os.getpid() * 13 + next(_counter) * 37) % 101


def ros_env(domain: int, **extra: str) -> dict[str, str]:
    """Environment for a DDS subprocess: localhost discovery, its own domain id."""
    env = dict(os.environ)
    env["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    env["ROS_DOMAIN_ID"] = str(domain)
    env["PYTHONUNBUFFERED"] = "1"
    env.pop("ROS_LOCALHOST_ONLY", None)  # superseded by the discovery range (Iron+)
    env.update(extra)
    return env


class Proc:
    """A subprocess whose output goes to files; ``stop()`` always leaves it dead."""

    def __init__(self, argv: Sequence[str], env: dict[str, str], cwd: str | os.PathLike[str],
                 name: str = "proc") -> None:
        self.dir = Path(cwd)
        self.out_path = self.dir / f"{name}.stdout"
        self.err_path = self.dir / f"{name}.stderr"
        self._out = open(self.out_path, "w")  # noqa: SIM115 - closed in stop()
        self._err = open(self.err_path, "w")  # noqa: SIM115
        self.p = subprocess.Popen(list(argv), env=env, cwd=cwd, stdout=self._out,
                                  stderr=self._err, start_new_session=True)

    @property
    def pid(self) -> int:
        return self.p.pid

    def output(self) -> str:
        """stdout + stderr so far."""
        self._out.flush()
        self._err.flush()
        return self.out_path.read_text() + self.err_path.read_text()

    def wait(self, timeout: float) -> int | None:
        """Exit code, or None if still running after ``timeout`` [s]."""
        try:
            return self.p.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            return None

    def signal(self, sig: int) -> None:
        if self.p.poll() is None:
            self.p.send_signal(sig)

    def stop(self, grace: float = 2.0) -> int | None:
        """SIGINT, then SIGKILL of the process group after ``grace`` [s]; returns exit code."""
        if self.p.poll() is None:
            self.p.send_signal(signal.SIGINT)
            if self.wait(grace) is None:
                try:
                    os.killpg(self.p.pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
                self.p.wait(timeout=5)
        for f in (self._out, self._err):
            if not f.closed:
                f.close()
        return self.p.returncode


def start_node(params_file: str | os.PathLike[str], domain: int, cwd: str | os.PathLike[str],
               executor: str = "auto", extra_ros_args: Sequence[str] = ()) -> Proc:
    """Start ``python -m kinematic_monitor.ros.node --ros-args --params-file FILE`` in ``cwd``."""
    argv = [sys.executable, "-m", "kinematic_monitor.ros.node", "--ros-args",
            "--params-file", str(params_file), *extra_ros_args]
    env = ros_env(domain, KINEMATIC_MONITOR_EXECUTOR=executor)
    return Proc(argv, env, cwd, name="node")


def start_publisher(domain: int, cwd: str | os.PathLike[str], *args: str) -> Proc:
    """Start this file as the publisher process with ``args`` (see ``publish --help``)."""
    argv = [sys.executable, str(Path(__file__).resolve()), "publish", *args]
    return Proc(argv, ros_env(domain), cwd, name="publisher")


def write_params(path: str | os.PathLike[str], vehicle: dict[str, Any] | None = None,
                 extra: str = "") -> Path:
    """Write a small parameter file (invented test-car geometry) and return its path."""
    v = {"wheelbase": 2.70, "cg_to_rear_axle": 1.35, "wheel_radius": 0.31,
         "track_width": 1.55}
    v.update(vehicle or {})
    lines = ["kinematic_monitor:", "  ros__parameters:", "    vehicle:"]
    lines += [f"      {k}: {val}" for k, val in v.items()]
    text = "\n".join(lines) + "\n" + extra
    p = Path(path)
    p.write_text(text)
    return p


# --- in-process listener ----------------------------------------------------------------

class Listener:
    """rclpy node in its own context on ``domain`` recording the monitor's outputs."""

    def __init__(self, domain: int, node_name: str = "kinematic_monitor") -> None:
        import rclpy
        from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
        from nav_msgs.msg import Odometry
        from rclpy.context import Context
        from rclpy.executors import SingleThreadedExecutor
        from rclpy.node import Node

        self.context = Context()
        try:
            from rclpy.signals import SignalHandlerOptions
            rclpy.init(context=self.context, domain_id=domain,
                       signal_handler_options=SignalHandlerOptions.NO)
        except (ImportError, TypeError):
            rclpy.init(context=self.context, domain_id=domain)
        self.node = Node("test_listener", context=self.context)
        self.executor = SingleThreadedExecutor(context=self.context)
        self.executor.add_node(self.node)
        self.target = node_name
        self.diagnostics: list[Any] = []
        self.events: list[Any] = []
        self.predictions: list[Any] = []
        self._subs = [
            self.node.create_subscription(DiagnosticArray, "/diagnostics",
                                          self.diagnostics.append, 50),
            self.node.create_subscription(DiagnosticStatus, f"/{node_name}/events",
                                          self.events.append, 50),
            self.node.create_subscription(Odometry, f"/{node_name}/prediction",
                                          self.predictions.append, 50),
        ]

    def wait_matched(self, timeout: float) -> bool:
        """Spin until each subscription has matched a publisher (DDS discovery done).

        ~/events is volatile: an event published before the match is never delivered.
        """
        return self.spin_until(
            lambda: all(s.get_publisher_count() > 0 for s in self._subs), timeout)

    def spin_until(self, predicate: Callable[[], bool], timeout: float,
                   alive: Callable[[], bool] = lambda: True) -> bool:
        """Spin until ``predicate()`` (True) or ``timeout`` [s] or ``alive()`` is False."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if predicate():
                return True
            if not alive():
                return predicate()
            self.executor.spin_once(timeout_sec=0.05)
        return predicate()

    def statuses(self, name_part: str = "") -> list[Any]:
        """All received DiagnosticStatus entries whose name contains ``name_part``."""
        return [s for arr in self.diagnostics for s in arr.status if name_part in s.name]

    def get_parameters(self, names: Sequence[str], timeout: float = 5.0) -> dict[str, Any]:
        """Values of ``names`` from the node's get_parameters service ({} on timeout)."""
        from rcl_interfaces.srv import GetParameters
        from rclpy.parameter import parameter_value_to_python

        client = self.node.create_client(GetParameters, f"/{self.target}/get_parameters")
        try:
            if not self._wait_service(client, timeout):
                return {}
            req = GetParameters.Request(names=list(names))
            fut = client.call_async(req)
            # never without timeout_sec: EventsExecutor.spin_until_future_complete without
            # one does not return after the future completes (seen with these rclpy wheels)
            self.spin_until(fut.done, timeout)
            if not fut.done() or fut.result() is None:
                return {}
            return {n: parameter_value_to_python(v)
                    for n, v in zip(names, fut.result().values, strict=False)}
        finally:
            self.node.destroy_client(client)

    def set_parameter(self, name: str, value: Any, timeout: float = 5.0) -> Any:
        """Set one parameter; returns the SetParametersResult (or None on timeout)."""
        from rcl_interfaces.srv import SetParameters
        from rclpy.parameter import Parameter

        client = self.node.create_client(SetParameters, f"/{self.target}/set_parameters")
        try:
            if not self._wait_service(client, timeout):
                return None
            msg = Parameter(name, value=value).to_parameter_msg()
            req = SetParameters.Request(parameters=[msg])
            fut = client.call_async(req)
            self.spin_until(fut.done, timeout)
            return fut.result().results[0] if fut.done() and fut.result() else None
        finally:
            self.node.destroy_client(client)

    def _wait_service(self, client: Any, timeout: float) -> bool:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if client.service_is_ready():
                return True
            self.executor.spin_once(timeout_sec=0.05)
        return False

    def close(self) -> None:
        import rclpy

        try:
            self.executor.shutdown(timeout_sec=1.0)
            self.node.destroy_node()
        finally:
            if self.context.ok():
                rclpy.shutdown(context=self.context)


# --- publisher process --------------------------------------------------------------------


# --- one test's processes ------------------------------------------------------------------

# params tail used by most node tests: no GNSS input, events log in the node's folder
EVENTS_LOG_NO_GNSS = """\
    inputs:
      gnss:
        topic: ""
    output:
      events_log: "events.jsonl"
"""


class DdsRun:
    """Processes and listener of one test on a fresh domain; ``close`` stops them all."""

    def __init__(self, tmp: Path) -> None:
        self.tmp = tmp
        self.domain = new_domain_id()
        self.procs: list[Proc] = []
        self.listener: Listener | None = None

    def node(self, params: str | os.PathLike[str], executor: str = "auto") -> Proc:
        p = start_node(params, self.domain, self.tmp, executor=executor)
        self.procs.append(p)
        return p

    def publisher(self, *args: str) -> Proc:
        p = start_publisher(self.domain, self.tmp, *args)
        self.procs.append(p)
        return p

    def listen(self) -> Listener:
        self.listener = Listener(self.domain)
        return self.listener

    def close(self) -> None:
        for p in self.procs:
            p.stop(grace=2.0)
        if self.listener is not None:
            self.listener.close()


# --- process figures and the node's own status -----------------------------------------------

CLK_TCK = os.sysconf("SC_CLK_TCK")


def cpu_seconds(pid: int) -> float:
    """utime + stime of a process [s] from /proc/<pid>/stat (fields 14 and 15, proc(5))."""
    with open(f"/proc/{pid}/stat") as f:
        fields = f.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLK_TCK


def rss_kib(pid: int) -> int:
    """Resident set size [KiB] of a process (VmRSS in /proc/<pid>/status, proc(5))."""
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    raise RuntimeError(f"no VmRSS for pid {pid}")


def node_status(lis: Listener, name: str = "kinematic_monitor: node") -> dict[str, str]:
    """Key-values of the latest status called ``name`` that ``lis`` heard on /diagnostics."""
    for arr in reversed(lis.diagnostics):
        for s in arr.status:
            if s.name == name:
                return {kv.key: kv.value for kv in s.values}
    return {}


def numeric_values(values: dict[str, str]) -> dict[str, float]:
    """The key-values that parse as numbers."""
    out: dict[str, float] = {}
    for key, text in values.items():
        try:
            out[key] = float(text)
        except ValueError:
            pass
    return out

def _publish_main(argv: Sequence[str]) -> int:
    """Play an invented straight drive at steady speed into the monitor's inputs.

    Stamps are wall-clock time (the node's clock for staleness). Truth: heading 0,
    x = v*t, y = 0; wheels at v / R [rad/s]; small Gaussian noise matching the node's
    default noise parameters.
    """
    ap = argparse.ArgumentParser(prog="dds_helpers publish")
    ap.add_argument("--duration", type=float, default=5.0, help="s")
    ap.add_argument("--speed", type=float, default=8.0, help="m/s")
    ap.add_argument("--wheel-radius", type=float, default=0.31, help="m")
    ap.add_argument("--js-rate", type=float, default=100.0, help="Hz")
    ap.add_argument("--odom-rate", type=float, default=50.0, help="Hz")
    ap.add_argument("--imu-rate", type=float, default=200.0, help="Hz")
    ap.add_argument("--imu-stop", type=float, default=math.inf,
                    help="s after start at which the IMU stops")
    ap.add_argument("--jump-at", type=float, default=math.inf,
                    help="s after start from which the localisation is offset sideways")
    ap.add_argument("--jump", type=float, default=3.0, help="m, size of the sideways offset")
    ap.add_argument("--reliable", action="store_true", help="reliable QoS (default best effort)")
    ap.add_argument("--wait-subscriber", type=float, default=5.0,
                    help="s to wait for the node's JointState subscription before playing")
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args(argv)

    import random

    import rclpy
    import sample_msgs as rm
    from nav_msgs.msg import Odometry
    from rclpy.node import Node
    from rclpy.qos import QoSProfile, ReliabilityPolicy
    from sensor_msgs.msg import Imu, JointState

    from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

    stop = {"flag": False}

    def on_signal(signum: int, frame: Any) -> None:
        stop["flag"] = True

    from rclpy.signals import SignalHandlerOptions
    rclpy.init(signal_handler_options=SignalHandlerOptions.NO)
    signal.signal(signal.SIGINT, on_signal)
    signal.signal(signal.SIGTERM, on_signal)
    node = Node("drive_publisher")
    qos = QoSProfile(depth=100, reliability=ReliabilityPolicy.RELIABLE if a.reliable
                     else ReliabilityPolicy.BEST_EFFORT)
    pub_js = node.create_publisher(JointState, "/joint_states", qos)
    pub_odom = node.create_publisher(Odometry, "/localization/odom", qos)
    pub_imu = node.create_publisher(Imu, "/imu/data", qos)
    deadline = time.monotonic() + a.wait_subscriber
    # every topic matched before the first message: a message published before its
    # subscription matched is lost even with reliable QoS (seen once: one IMU message short)
    while any(p.get_subscription_count() == 0 for p in (pub_js, pub_odom, pub_imu)) \
            and time.monotonic() < deadline:
        time.sleep(0.02)
    time.sleep(0.2)  # and the subscriber side of each match
    rng = random.Random(a.seed)
    v, r = a.speed, a.wheel_radius
    pos_std, yaw_std, w_std, rate_std = 0.02, 0.003, 0.05, 0.002
    print("playing", flush=True)
    t_start = time.time()
    counts = {"js": 0, "odom": 0, "imu": 0}
    queue = [(0.0, "js"), (0.0, "odom"), (0.0, "imu")]
    period = {"js": 1.0 / a.js_rate, "odom": 1.0 / a.odom_rate, "imu": 1.0 / a.imu_rate}
    heapq.heapify(queue)
    while queue and not stop["flag"]:
        t_rel, kind = heapq.heappop(queue)
        if t_rel > a.duration:
            continue
        wait = t_start + t_rel - time.time()
        if wait > 0:
            time.sleep(wait)
        stamp = time.time()
        elapsed = stamp - t_start
        if kind == "js":
            w = [v / r + rng.gauss(0, w_std) for _ in range(4)]
            pub_js.publish(rm.joint_state_msg(ChassisSample(
                stamp, steer_left=rng.gauss(0, 0.001), steer_right=rng.gauss(0, 0.001),
                wheel_front_left=w[0], wheel_front_right=w[1],
                wheel_rear_left=w[2], wheel_rear_right=w[3])))
        elif kind == "odom":
            y = a.jump if elapsed >= a.jump_at else 0.0
            cov = (pos_std**2, 0.0, 0.0, 0.0, pos_std**2, 0.0, 0.0, 0.0, yaw_std**2)
            pub_odom.publish(rm.odometry_msg(LocalizationSample(
                stamp, x=v * elapsed + rng.gauss(0, pos_std), y=y + rng.gauss(0, pos_std),
                yaw=rng.gauss(0, yaw_std), vx=v, vy=0.0, yaw_rate=0.0, pose_cov=cov)))
        else:
            if elapsed < a.imu_stop:
                pub_imu.publish(rm.imu_msg(ImuSample(
                    stamp, yaw_rate=rng.gauss(0, rate_std), ax=rng.gauss(0, 0.05),
                    ay=rng.gauss(0, 0.05))))
        counts[kind] += 1
        heapq.heappush(queue, (t_rel + period[kind], kind))
    print(f"published {counts}", flush=True)
    node.destroy_node()
    rclpy.shutdown()
    return 0


def tmpdir() -> str:
    """A fresh temporary directory (the caller removes it)."""
    return tempfile.mkdtemp(prefix="km_dds_")


if __name__ == "__main__":
    if len(sys.argv) >= 2 and sys.argv[1] == "publish":
        sys.exit(_publish_main(sys.argv[2:]))
    print("usage: dds_helpers.py publish [options]", file=sys.stderr)
    sys.exit(2)
