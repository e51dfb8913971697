"""``kinematic-monitor sweep``: replay every bag of a fleet in parallel on Dask.

Finds the rosbag2 folders under the given paths and replays each with the same code as
``kinematic-monitor replay`` (``replay.replay``), one bag per Dask task, on a local
cluster of worker processes by default or on an existing Dask scheduler with
``--scheduler``. Output folder layout::

    OUT/params.yaml                the parameter file used (copied)
    OUT/bags/<bag_id>/             per-bag outputs exactly as ``replay`` writes them,
                                   plus sweep_done.json (the resume marker)
    OUT/fleet_summary.{csv,html,json}
    OUT/low_grip.geojson           slip-event spots (RFC 7946), clustered across bags
    OUT/low_grip_map.html          the spots drawn in the map frame (offline page)
    OUT/calibration_drift.csv      when calibrate results were found

Resume: a bag whose marker holds the same key (bag content fingerprint, parameter values,
package version; see ``fleet``) is skipped, so an interrupted sweep finishes the rest when
run again. A bag that cannot be read is recorded as failed with its error and the sweep
goes on; ``--retry-failed`` tries such bags again. A calibrate result for a bag is a
``calibrated_params.yaml`` in the bag folder or in its output folder.

Several machines: start a scheduler on one machine and workers on each (same package
version installed everywhere, bags and OUT on a shared file system at the same paths)::

    dask scheduler --host 0.0.0.0 --port 8786              # on the head machine
    dask worker tcp://HEAD:8786 --nworkers 2 --nthreads 1   # on every machine
    kinematic-monitor sweep /archive --params p.yaml --out /shared/sweep \\
        --scheduler tcp://HEAD:8786

Exit codes: 0 done, 1 a ``--fail-on`` condition was met (an event at that level, or with
``--fail-on`` other than ``never`` a failed bag), 2 bad usage or no bag found.
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import os
import sys
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from kinematic_monitor import __version__
from kinematic_monitor.apps import fleet
from kinematic_monitor.apps.cli import (
    EXIT_FAIL_ON,
    EXIT_OK,
    UsageError,
    load_config,
    progress_wanted,
)

HELP = ("Replay many rosbag2 folders in parallel on Dask; write per-bag outputs, a fleet "
        "summary and a low-grip map.")

BAGS_DIR = "bags"
PARAMS_COPY = "params.yaml"
SUMMARY_CSV = "fleet_summary.csv"
SUMMARY_HTML = "fleet_summary.html"
SUMMARY_JSON = "fleet_summary.json"
GEOJSON = "low_grip.geojson"
MAP_HTML = "low_grip_map.html"
DRIFT_CSV = "calibration_drift.csv"
CALIBRATION_FILE = "calibrated_params.yaml"
MAX_WORKERS = 256


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of the ``sweep`` subcommand."""
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = (
        "Several machines: run 'dask scheduler --port 8786' on one, 'dask worker "
        "tcp://HOST:8786 --nworkers 2 --nthreads 1' on each (bags and --out on a shared "
        "file system, same paths everywhere), then pass --scheduler tcp://HOST:8786.")
    parser.add_argument("paths", nargs="+", metavar="PATH",
                        help="rosbag2 folders or folders searched for them")
    parser.add_argument("--params", metavar="FILE", required=True,
                        help="ROS 2 parameter file (node kinematic_monitor)")
    parser.add_argument("--out", metavar="DIR", required=True,
                        help="output folder (created; reused to resume a sweep)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes of the local Dask cluster (default: CPU count)")
    parser.add_argument("--scheduler", metavar="ADDRESS", default=None,
                        help="address of a running Dask scheduler, e.g. tcp://host:8786 "
                             "(no local cluster is started)")
    parser.add_argument("--retry-failed", action="store_true",
                        help="sweep again the bags that failed in an earlier run")
    parser.add_argument("--cluster-radius", type=float, default=10.0, metavar="M",
                        help="events of one kind closer than this [m] form one map spot "
                             "(default 10)")
    parser.add_argument("--fail-on", choices=("never", "warn", "error"), default="never",
                        help="exit with code 1 when any bag has an event of this level or "
                             "worse, or any bag failed (default: never)")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


# ---------------------------------------------------------------------------------------
# worker side


def sweep_bag(task: Mapping[str, Any]) -> dict[str, Any]:
    """Replay one bag into ``task['out_dir']`` and write its marker; returns the marker.

    ``task``: bag, out_dir, params (file path), key, bag_id, start_time.
    Never raises for a bad bag: the error goes into a 'failed' marker.
    """
    import time

    from kinematic_monitor.apps.replay import replay

    wall0, cpu0 = time.perf_counter(), time.process_time()
    out_dir = Path(task["out_dir"])
    marker = out_dir / fleet.MARKER
    rec = fleet.BagRecord(bag_id=task["bag_id"], bag=task["bag"], status="ok",
                          key=task["key"], start_time=float(task.get("start_time", math.nan)))
    try:
        if marker.exists():
            marker.unlink()
        # read_ahead off: the sweep already keeps every core busy with one bag each
        result = replay(task["bag"], task["params"], str(out_dir), force=True, report=True,
                        progress=False, read_ahead="off")
        rec.events = result.events
        rec.duration = result.duration
        rec.distance = result.distance
        rec.lost_data = list(result.lost)
        rec.fixes = [fleet.interpolate_fix(result.fixes,
                                           float(ev.get("detected_at") or math.nan))
                     for ev in rec.events]
        rec.track = result.track
    except Exception as exc:  # noqa: BLE001 - fault isolation: record and go on
        rec.status = "failed"
        rec.error = str(exc) if isinstance(exc, UsageError) else f"{type(exc).__name__}: {exc}"
        rec.events, rec.fixes, rec.track = [], [], []
    out_dir.mkdir(parents=True, exist_ok=True)
    rec.elapsed = time.perf_counter() - wall0
    rec.cpu = time.process_time() - cpu0
    doc = rec.to_marker(__version__)
    fleet.write_json_atomic(marker, doc)
    return doc


# ---------------------------------------------------------------------------------------
# driver side


@dataclass
class SweepResult:
    """What a sweep did: per-bag records in bag order and the fleet output paths."""

    records: list[fleet.BagRecord] = field(default_factory=list)
    swept: int = 0
    skipped: int = 0
    failed: int = 0
    outputs: list[Path] = field(default_factory=list)


@contextmanager
def dask_client(workers: int, scheduler: str | None = None) -> Iterator[Any]:
    """A Dask client: on ``scheduler`` if given, else on a local cluster of ``workers``
    single-threaded processes listening on 127.0.0.1 with no dashboard. Closed on exit."""
    from dask.distributed import Client, LocalCluster

    if scheduler:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise UsageError(f"--scheduler {scheduler!r}: cannot connect ({exc})") from None
        try:
            yield client
        finally:
            client.close()
        return
    cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                           dashboard_address=None, host="127.0.0.1",
                           silence_logs=logging.ERROR)
    try:
        client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


@contextmanager
def _client_or(client: Any, workers: int, scheduler: str | None) -> Iterator[Any]:
    """``client`` itself when given (not closed), else a new ``dask_client``."""
    if client is not None:
        yield client
        return
    with dask_client(workers, scheduler) as made:
        yield made


def _copy_params(src: str, dest: Path) -> None:
    """Copy the parameter file into the output folder (atomically; kept if identical)."""
    text = Path(src).read_text(encoding="utf-8")
    if dest.is_file() and dest.read_text(encoding="utf-8") == text:
        return
    if dest.exists() and Path(src).resolve() == dest.resolve():
        return
    fleet.write_text_atomic(dest, text)


def _calibration(bag: str, out_dir: Path) -> dict[str, float] | None:
    """Calibrated ``vehicle.*`` values from a calibrate result beside the bag, or None."""
    from kinematic_monitor.config.files import load_params_file
    from kinematic_monitor.config.schema import ParamError

    for place in (Path(bag) / CALIBRATION_FILE, out_dir / CALIBRATION_FILE):
        if place.is_file():
            try:
                values = load_params_file(place)
            except ParamError:
                return None
            return {k: float(v) for k, v in values.items()
                    if k.startswith("vehicle.") and isinstance(v, int | float)
                    and not isinstance(v, bool) and math.isfinite(v)}
    return None


def sweep(paths: Sequence[str], params_path: str, out: str, *, workers: int | None = None,
          scheduler: str | None = None, retry_failed: bool = False,
          cluster_radius: float = 10.0, progress: bool | None = None,
          client: Any = None) -> SweepResult:
    """Sweep the bags under ``paths`` into ``out``; returns what was done.

    ``client``: an existing ``dask.distributed.Client`` to use (left open); otherwise one is
    made from ``scheduler`` or a local cluster of ``workers`` processes.

    Raises ``UsageError`` for bad parameters, paths, options or an unreachable scheduler.
    """

    n_workers = workers if workers is not None else (os.cpu_count() or 1)
    if not 1 <= n_workers <= MAX_WORKERS:
        raise UsageError(f"--workers {n_workers} must be between 1 and {MAX_WORKERS}")
    if not (math.isfinite(cluster_radius) and 0.0 <= cluster_radius <= 10000.0):
        raise UsageError(f"--cluster-radius {cluster_radius!r} must be in [0, 10000] m")
    config = load_config(params_path)
    try:
        bags = fleet.find_bags(paths)
    except fleet.FleetError as exc:
        raise UsageError(str(exc)) from None
    if not bags:
        raise UsageError("no rosbag2 folder (metadata.yaml or .db3/.mcap files) found under "
                         + ", ".join(repr(p) for p in paths))
    out_root = Path(os.path.abspath(out))
    try:
        (out_root / BAGS_DIR).mkdir(parents=True, exist_ok=True)
        _copy_params(params_path, out_root / PARAMS_COPY)
    except OSError as exc:
        raise UsageError(f"--out {out!r}: cannot write ({exc})") from None
    params_hash = fleet.params_digest(config.as_dict())

    result = SweepResult()
    records: dict[str, fleet.BagRecord] = {}
    tasks: list[dict[str, Any]] = []
    for bag in bags:
        bag_id = fleet.bag_output_name(bag)
        out_dir = out_root / BAGS_DIR / bag_id
        try:
            key = fleet.sweep_key(fleet.bag_fingerprint(bag), params_hash, __version__)
        except OSError as exc:
            rec = fleet.BagRecord(bag_id, str(bag), "failed", error=f"bag unreadable: {exc}")
            records[bag_id] = rec
            continue
        old = fleet.read_marker(out_dir / fleet.MARKER)
        if old is not None and old.get("key") == key and (
                old.get("status") == "ok" or not retry_failed):
            rec = fleet.BagRecord.from_marker(old)
            rec.skipped = True
            records[bag_id] = rec
            result.skipped += 1
            continue
        tasks.append({"bag": str(bag), "out_dir": str(out_dir),
                      "params": str(out_root / PARAMS_COPY), "key": key, "bag_id": bag_id,
                      "start_time": fleet.bag_start_time(bag)})
    show = progress_wanted() if progress is None else progress
    if tasks:
        _run_tasks(tasks, records, n_workers, scheduler, show, len(bags), client)
        result.swept = len(tasks)
    for bag in bags:
        bag_id = fleet.bag_output_name(bag)
        rec = records[bag_id]
        if rec.status == "ok":
            rec.calibration = _calibration(rec.bag, out_root / BAGS_DIR / bag_id)
        result.records.append(rec)
    result.failed = sum(1 for r in result.records if r.status != "ok")
    result.outputs = write_fleet_outputs(out_root, result.records, config.as_dict(),
                                         cluster_radius)
    return result


def _run_tasks(tasks: list[dict[str, Any]], records: dict[str, fleet.BagRecord],
               workers: int, scheduler: str | None, show: bool, total: int,
               given_client: Any = None) -> None:
    from dask.distributed import as_completed
    from tqdm import tqdm

    bar = tqdm(total=total, initial=total - len(tasks), unit="bag", desc="sweep",
               file=sys.stderr, disable=not show)
    try:
        with _client_or(given_client, workers, scheduler) as client:
            futures = []
            by_key: dict[Any, dict[str, Any]] = {}
            for t in tasks:
                fut = client.submit(sweep_bag, t, key=f"sweep-{t['bag_id']}-{t['key'][:16]}",
                                    pure=False)
                futures.append(fut)
                by_key[fut.key] = t
            for fut in as_completed(futures):
                t = by_key[fut.key]
                try:
                    rec = fleet.BagRecord.from_marker(fut.result())
                except Exception as exc:  # noqa: BLE001 - worker died etc.: record, go on
                    rec = fleet.BagRecord(t["bag_id"], t["bag"], "failed",
                                          error=f"{type(exc).__name__}: {exc}")
                    # no key in the marker: the bag is tried again on the next run
                    try:
                        Path(t["out_dir"]).mkdir(parents=True, exist_ok=True)
                        fleet.write_json_atomic(Path(t["out_dir"]) / fleet.MARKER,
                                                rec.to_marker(__version__))
                    except OSError:
                        pass
                records[t["bag_id"]] = rec
                bar.update(1)
                if rec.status != "ok":
                    bar.write(f"kinematic-monitor sweep: {t['bag']}: failed: {rec.error}",
                              file=sys.stderr)
    finally:
        bar.close()


def write_fleet_outputs(out_root: Path, records: Sequence[fleet.BagRecord],
                        base_values: Mapping[str, Any], cluster_radius: float = 10.0
                        ) -> list[Path]:
    """Write the summary tables, GeoJSON and map page of ``records``; returns their paths."""
    from kinematic_monitor.apps.fleet_map import render_map_html

    reports = {}
    for r in records:
        rel = f"{BAGS_DIR}/{r.bag_id}/report.html"
        if r.status == "ok" and (out_root / rel).is_file():
            reports[r.bag_id] = rel
    rows = fleet.summary_rows(records)
    worst = fleet.worst_events(records)
    base = {k: float(v) for k, v in base_values.items() if k.startswith("vehicle.")
            and isinstance(v, int | float) and not isinstance(v, bool)}
    drift = fleet.calibration_drift(
        base, [(r.bag_id, r.start_time, r.calibration) for r in records if r.calibration])
    clusters, unplaced = fleet.cluster_events(records, cluster_radius)
    n_ok = sum(1 for r in records if r.status == "ok")
    notes = [f"{n_ok} of {len(records)} bag(s) swept successfully; package version "
             f"{__version__}."]
    if unplaced:
        notes.append(f"{unplaced} slip event(s) had no position and are not on the map.")
    written = []

    def put(name: str, text: str) -> None:
        fleet.write_text_atomic(out_root / name, text)
        written.append(out_root / name)

    put(SUMMARY_CSV, fleet.summary_csv(rows))
    put(SUMMARY_HTML, fleet.summary_html(rows, worst, reports, drift, notes=notes))
    put(SUMMARY_JSON, json.dumps({
        "schema": "kinematic_monitor.fleet_summary/1", "version": __version__,
        "rows": rows, "worst_events": worst, "calibration_drift": drift,
        "map_spots": len(clusters), "unplaced_slip_events": unplaced,
    }, indent=1, allow_nan=False) + "\n")
    put(GEOJSON, json.dumps(fleet.clusters_geojson(clusters, reports), indent=1,
                            allow_nan=False) + "\n")
    tracks = {r.bag_id: r.track for r in records if r.status == "ok" and r.track}
    put(MAP_HTML, render_map_html(clusters, tracks, reports))
    if drift:
        put(DRIFT_CSV, fleet.drift_csv(drift))
    elif (out_root / DRIFT_CSV).exists():
        (out_root / DRIFT_CSV).unlink()  # stale from an earlier sweep
    return written


def run(args: argparse.Namespace) -> int:
    """Entry point of ``kinematic-monitor sweep``; returns the exit code."""
    from kinematic_monitor.apps.replay import fail_on_met

    if args.scheduler and args.workers is not None:
        print("kinematic-monitor sweep: note: --workers is ignored with --scheduler "
              "(the scheduler's workers are used)", file=sys.stderr)
    result = sweep(args.paths, args.params, args.out, workers=args.workers,
                   scheduler=args.scheduler, retry_failed=args.retry_failed,
                   cluster_radius=args.cluster_radius,
                   progress=False if args.no_progress else None)
    print(f"kinematic-monitor sweep: {len(result.records)} bag(s): {result.swept} swept, "
          f"{result.skipped} already done, {result.failed} failed; summary in "
          f"{Path(args.out) / SUMMARY_HTML}")
    events = [ev for r in result.records if r.status == "ok" for ev in r.events]
    if args.fail_on != "never" and (result.failed or fail_on_met(events, args.fail_on)):
        return EXIT_FAIL_ON
    return EXIT_OK


__all__ = ["HELP", "SweepResult", "add_arguments", "dask_client", "run",
           "sweep", "sweep_bag", "write_fleet_outputs"]
