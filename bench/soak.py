"""Soak: the live node over DDS for minutes at a multiple of the nominal input rates.

A publisher process (``test/dds_helpers.py publish``: invented straight drive, wall-clock
stamps) feeds the node JointState, Odometry and Imu at ``--rate-factor`` times the nominal
100 / 50 / 200 Hz; a listener reads the node's own status ("kinematic_monitor: node"
key-values on /diagnostics) every half second. Printed at the end:

* node memory (VmRSS from /proc/<pid>/status) after a warm-up and at the end, and the
  growth in percent (target: <= 5 %);
* processing latency (wall time - header stamp when the core consumed a sample, reorder
  window included): the maximum of the node's windowed ``latency_max`` (or p99 when the
  node does not report a max) and the median of its windowed p50;
* messages published and received, late drops, callback errors, node CPU share.

Figures from one run on a shared machine; compare within a run only.
Usage: python bench/soak.py [--minutes 10] [--rate-factor 10]
"""

from __future__ import annotations

import argparse
import statistics
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
    numeric_values,
    rss_kib,
    start_node,
    start_publisher,
    tmpdir,
    write_params,
)

NOMINAL = {"js": 100.0, "odom": 50.0, "imu": 200.0}  # Hz, the test car's nominal rates
PARAMS_EXTRA = """\
    inputs:
      gnss:
        topic: ""
    output:
      events_log: "events.jsonl"
      diagnostics_period: 0.5
"""


def node_values(lis: Listener) -> dict[str, float]:
    """Numeric key-values of the latest node status."""
    return numeric_values(node_status(lis))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0, help="playing time [min]")
    ap.add_argument("--rate-factor", type=float, default=10.0,
                    help="multiple of the nominal rates (100/50/200 Hz)")
    ap.add_argument("--warmup", type=float, default=20.0,
                    help="s of playing before the start RSS is taken")
    ap.add_argument("--executor", default="auto", choices=["auto", "events", "single"])
    a = ap.parse_args(argv)
    if a.minutes <= 0 or a.rate_factor <= 0:
        ap.error("--minutes and --rate-factor must be > 0")
    duration = 60.0 * a.minutes
    warmup = min(a.warmup, 0.2 * duration)
    rates = {k: v * a.rate_factor for k, v in NOMINAL.items()}
    work = Path(tmpdir())
    domain = new_domain_id()
    node = start_node(write_params(work / "p.yaml", extra=PARAMS_EXTRA), domain, work,
                      executor=a.executor)
    lis = Listener(domain)
    p50s: list[float] = []
    peak: list[float] = []
    lis.diagnostics.clear()
    try:
        deadline = time.monotonic() + 30
        while "running (" not in node.output() and time.monotonic() < deadline:
            time.sleep(0.05)
        if "running (" not in node.output():
            print(node.output()[-3000:], file=sys.stderr)
            return 1
        pub = start_publisher(domain, work, "--duration", str(duration),
                              "--js-rate", str(rates["js"]), "--odom-rate", str(rates["odom"]),
                              "--imu-rate", str(rates["imu"]), "--reliable")
        if not lis.spin_until(lambda: "playing" in pub.output(), timeout=30.0):
            print(pub.output()[-3000:], file=sys.stderr)
            return 1
        t_play = time.monotonic()
        print(f"soak: {a.minutes:g} min at {a.rate_factor:g}x "
              f"(JointState {rates['js']:g} Hz, Odometry {rates['odom']:g} Hz, "
              f"Imu {rates['imu']:g} Hz), node pid {node.pid}", flush=True)
        lis.spin_until(lambda: False, timeout=warmup)
        rss0, cpu0, t0 = rss_kib(node.pid), cpu_seconds(node.pid), time.monotonic()
        next_report = t0 + 60.0
        seen = 0
        while time.monotonic() - t_play < duration and node.p.poll() is None:
            lis.executor.spin_once(timeout_sec=0.05)
            if len(lis.diagnostics) > seen:  # one node status per diagnostics message
                seen = len(lis.diagnostics)
                v = node_values(lis)
                if "latency_p50 [ms]" in v:
                    p50s.append(v["latency_p50 [ms]"])
                    peak.append(v.get("latency_max [ms]", v.get("latency_p99 [ms]", 0.0)))
                lis.diagnostics.clear()  # keep the listener's memory flat
                seen = 0
            if time.monotonic() >= next_report:
                next_report += 60.0
                print(f"  {(time.monotonic() - t_play) / 60:.1f} min: RSS "
                      f"{rss_kib(node.pid) / 1024:.1f} MiB", flush=True)
        rss1, cpu1, t1 = rss_kib(node.pid), cpu_seconds(node.pid), time.monotonic()
        pub.wait(timeout=30.0)
        lis.spin_until(lambda: False, timeout=1.2)
        final = node_values(lis)
        lines = pub.output().strip().splitlines()
        published = lines[-1].removeprefix("published ") if lines else "?"
        pub.stop()
    finally:
        node.stop()
        lis.close()
    growth = 100.0 * (rss1 - rss0) / rss0
    received = int(sum(v for k, v in final.items() if k.startswith("received.")))
    peak_key = "latency_max" if final.get("latency_max [ms]") is not None else "latency_p99"
    print(f"RSS start (after {warmup:.0f} s warm-up): {rss0 / 1024:.1f} MiB")
    print(f"RSS end:   {rss1 / 1024:.1f} MiB")
    print(f"RSS growth: {growth:+.2f} % ({'ok' if growth <= 5.0 else 'OVER'} <= 5 %)")
    if peak:
        print(f"processing latency: max {max(peak):.1f} ms (largest windowed {peak_key}), "
              f"median of windowed p50 {statistics.median(p50s):.2f} ms")
    print(f"published {published}; received {received}; "
          f"late dropped {int(final.get('late_dropped', 0))}; "
          f"callback errors {int(final.get('callback_errors', 0))}; "
          f"events {int(final.get('events', 0))}")
    print(f"node CPU {100.0 * (cpu1 - cpu0) / (t1 - t0):.0f} % of a core")
    return 0


if __name__ == "__main__":
    sys.exit(main())
