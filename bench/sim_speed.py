"""Real-time factor of the vehicle simulator: simulated seconds per second of computing.

Usage: .venv/bin/python bench/sim_speed.py [--minutes 10] [--scenario mixed_loop]

Prints simulated time, wall-clock and process CPU time, and the two real-time factors
(simulated / wall, simulated / CPU) measured in the same run. Target: >= 20x on one core
(10 minutes of driving well under a minute). On a shared machine the CPU-time factor is the
steadier figure; the wall-clock factor shows what a user waits.
"""

from __future__ import annotations

import argparse
import time

from kinematic_monitor.sim.scenarios import SCENARIOS, simulate
from kinematic_monitor.sim.truth import truth_intervals


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0, help="simulated minutes")
    ap.add_argument("--scenario", default="mixed_loop", choices=sorted(SCENARIOS))
    args = ap.parse_args()
    sim_s = 60.0 * args.minutes
    sc = SCENARIOS[args.scenario]()
    w0, c0 = time.perf_counter(), time.process_time()
    tr = simulate(sc, duration=sim_s)
    w1, c1 = time.perf_counter(), time.process_time()
    ivs = truth_intervals(tr)
    w2, c2 = time.perf_counter(), time.process_time()
    steps = len(tr)
    print(
        f"scenario {args.scenario}: {sim_s:.0f} s simulated, {steps} steps of {tr.dt * 1e3:g} ms"
    )
    print(
        f"simulate: wall {w1 - w0:.2f} s, cpu {c1 - c0:.2f} s, "
        f"{(c1 - c0) / steps * 1e6:.1f} us cpu per step"
    )
    print(
        f"real-time factor: wall {sim_s / (w1 - w0):.1f}x, cpu {sim_s / (c1 - c0):.1f}x "
        f"(target >= 20x)"
    )
    print(f"truth intervals: {len(ivs)} in wall {w2 - w1:.2f} s, cpu {c2 - c1:.2f} s")


if __name__ == "__main__":
    main()
