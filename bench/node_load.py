"""Load bench for the live node: separate publisher and node processes over DDS (localhost).

For each (executor, rates) case it prints: messages published and received,
samples dropped for lateness by the reorder buffer, receive and processed latency (wall time
- header stamp, median and 99th percentile; "processed" includes the reorder window), and
the node's CPU use from /proc/<pid>/stat. Then, in this same process, the core's per-sample cost
(Monitor.process over a recorded-like mix) beside a bare filterpy EKF step, as a ratio.

Compare figures within one run only (shared, noisy machine).
The node takes its inputs as serialized bytes decoded by kinematic_monitor.io.decode.
``--floor`` adds a node that only counts the same messages (the executor + DDS floor; raw
bytes and rclpy message objects).
Usage: python bench/node_load.py [--quick] [--repeat N] [--nominal-only] [--floor]
"""

from __future__ import annotations

import argparse
import math
import os
import random
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "test"))
sys.path.insert(0, str(REPO))

from dds_helpers import (  # noqa: E402
    Listener,
    cpu_seconds,
    new_domain_id,
    node_status,
    start_node,
    start_publisher,
    tmpdir,
    write_params,
)

PARAMS_EXTRA = """\
    inputs:
      gnss:
        topic: ""
    output:
      events_log: "events.jsonl"
"""


def run_case(executor: str, js: float, imu: float, odom: float, duration: float) -> dict:
    work = Path(tmpdir())
    domain = new_domain_id()
    params = write_params(work / "p.yaml", extra=PARAMS_EXTRA)
    node = start_node(params, domain, work, executor=executor)
    lis = Listener(domain)
    try:
        deadline = time.monotonic() + 20
        while "running (" not in node.output() and time.monotonic() < deadline:
            time.sleep(0.05)
        pub = start_publisher(domain, work, "--duration", str(duration), "--js-rate", str(js),
                              "--imu-rate", str(imu), "--odom-rate", str(odom))
        # measure CPU over the middle of the playing time (skip its first and last 20 %)
        lis.spin_until(lambda: "playing" in pub.output(), timeout=20.0)
        lis.spin_until(lambda: False, timeout=0.2 * duration)
        c0, t0 = cpu_seconds(node.pid), time.monotonic()
        lis.spin_until(lambda: False, timeout=0.6 * duration)
        c1, t1 = cpu_seconds(node.pid), time.monotonic()
        pub.wait(timeout=duration + 10)
        lis.spin_until(lambda: False, timeout=1.6)  # one more /diagnostics after the end
        status = node_status(lis)
        lines = pub.output().strip().splitlines()
        published = lines[-1].removeprefix("published ") if lines else "?"
        pub.stop()
    finally:
        node.stop()
        lis.close()
    received = sum(int(v) for k, v in status.items() if k.startswith("received."))
    return {
        "executor": executor, "rates": f"{js:g}/{imu:g}/{odom:g} Hz",
        "cpu_pct": 100.0 * (c1 - c0) / (t1 - t0),
        "published": published, "received": received,
        "late_dropped": status.get("late_dropped", "?"),
        "rx_p50": status.get("receive_latency_p50 [ms]", "?"),
        "rx_p99": status.get("receive_latency_p99 [ms]", "?"),
        "p50": status.get("latency_p50 [ms]", "?"),
        "p99": status.get("latency_p99 [ms]", "?"),
        "errors": status.get("callback_errors", "0"),
    }


# --- floor: the same three inputs into a node that does nothing with them -----------------

FLOOR_NODE = """\
import signal, sys, rclpy
from rclpy.experimental import EventsExecutor
from rclpy.node import Node
from rclpy.qos import QoSProfile, ReliabilityPolicy
from rclpy.signals import SignalHandlerOptions
from rclpy.task import Future
from nav_msgs.msg import Odometry
from sensor_msgs.msg import Imu, JointState
rclpy.init(signal_handler_options=SignalHandlerOptions.NO)
node = Node("floor")
qos = QoSProfile(depth=100, reliability=ReliabilityPolicy.BEST_EFFORT)
n = [0]
def cb(msg):
    n[0] += 1
for t, topic in ((JointState, "/joint_states"), (Imu, "/imu/data"),
                 (Odometry, "/localization/odom")):
    node.create_subscription(t, topic, cb, qos, raw=sys.argv[1] == "raw")
ex = EventsExecutor()
ex.add_node(node)
done = Future()
signal.signal(signal.SIGINT, lambda *a: done.set_result(1))
print("running (floor)", flush=True)
while not done.done():
    ex.spin_until_future_complete(done, timeout_sec=0.25)
print(f"received {n[0]}", flush=True)
"""


def run_floor(messages: str, js: float, imu: float, odom: float, duration: float) -> float:
    """CPU % of a node that only counts the messages (EventsExecutor; raw or typed)."""
    from dds_helpers import Proc, ros_env

    work = Path(tmpdir())
    domain = new_domain_id()
    node = Proc([sys.executable, "-c", FLOOR_NODE, messages], ros_env(domain), work, "floor")
    try:
        deadline = time.monotonic() + 20
        while "running (" not in node.output() and time.monotonic() < deadline:
            time.sleep(0.05)
        pub = start_publisher(domain, work, "--duration", str(duration), "--js-rate", str(js),
                              "--imu-rate", str(imu), "--odom-rate", str(odom))
        deadline = time.monotonic() + 20
        while "playing" not in pub.output() and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(0.2 * duration)
        c0, t0 = cpu_seconds(node.pid), time.monotonic()
        time.sleep(0.6 * duration)
        c1, t1 = cpu_seconds(node.pid), time.monotonic()
        pub.wait(timeout=duration + 10)
        pub.stop()
    finally:
        node.stop()
    return 100.0 * (c1 - c0) / (t1 - t0)


# --- core cost vs bare filterpy EKF --------------------------------------------------------

def core_cost(n_seconds: float = 20.0) -> tuple[float, float, float]:
    """(µs per sample through Monitor.process, µs per filterpy EKF step, ratio).

    Samples: a straight invented drive at 8 m/s, JointState 100 Hz, Imu 200 Hz,
    Odometry 50 Hz, in stamp order. filterpy: 5-state bicycle EKF (x, y, yaw, v, steer
    bias) predict + 3-D pose update per step, which is the work one sample would cost a
    filterpy-based core at most.
    """
    import numpy as np
    from filterpy.kalman import ExtendedKalmanFilter

    from kinematic_monitor.config import validation
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

    cfg = validation.validate({"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
                           "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55,
                           "inputs.gnss.topic": ""})
    rng = random.Random(3)
    v, r, t0 = 8.0, 0.31, 1_800_000_000.0
    samples: list[object] = []
    for i in range(int(n_seconds * 200)):
        t = t0 + i / 200.0
        samples.append(ImuSample(t, yaw_rate=rng.gauss(0, 0.002)))
        if i % 2 == 0:
            w = v / r
            samples.append(ChassisSample(t + 1e-4, steer_left=0.0, steer_right=0.0,
                                         wheel_front_left=w, wheel_front_right=w,
                                         wheel_rear_left=w, wheel_rear_right=w))
        if i % 4 == 0:
            el = i / 200.0
            samples.append(LocalizationSample(
                t + 2e-4, x=v * el + rng.gauss(0, 0.02), y=rng.gauss(0, 0.02),
                yaw=rng.gauss(0, 0.003), vx=v, vy=0.0, yaw_rate=0.0,
                pose_cov=(4e-4, 0, 0, 0, 4e-4, 0, 0, 0, 1e-5)))
    mon = Monitor(cfg)
    start = time.perf_counter()
    for s in samples:
        mon.process(s)
    core_us = 1e6 * (time.perf_counter() - start) / len(samples)

    L, dt = 2.7, 0.01
    ekf = ExtendedKalmanFilter(dim_x=5, dim_z=3)
    ekf.x = np.array([0.0, 0.0, 0.0, v, 0.0])
    ekf.P *= 0.1
    ekf.Q = np.eye(5) * 1e-4
    ekf.R = np.diag([4e-4, 4e-4, 1e-5])
    H = np.zeros((3, 5))
    H[0, 0] = H[1, 1] = H[2, 2] = 1.0

    def hx(x: np.ndarray) -> np.ndarray:
        return x[:3]

    def h_jacobian(x: np.ndarray) -> np.ndarray:
        return H

    n = 2000
    start = time.perf_counter()
    for i in range(n):
        x = ekf.x
        yaw, sp, b = x[2], x[3], x[4]
        F = np.eye(5)
        F[0, 2] = -sp * math.sin(yaw) * dt
        F[0, 3] = math.cos(yaw) * dt
        F[1, 2] = sp * math.cos(yaw) * dt
        F[1, 3] = math.sin(yaw) * dt
        F[2, 3] = math.tan(-b) / L * dt
        F[2, 4] = -sp / (L * math.cos(b) ** 2) * dt
        ekf.x = x + np.array([sp * math.cos(yaw) * dt, sp * math.sin(yaw) * dt,
                              sp * math.tan(-b) / L * dt, 0.0, 0.0])
        ekf.F = F
        ekf.P = F @ ekf.P @ F.T + ekf.Q
        ekf.update(np.array([v * (i + 1) * dt, 0.0, 0.0]), h_jacobian, hx)
    ekf_us = 1e6 * (time.perf_counter() - start) / n
    return core_us, ekf_us, core_us / ekf_us


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="shorter runs, events executor only")
    ap.add_argument("--repeat", type=int, default=1,
                    help="run each nominal-rate case N times")
    ap.add_argument("--nominal-only", action="store_true", help="only 100/200/50 Hz cases")
    ap.add_argument("--floor", action="store_true",
                    help="also measure a node that only counts the messages (the floor)")
    a = ap.parse_args()
    os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    duration = 5.0 if a.quick else 8.0
    cases: list[tuple[str, int, int, int]] = []
    if not a.nominal_only:
        cases.append(("events", 1000, 400, 100))
    for _ in range(max(1, a.repeat)):
        cases.append(("events", 100, 200, 50))
    if not a.quick:
        cases.append(("single", 100, 200, 50))
    print("JointState/Imu/Odometry rates; latency = wall time - header stamp at reception (rx)"
          " and after the reorder window (processed)")
    hdr = (f"{'executor':8} {'rates':>18} {'cpu %':>6} {'recv':>6} {'late':>5} "
           f"{'rx p50':>7} {'rx p99':>7} {'p50 ms':>7} {'p99 ms':>7} {'errs':>4}  published")
    print(hdr)
    cpu: dict[tuple[str, str], list[float]] = {}
    for ex, js, imu, odom in cases:
        r = run_case(ex, js, imu, odom, duration)
        cpu.setdefault((ex, r["rates"]), []).append(r["cpu_pct"])
        print(f"{r['executor']:8} {r['rates']:>18} {r['cpu_pct']:6.1f} "
              f"{r['received']:6d} {r['late_dropped']:>5} {r['rx_p50']:>7} {r['rx_p99']:>7} "
              f"{r['p50']:>7} {r['p99']:>7} {r['errors']:>4}  {r['published']}", flush=True)
    for (ex, rates), vals in sorted(cpu.items()):
        print(f"{ex} {rates}: median {sorted(vals)[len(vals) // 2]:.1f} % of a core "
              f"(of {len(vals)})")
    if a.floor:
        for mode in ("raw", "typed") * max(1, a.repeat):
            pct = run_floor(mode, 100, 200, 50, duration)
            print(f"floor (node that only counts messages, events executor, {mode}) "
                  f"100/200/50 Hz: {pct:.1f} % of a core", flush=True)
    core_us, ekf_us, ratio = core_cost(10.0 if a.quick else 20.0)
    print(f"core Monitor.process: {core_us:.1f} us/sample; bare filterpy EKF predict+update: "
          f"{ekf_us:.1f} us/step; ratio core/filterpy = {ratio:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
