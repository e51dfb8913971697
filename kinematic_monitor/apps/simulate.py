"""``kinematic-monitor simulate``: drive a demo scenario and record it as a rosbag2 folder.

The folder holds the bag plus ``truth.json`` (what was simulated and injected, with
truth windows in header-stamp seconds) and ``params.yaml`` (the true vehicle geometry in
the node's parameter schema), so ``replay OUT --params OUT/params.yaml`` works at once.
"""

from __future__ import annotations

import argparse
import math
import shutil
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

from kinematic_monitor.apps.cli import EXIT_OK, UsageError, make_parent_folders

HELP = "simulate a demo drive (optionally with injected faults) into a rosbag2 folder"

_PROGRESS_EVERY = 1000  # messages between progress-bar refreshes


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of the ``simulate`` subcommand."""
    from kinematic_monitor.sim.faults import FAULT_HELP

    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = (
        "fault specs (--fault NAME:key=value,...; seconds of simulated time, radians, "
        "metres; defaults shown):\n" + FAULT_HELP
    )
    parser.add_argument("scenario", nargs="?", help="scenario name (see --list)")
    parser.add_argument("--list", action="store_true", help="print scenario names and exit")
    parser.add_argument("--out", metavar="BAG",
                        help="output rosbag2 folder (must not exist; missing parent folders "
                        "are created)")
    parser.add_argument(
        "--storage",
        choices=("mcap", "sqlite3"),
        default="mcap",
        help="rosbag2 storage plugin (default: mcap)",
    )
    parser.add_argument(
        "--duration", type=float, metavar="S", help="simulated seconds (default: scenario's)"
    )
    parser.add_argument("--seed", type=int, default=0, help="random seed (default: 0)")
    parser.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="SPEC",
        help="inject a fault, e.g. loc-jump:start=20,dx=2 (repeatable; list below)",
    )
    parser.add_argument("--no-gnss", action="store_true", help="do not record /gnss/fix")
    parser.add_argument(
        "--force", action="store_true", help="replace an existing bag folder at --out"
    )
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def _scenarios() -> dict[str, Callable[..., Any]]:
    from kinematic_monitor.sim.scenarios import SCENARIOS

    return SCENARIOS


def _prepare_out(out: Path, force: bool) -> None:
    """Refuse an existing path unless --force and it is a bag folder (or empty)."""
    if not out.exists() and not out.is_symlink():
        return
    if not force:
        raise UsageError(f"--out {out} exists already (use --force to replace a bag folder)")
    if out.is_dir() and not out.is_symlink():
        contents = list(out.iterdir())
        if not contents or (out / "metadata.yaml").exists() or (out / "truth.json").exists():
            shutil.rmtree(out)
            return
    raise UsageError(
        f"--out {out} exists and is not a bag folder; refusing to replace it even with --force"
    )


def _progress(enabled: bool) -> Callable[[int], Callable[[], None] | None]:
    def make(total: int) -> Callable[[], None] | None:
        if not enabled:
            return None
        from tqdm import tqdm

        bar = tqdm(total=total, unit="msg", unit_scale=True, file=sys.stderr, leave=False)
        count = 0

        def tick() -> None:
            nonlocal count
            count += 1
            if count % _PROGRESS_EVERY == 0 or count == total:
                bar.update(count - bar.n)
                if count == total:
                    bar.close()

        return tick

    return make


def _scenario_truth(trace: Any) -> list[Any]:
    """The drive's own truth windows (slip etc.) from ``truth.py``, if it offers them."""
    try:
        from kinematic_monitor.sim import truth
    except ImportError:  # pragma: no cover - simulator part not installed
        return []
    for name in ("truth_intervals", "derive_truth", "intervals_from_trace"):
        fn = getattr(truth, name, None)
        if callable(fn):
            return list(fn(trace))
    return []


def run(args: argparse.Namespace) -> int:
    """Run ``simulate``; returns the exit code (UsageError -> 2 via the CLI)."""
    scenarios = _scenarios()
    if args.list:
        for name in scenarios:
            print(name)
        return EXIT_OK
    if not args.scenario:
        raise UsageError("give a scenario name (or --list); known: " + ", ".join(scenarios))
    if args.scenario not in scenarios:
        raise UsageError(f"unknown scenario {args.scenario!r}; known: " + ", ".join(scenarios))
    if not args.out:
        raise UsageError("--out BAG is required")
    if args.duration is not None and not (math.isfinite(args.duration) and args.duration > 0):
        raise UsageError(f"--duration {args.duration!r} must be a positive number of seconds")
    if args.seed < 0:
        raise UsageError(f"--seed {args.seed} must be >= 0")

    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.faults import parse_fault
    from kinematic_monitor.sim.scenarios import simulate
    from kinematic_monitor.sim.sensors import SensorConfig

    try:
        faults = [parse_fault(spec) for spec in args.fault]
    except ValueError as exc:
        raise UsageError(f"--fault: {exc}") from None
    config = SensorConfig()
    if args.no_gnss:
        config.gnss.rate_hz = 0.0
    if args.no_gnss and any(getattr(f, "topic", None) == "gnss" for f in faults):
        raise UsageError("--fault silent:topic=gnss needs /gnss/fix; drop --no-gnss")
    out = Path(args.out)
    _prepare_out(out, args.force)

    trace = simulate(scenarios[args.scenario](), duration=args.duration, seed=args.seed)
    for f in faults:
        start = float(getattr(f, "start", 0.0))
        if start >= trace.duration:
            raise UsageError(
                f"--fault {f.spec()}: start={start:g} s is after the drive's end "
                f"({trace.duration:g} s)"
            )
    show = not args.no_progress and sys.stderr.isatty()
    make_parent_folders(out, "--out")
    result = write_simulation(
        out,
        trace,
        seed=args.seed,
        storage=args.storage,
        config=config,
        faults=faults,
        scenario_truth=_scenario_truth(trace),
        progress=_progress(show),
    )
    total = sum(result.counts.values())
    print(f"wrote {out} ({args.storage}, {trace.duration:g} s, {total} messages)")
    for key, n in result.counts.items():
        print(f"  {key}: {n}")
    print(f"truth: {result.truth} ({len(result.intervals)} intervals)")
    print(f"params: {result.params}")
    return EXIT_OK
