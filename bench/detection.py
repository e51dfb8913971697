"""Detection benchmark: grade the monitor (and a yaw-rate-threshold baseline) on a suite.

Usage: ``.venv/bin/python bench/detection.py [--short] [--cases NAME,...] [-v]``

Builds the suite of ``grading.build_suite`` (30 min of gentle dry
driving, slip on ice/wet/snow, localisation jumps and heading drift, a steering offset, and
an independent set driven by commonroad's ``vehicle_dynamics_std``), runs every case
through the replay pipeline (sensors with the stated noise -> faults -> records ->
convert -> Monitor) and prints, per kind: must-detect truth episodes, detected, missed,
optional episodes detected, median and max latency [s], wrong-kind events, false alarms
and false alarms per hour; then the targets with PASS/FAIL.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import grading as de


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--short", action="store_true", help="the short suite of the unit test")
    ap.add_argument("--cases", default="", help="comma-separated case names to run")
    ap.add_argument("-v", "--verbose", action="store_true", help="list events and truth")
    args = ap.parse_args(argv)
    cases = de.build_suite(full=not args.short)
    if args.cases:
        want = set(args.cases.split(","))
        cases = [c for c in cases if c.name in want]
    results = []
    t_all = time.perf_counter()
    for c in cases:
        t0 = time.perf_counter()
        r = de.run_case(c)
        results.append(r)
        g = de.grade(r.events, r.truths)
        print(f"{c.name:20s} {c.group:10s} {r.hours * 60:6.1f} min  max|a_y| "
              f"{r.max_abs_ay_g:4.2f} g  events {len(r.events):3d}  missed {len(g.missed)}  "
              f"wrong {len(g.wrong)}  false {len(g.false_alarms)}  "
              f"({time.perf_counter() - t0:.1f} s)", flush=True)
        if args.verbose or g.missed or g.wrong or g.false_alarms:
            epoch = de.EPOCH
            for t in g.missed:
                print(f"    missed  {t.kind:18s} {t.start - epoch:8.2f}-{t.end - epoch:8.2f}")
            for e, t in g.wrong:
                print(f"    wrong   {e.kind:18s} at {e.start - epoch:8.2f} (truth {t.kind})"
                      f" {e.summary}")
            for e in g.false_alarms:
                print(f"    false   {e.kind:18s} {e.start - epoch:8.2f}-{e.end - epoch:8.2f} "
                      f"L{e.level} {e.summary}")
            if args.verbose:
                for t in r.truths:
                    print(f"    truth   {t.kind:18s} {t.start - epoch:8.2f}-{t.end - epoch:8.2f}"
                          f" must={t.must}")
                for e in r.events:
                    print(f"    event   {e.kind:18s} {e.start - epoch:8.2f}-{e.end - epoch:8.2f}"
                          f" det {e.detected_at - epoch:8.2f} L{e.level} {e.summary}")
    hours = sum(r.hours for r in results)
    dry = [r for r in results if r.case.group == "dry"]
    dry_hours = sum(r.hours for r in dry)
    print()
    print("Rules:", de.MATCH_RULE)
    print("      ", de.MUST_DETECT_RULE)
    print(f"Suite: {len(results)} cases, {hours * 60:.1f} min driven, dry set "
          f"{dry_hours * 60:.1f} min; run time {time.perf_counter() - t_all:.0f} s")
    print()
    mon = de.table(results, "events")
    print(de.format_table(mon, hours, "Monitor (all cases; FA/h over the whole suite)"))
    print()
    print(de.format_table(de.table(results, "baseline"), hours,
                          "Baseline: |IMU yaw rate - kinematic| > 0.05 rad/s for 0.2 s"))
    print()
    print(de.format_table(de.table(results, "events", ["commonroad"]),
                          sum(r.hours for r in results if r.case.group == "commonroad"),
                          "Monitor on the commonroad set only"))
    print()
    checks = de.targets(results)
    for name, ok, value in checks:
        print(f"  [{'PASS' if ok else 'FAIL'}] {name}: {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
