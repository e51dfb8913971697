"""Sweep scaling: 1 versus 2 Dask workers over the same bags, measured side by side in one run.

Usage: python bench/sweep_scaling.py [--bags 8] [--seconds 60] [--repeat 1] [--keep DIR]

Simulates ``--bags`` drives of ``--seconds`` each (or reuses them from ``--keep DIR``), then
sweeps them into fresh output folders with a local cluster of 1 and of 2 worker processes,
alternating the order over ``--repeat`` rounds. Two figures per worker count:

- tasks: the sweep with the cluster already up and its workers warmed (imports done);
- end to end: ``sweep.sweep`` starting and stopping its own cluster.

Target: tasks speed-up (1 worker / 2 workers) >= 1.6 on 2 cores. Compare ratios, not
seconds: machines are noisy and shared.
"""

from __future__ import annotations

import argparse
import logging
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from kinematic_monitor.apps import sweep  # noqa: E402

SCENARIOS = ("mixed_loop", "circle_ice_patch", "figure_eight", "brake_on_ice",
             "circle_wet_patch", "slalom", "launch_on_snow", "skidpad_circle")


def make_bags(root: Path, n: int, seconds: float) -> None:
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.scenarios import SCENARIOS as ALL
    from kinematic_monitor.sim.scenarios import simulate

    for i in range(n):
        bag = root / f"drive_{i:02d}"
        if (bag / "metadata.yaml").is_file():
            continue
        name = SCENARIOS[i % len(SCENARIOS)]
        trace = simulate(ALL[name](), duration=seconds, seed=i)
        write_simulation(bag, trace, seed=i, storage="mcap" if i % 2 else "sqlite3")
        print(f"  simulated {bag.name} ({name}, {trace.duration:g} s)", flush=True)


def _warm() -> bool:
    import kinematic_monitor.apps.replay  # noqa: F401
    import kinematic_monitor.apps.report  # noqa: F401
    import kinematic_monitor.core.monitor  # noqa: F401

    return True


def _cpu_share(res: sweep.SweepResult) -> float:
    """CPU seconds over wall seconds summed over the bag tasks: 1.0 = each task had a core."""
    wall = sum(r.elapsed for r in res.records)
    return sum(r.cpu for r in res.records) / wall if wall > 0 else float("nan")


SHARES: dict[tuple[str, int], list[float]] = {}


def timed_tasks(bags: Path, params: Path, out: Path, workers: int) -> float:
    """Seconds for the sweep on a cluster that is already up and warmed."""
    from dask.distributed import Client, LocalCluster

    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None, host="127.0.0.1",
                      silence_logs=logging.ERROR) as cluster, Client(cluster) as client:
        client.run(_warm)
        t0 = time.perf_counter()
        res = sweep.sweep([str(bags)], str(params), str(out), progress=False, client=client)
        dt = time.perf_counter() - t0
    assert res.failed == 0 and res.swept > 0, "every bag must be swept for a fair figure"
    SHARES.setdefault(("tasks", workers), []).append(_cpu_share(res))
    return dt


def timed_end_to_end(bags: Path, params: Path, out: Path, workers: int) -> float:
    t0 = time.perf_counter()
    res = sweep.sweep([str(bags)], str(params), str(out), workers=workers, progress=False)
    dt = time.perf_counter() - t0
    assert res.failed == 0 and res.swept > 0
    SHARES.setdefault(("end to end", workers), []).append(_cpu_share(res))
    return dt


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--bags", type=int, default=8)
    ap.add_argument("--seconds", type=float, default=60.0, help="simulated seconds per bag")
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--keep", type=Path, default=None, help="folder to keep/reuse the bags")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="km_sweep_bench_"))
    bags = args.keep or (tmp / "bags")
    bags.mkdir(parents=True, exist_ok=True)
    try:
        print(f"bags in {bags}")
        make_bags(bags, args.bags, args.seconds)
        params = bags / "drive_00" / "params.yaml"
        times: dict[tuple[str, int], list[float]] = {}
        for r in range(args.repeat):
            order = (1, 2) if r % 2 == 0 else (2, 1)
            for kind, fn in (("tasks", timed_tasks), ("end to end", timed_end_to_end)):
                for w in order:
                    out = tmp / f"out_{kind.replace(' ', '_')}_{w}_{r}"
                    dt = fn(bags, params, out, w)
                    shutil.rmtree(out, ignore_errors=True)
                    times.setdefault((kind, w), []).append(dt)
                    load = os.getloadavg()[0]
                    print(f"  round {r + 1}: {kind}, {w} worker(s): {dt:.2f} s "
                          f"(task CPU/wall {SHARES[(kind, w)][-1]:.2f}, load {load:.1f})",
                          flush=True)
        print(f"\n{args.bags} bags x {args.seconds:g} s simulated, medians of {args.repeat}:")
        for kind in ("tasks", "end to end"):
            t1 = statistics.median(times[(kind, 1)])
            t2 = statistics.median(times[(kind, 2)])
            print(f"  {kind:>10}: 1 worker {t1:.2f} s, 2 workers {t2:.2f} s, "
                  f"speed-up {t1 / t2:.2f}x (target >= 1.6x)")
        print("  task CPU/wall well below 1.0 means other processes took the cores: the "
              "speed-up is then not the sweep's to give")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
