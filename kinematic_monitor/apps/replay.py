"""``kinematic-monitor replay``: run the monitor over a recorded rosbag2 folder.

Writes into the output directory (docs/interface.md section 4): ``events.json`` (schema
``kinematic_monitor.events/1``), ``events.csv``, ``timeseries.csv`` (the per-update time
series, decimated, streamed) and ``report.html`` (unless ``--no-report``). Outputs appear
only when the run completes (see ``outputs.OutputDir``). Exit codes: 0 ok, 1 a
``--fail-on`` condition was met, 2 bad usage, bad parameters or unreadable input.
"""

from __future__ import annotations

import argparse
import functools
import json
import math
import sys
import time
from collections import Counter
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from kinematic_monitor.apps.cli import (
    EXIT_FAIL_ON,
    EXIT_OK,
    UsageError,
    load_config,
    progress_wanted,
)
from kinematic_monitor.config.validation import MonitorConfig
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample, Sample
from kinematic_monitor.io.outputs import OutputDir, OutputDirError
from kinematic_monitor.io.sources import SampleSource
from kinematic_monitor.io.timeseries import DEFAULT_MIN_INTERVAL, Series, TimeseriesWriter

if TYPE_CHECKING:  # pragma: no cover - typing only (the core is imported when it runs)
    from kinematic_monitor.core.checks.base import CheckStatus
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.core.prediction import Prediction

HELP = "Run the monitor over a recorded rosbag2 folder and write events, time series and report."

EVENTS_JSON = "events.json"
EVENTS_CSV = "events.csv"
TIMESERIES_CSV = "timeseries.csv"
REPORT_HTML = "report.html"
ANNOTATED_BAG = "annotated_bag"
OUTPUT_NAMES = (EVENTS_JSON, EVENTS_CSV, TIMESERIES_CSV, REPORT_HTML, ANNOTATED_BAG)
FAIL_ON = ("never", "warn", "error")
_READ_AHEAD_MIN = 20_000  # readahead.MIN_MESSAGES (not imported here: --help stays light)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of the ``replay`` subcommand (docs/interface.md section 4)."""
    parser.add_argument("bag", metavar="BAG", help="rosbag2 folder (sqlite3 or MCAP storage)")
    parser.add_argument("--params", metavar="FILE", required=True,
                        help="ROS 2 parameter file (node kinematic_monitor)")
    parser.add_argument("--out", metavar="DIR", required=True,
                        help="output directory (created; must be empty unless --force)")
    parser.add_argument("--fail-on", choices=FAIL_ON, default="never",
                        help="exit with code 1 when an event of this level or worse was "
                             "raised (default: never)")
    parser.add_argument("--force", action="store_true",
                        help="write into an existing non-empty output directory, replacing "
                             "earlier outputs")
    parser.add_argument("--no-report", action="store_true", help="do not write report.html")
    parser.add_argument("--write-bag", action="store_true",
                        help="also write an annotated copy of the bag with the monitor's "
                             "outputs (diagnostics, prediction, events)")
    parser.add_argument("--json-summary", action="store_true",
                        help="print one line of JSON with the run's summary on stdout")
    parser.add_argument("--read-ahead", choices=("auto", "on", "off"), default="auto",
                        help="read and decode the bag in a second process while this one "
                             "runs the checks (auto: with two or more cores and a bag of "
                             f"{_READ_AHEAD_MIN} messages or more)")
    parser.add_argument("--series-interval", type=float, default=DEFAULT_MIN_INTERVAL,
                        metavar="S", help="time-series row spacing in seconds "
                                          f"(default {DEFAULT_MIN_INTERVAL})")


# ---------------------------------------------------------------------------------------
# helpers


_isfinite = math.isfinite
_hypot = math.hypot


def _bicycle_steer(s: ChassisSample) -> float:
    """The bicycle-equivalent road-wheel angle [rad] the monitor takes from a chassis sample
    (``model.ackermann_to_bicycle`` of the pair, or the single angle); NaN without one."""
    if math.isfinite(s.steer):
        return s.steer
    if not (math.isfinite(s.steer_left) and math.isfinite(s.steer_right)):
        return math.nan
    from kinematic_monitor.core.model import ackermann_to_bicycle  # the core loads on use

    try:
        return ackermann_to_bicycle(s.steer_left, s.steer_right)
    except ValueError:
        return math.nan


_NAN4 = (math.nan, math.nan, math.nan, math.nan)


@dataclass
class RunResult:
    """What a replay produced (for the summary line and the exit code)."""

    source: str
    events: list[dict[str, Any]] = field(default_factory=list)
    duration: float = 0.0  # [s] header-stamp time covered
    distance: float = 0.0  # [m]
    samples: int = 0
    lost: list[str] = field(default_factory=list)
    counters: dict[str, int] = field(default_factory=dict)
    outputs: list[str] = field(default_factory=list)
    elapsed: float = 0.0  # [s] wall time
    #: (stamp [s], latitude, longitude [deg]) of the GNSS fixes, sorted by stamp
    fixes: list[tuple[float, float, float]] = field(default_factory=list)
    #: the drive's path, decimated: [[x, y], ...] [m] in the localisation frame
    track: list[list[float]] = field(default_factory=list)

    def summary(self) -> dict[str, Any]:
        """The ``--json-summary`` object."""
        by_kind: dict[str, dict[str, int]] = {}
        by_level: Counter[str] = Counter()
        for ev in self.events:
            k, lv = str(ev.get("kind")), str(ev.get("level"))
            by_kind.setdefault(k, {"WARN": 0, "ERROR": 0})
            by_kind[k][lv] = by_kind[k].get(lv, 0) + 1
            by_level[lv] += 1
        return {
            "schema": "kinematic_monitor.replay_summary/1",
            "source": self.source,
            "duration_s": round(self.duration, 3),
            "distance_m": round(self.distance, 1),
            "samples": self.samples,
            "events": {"total": len(self.events), "by_kind": by_kind,
                       "by_level": {"WARN": by_level.get("WARN", 0),
                                    "ERROR": by_level.get("ERROR", 0)}},
            "lost_data": self.lost,
            "rejected": {k: v for k, v in sorted(self.counters.items()) if v},
            "outputs": self.outputs,
            "elapsed_s": round(self.elapsed, 3),
        }


def fail_on_met(events: list[dict[str, Any]], fail_on: str) -> bool:
    """True when ``--fail-on`` asks for exit code 1 given the events' levels."""
    levels = {str(ev.get("level")) for ev in events}
    if fail_on == "warn":
        return bool(levels & {"WARN", "ERROR"})
    if fail_on == "error":
        return "ERROR" in levels
    return False


# ---------------------------------------------------------------------------------------
# the core loop


class _Recorder:
    """Feeds samples to the monitor and records one time-series row per row interval.

    The CSV columns are the numeric figures the monitor's statuses carry; they are taken
    from the rows of the first ``warmup`` seconds (kept in memory until then), so checks
    that report figures only once the vehicle moves still get their columns. Later rows
    stream straight to the file.
    """

    def __init__(self, monitor: Monitor, fh: Any, interval: float, warmup: float = 30.0,
                 keep_rows: bool = False) -> None:
        self.monitor = monitor
        self._process = monitor.process
        self.fh = fh
        self.interval = interval
        self.warmup = warmup
        self.writer: TimeseriesWriter | None = None
        self.pending: list[tuple[float, dict[str, Any]]] = []
        self.next_row = -math.inf
        self.first = math.nan
        self.last = math.nan
        self.steer = math.nan
        self.accel = math.nan
        self.loc: tuple[float, float, float, float] = _NAN4
        # latest chassis / localisation sample not yet turned into steer / loc (at a row)
        self._steer_from: ChassisSample | None = None
        self._loc_from: LocalizationSample | None = None
        self.samples = 0
        self.covered = 0.0  # [s] stamp time of earlier timelines (backward jumps)
        self.transitions: list[tuple[str, dict[str, Any], int]] = []
        self.keep_rows = keep_rows
        # (stamp, statuses or None, prediction) for --write-bag
        self.kept: list[tuple[float, list[CheckStatus] | None, Prediction | None]] = []
        self._kept_levels: tuple[int, ...] | None = None
        self._kept_at = -math.inf
        self.last_statuses: list[CheckStatus] = []
        self.channels: list[str] = []

    def feed(self, sample: Sample | TimeReset) -> None:
        if isinstance(sample, TimeReset):
            self._new_timeline(sample)
            return
        stamp = sample.stamp
        self._process(sample)
        self.samples += 1
        if not _isfinite(self.first):
            self.first = stamp
        if not (stamp <= self.last):
            self.last = stamp
        if isinstance(sample, ImuSample):
            ax, ay = sample.ax, sample.ay
            if _isfinite(ax) and _isfinite(ay):
                a = _hypot(ax, ay)
                if not (a <= self.accel):
                    self.accel = a
        elif isinstance(sample, ChassisSample):
            self._steer_from = sample  # steering and pose are derived at the next row only
        elif isinstance(sample, LocalizationSample):
            self._loc_from = sample
        if stamp >= self.next_row:
            # rows on a regular grid of header-stamp time (no drift from sample spacing)
            if _isfinite(self.next_row) and self.interval > 0.0:
                steps = math.floor((stamp - self.next_row) / self.interval) + 1
                self.next_row += steps * self.interval
            else:
                self.next_row = stamp + self.interval
            self.row(stamp)

    def _new_timeline(self, marker: TimeReset) -> None:
        """Stamps jumped back: the monitor resets; rows start afresh on the new timeline."""
        self.monitor.process(marker)
        if _isfinite(self.first) and _isfinite(self.last):
            self.covered += self.last - self.first
        self.first = self.last = math.nan
        self.next_row = -math.inf
        if self.writer is not None:
            self.writer.break_window()

    @property
    def duration(self) -> float:
        """Header-stamp time covered [s], summed over timelines."""
        now = self.last - self.first if _isfinite(self.first) and _isfinite(self.last) else 0.0
        return self.covered + max(0.0, now)

    def row(self, stamp: float, final: bool = False) -> None:
        """Take the monitor's check figures and estimate now and add one time-series row.

        The full statuses (text) are taken only where needed: every row for --write-bag,
        and the ``final`` row (the report's final statuses).
        """
        mon = self.monitor
        if self._steer_from is not None:  # the latest chassis sample's steering
            self.steer = _bicycle_steer(self._steer_from)
            self._steer_from = None
        loc = self._loc_from
        if loc is not None:  # the latest localisation sample's pose and speed
            speed = _hypot(loc.vx, loc.vy) if _isfinite(loc.vy) else abs(loc.vx)
            self.loc = (loc.x, loc.y, loc.yaw, speed)
            self._loc_from = None
        statuses: list[CheckStatus] = []
        if self.keep_rows or final:
            statuses = mon.statuses()
            self.last_statuses = statuses
        for tr in mon.pop_transitions():  # snapshot: the monitor keeps updating its events
            self.transitions.append((tr.type, tr.event.to_dict(), int(tr.event.level)))
        pred = mon.prediction() if self.keep_rows else None
        est = (pred.x, pred.y, pred.yaw, pred.v) if pred is not None else (
            None if self.keep_rows else mon.estimate())
        x, y, yaw, v = est if est is not None else _NAN4
        if self.keep_rows:
            # statuses at 1 Hz and on a level change (what /diagnostics needs), the
            # prediction at every row
            levels_now = tuple(int(st.level) for st in statuses)
            if (levels_now != self._kept_levels
                    or stamp - self._kept_at >= 1.0 - 0.5 * self.interval - 1e-6):
                self._kept_levels, self._kept_at = levels_now, stamp
                self.kept.append((stamp, statuses, pred))
            else:
                self.kept.append((stamp, None, pred))
        if not math.isfinite(x):
            x, y, yaw = self.loc[0], self.loc[1], self.loc[2]
        if not math.isfinite(v):
            v = self.loc[3]
        levels, residuals = mon.series_values()
        row: dict[str, Any] = {"x": x, "y": y, "yaw": yaw, "speed": v, "steering": self.steer,
                               "accel": self.accel, "residuals": residuals, "levels": levels}
        self.accel = math.nan
        if self.writer is not None:
            self.writer.add(stamp, **row)
            return
        self.pending.append((stamp, row))
        if stamp - self.first >= self.warmup:
            self._start_writer()

    def _start_writer(self) -> None:
        channels: dict[str, None] = {}
        checks: dict[str, None] = {}
        for _, row in self.pending:
            channels.update(dict.fromkeys(row["residuals"]))
            checks.update(dict.fromkeys(row["levels"]))
        self.channels = list(channels)
        self.writer = TimeseriesWriter(self.fh, self.channels, list(checks),
                                       min_interval=self.interval)
        for stamp, row in self.pending:
            self.writer.add(stamp, **row)
        self.pending = []

    def close(self) -> None:
        """Write what is still buffered."""
        if self.writer is None:
            self._start_writer()
        assert self.writer is not None
        self.writer.close()


def _thresholds(config: Any, channels: list[str]) -> dict[str, list[tuple[str, float]]]:
    """Threshold lines for the plots, from the configuration where a channel has one."""
    out: dict[str, list[tuple[str, float]]] = {}
    checks = getattr(config, "checks", None)
    for c in channels:
        if "slip_ratio" in c and checks is not None:
            out[c] = [("WARN", float(checks.slip_ratio_warn)),
                      ("ERROR", float(checks.slip_ratio_error))]
    return out


def _open_bag(path: str, config: MonitorConfig) -> SampleSource:
    from kinematic_monitor.io import bag

    p = Path(path)
    if not p.exists():
        raise UsageError(f"bag {path!r} does not exist")
    try:
        return bag.open_bag(p, config)
    except bag.BagError as exc:
        raise UsageError(f"bag {path!r}: {exc}") from None


def _iter_with_progress(source: SampleSource, show: bool, read_ahead: bool = False
                        ) -> Iterator[Sample | TimeReset]:
    """The bag's samples, with a tqdm bar over messages read when ``show``; read and
    decoded in a child process when ``read_ahead`` (see ``readahead``)."""
    if read_ahead:
        from kinematic_monitor.io import readahead

        samples: Callable[..., Iterator[Sample | TimeReset]] = functools.partial(
            readahead.iter_samples, source)
    else:
        samples = source.iter_samples
    if not show:
        yield from samples()
        return
    from tqdm import tqdm

    if read_ahead:
        # no tqdm monitor thread: the read-ahead forks, and a fork should not copy a
        # process that runs other threads
        tqdm.monitor_interval = 0
    total = source.message_count or None
    bar = tqdm(total=total, unit="msg", unit_scale=True, desc="replay", file=sys.stderr,
               mininterval=0.5)
    done = [0]

    def progress(position: int, _total: int) -> None:
        bar.update(position - done[0])
        done[0] = position

    try:
        yield from samples(progress=progress, progress_every=2000)
    finally:
        bar.close()


def _lost_data(source: SampleSource, config: MonitorConfig) -> list[str]:
    """Plain sentences on what the bag reader could not read or had to drop."""
    out: list[str] = []
    if source.damage is not None:
        out.append(source.damage.summary())
    out.extend(source.warnings)
    late = source.out_of_order
    if late:
        where = ", ".join(f"{topic}: {st.rejected['out_of_order']}"
                          for topic, st in source.stats.items() if st.rejected["out_of_order"])
        window = config.inputs.reorder_window
        out.append(f"{late} message(s) arrived up to {source.late_by * 1e3:.0f} ms behind the "
                   f"others, later than inputs.reorder_window ({window * 1e3:.0f} ms) allows: "
                   f"dropped ({where}); raise inputs.reorder_window above the inputs' latency")
    jumps = source.time_jumps
    if jumps:
        out.append(f"header-stamp time jumped backwards {jumps} time(s); the monitor was "
                   "reset at each jump")
    return out


def _counters(monitor: Any, source: SampleSource) -> dict[str, int]:
    """Rejections and drops: per topic and reason from the bag, and the monitor's counters."""
    out: dict[str, int] = {}
    for topic, st in source.stats.items():
        for reason, n in st.rejected.items():
            if n and reason != "out_of_order":
                out[f"{topic} rejected ({reason})"] = int(n)
    counters = monitor.counters
    if isinstance(counters, Mapping):
        for k, v in counters.items():
            lost = k.startswith("rejected") or k in ("filter_errors", "time_resets")
            if lost and isinstance(v, int) and v:
                out[f"monitor {k.replace('_', ' ')}"] = v
    return out


def replay(bag_path: str, params_path: str, out_dir: str, *, force: bool = False,
           report: bool = True, write_bag: bool = False,
           series_interval: float = DEFAULT_MIN_INTERVAL,
           progress: bool | None = None, read_ahead: str = "auto") -> RunResult:
    """Run a replay and commit its outputs; raise ``UsageError`` for bad input.

    ``read_ahead``: 'auto', 'on' or 'off' (``--read-ahead``, see ``readahead.wanted``).
    Returns the run's result (events as ``events.json`` records).
    """
    if not (math.isfinite(series_interval) and 0.0 <= series_interval <= 10.0):
        raise UsageError(f"--series-interval {series_interval!r} must be in [0, 10] s")
    wall0 = time.perf_counter()
    config = load_config(params_path)
    source = _open_bag(bag_path, config)
    try:
        outdir = OutputDir(out_dir, force=force, known_outputs=OUTPUT_NAMES)
    except OutputDirError as exc:
        source.close()
        raise UsageError(str(exc)) from None
    try:
        from kinematic_monitor.io import readahead

        ahead = readahead.wanted(read_ahead, source.message_count)
        result = _run(source, config, outdir, str(bag_path), report=report,
                      write_bag=write_bag, series_interval=series_interval,
                      progress=progress, read_ahead=ahead)
    finally:
        source.close()
    result.elapsed = time.perf_counter() - wall0
    return result


def _run(source: Any, config: Any, outdir: OutputDir, bag_path: str, *, report: bool,
         write_bag: bool, series_interval: float, progress: bool | None,
         read_ahead: bool = False) -> RunResult:
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.io.event_files import events_to_csv, events_to_json

    result = RunResult(source=str(bag_path))
    show = progress_wanted() if progress is None else progress
    with outdir:
        monitor = Monitor(config)
        with outdir.open_text(TIMESERIES_CSV) as ts_fh:
            rec = _Recorder(monitor, ts_fh, series_interval, keep_rows=write_bag)
            for s in _iter_with_progress(source, show, read_ahead):
                rec.feed(s)
            if rec.samples == 0:
                raise UsageError(f"bag {bag_path!r} holds no usable message on the "
                                 "configured topics")
            monitor.flush(rec.last)
            rec.row(rec.last, final=True)
            rec.close()
        channels = rec.channels
        events = list(monitor.events)
        doc = events_to_json(str(bag_path), events)
        with outdir.open_text(EVENTS_JSON) as fh:
            json.dump(doc, fh, indent=2, allow_nan=False)
            fh.write("\n")
        with outdir.open_text(EVENTS_CSV) as fh:
            events_to_csv(events, fh)
        result.events = doc["events"]
        result.samples = rec.samples
        result.duration = rec.duration
        result.lost = _lost_data(source, config)
        result.counters = _counters(monitor, source)
        result.fixes = sorted((f.stamp, f.latitude, f.longitude) for f in source.fixes)

        from kinematic_monitor.apps.report import drive_distance

        assert rec.writer is not None
        series = rec.writer.series()
        result.distance = drive_distance(series)
        result.track = _track(series)
        if report:
            from kinematic_monitor.apps.report import ReportData, render_report

            data = ReportData(
                source=str(bag_path), series=series, events=result.events,
                thresholds=_thresholds(config, channels),
                final_statuses=[{"name": st.name, "level": st.level, "message": st.message,
                                 "values": dict(st.values or {})}
                                for st in rec.last_statuses],
                lost_data=result.lost, counters=result.counters,
                duration=result.duration, distance=result.distance,
            )
            outdir.write_text(REPORT_HTML, render_report(data))
        if write_bag:
            notes = _write_annotated_bag(source, outdir.temp_dir_path(ANNOTATED_BAG),
                                         rec.kept, rec.transitions)
            result.lost.extend(notes)
        result.outputs = [p.name for p in outdir.commit()]
    return result


TRACK_POINTS = 300  # points of the decimated drive path kept for maps


def _track(series: Series) -> list[list[float]]:
    """Decimated [[x, y], ...] [m] of the time series' finite positions."""
    x, y = series.get("x"), series.get("y")
    if x is None or y is None:
        return []
    pts = [(float(a), float(b)) for a, b in zip(x, y, strict=True)
           if math.isfinite(a) and math.isfinite(b)]
    stride = max(1, math.ceil(len(pts) / TRACK_POINTS))
    return [[round(a, 2), round(b, 2)] for a, b in pts[::stride]]


DIAGNOSTICS_TOPIC = "/diagnostics"
PREDICTION_TOPIC = "/kinematic_monitor/prediction"
EVENTS_TOPIC = "/kinematic_monitor/events"


def _copy_connection(writer: Any, c: Any, store: Any) -> Any:
    """A connection in ``writer`` like the input's ``c`` (definition, QoS kept)."""
    msgdef = getattr(getattr(c, "msgdef", None), "data", "") or None
    qos = list(getattr(c.ext, "offered_qos_profiles", ()) or ())
    if msgdef is None:
        return writer.add_connection(c.topic, c.msgtype, typestore=store,
                                     offered_qos_profiles=qos)
    return writer.add_connection(c.topic, c.msgtype, msgdef=msgdef,
                                 rihs01=getattr(c, "digest", None) or None,
                                 offered_qos_profiles=qos)


def _write_annotated_bag(source: SampleSource, path: Path,
                         rows: list[tuple[float, list[Any] | None, Any]],
                         transitions: list[tuple[str, dict[str, Any], int]]) -> list[str]:
    """Copy the input bag into ``path`` (same storage) with the monitor's outputs added.

    Input messages keep their log times; added messages are logged at their header stamp.
    Returns notes on what could not be copied (a damaged input is copied up to the damage).
    """
    import heapq

    from rosbags.rosbag2 import Reader, StoragePlugin, Writer
    from rosbags.typesys import Stores, get_typestore

    from kinematic_monitor.io import outgoing

    store = get_typestore(Stores.ROS2_JAZZY)  # message definitions of the added topics
    added: list[tuple[int, str, bytes]] = []  # (log time ns, topic, cdr)
    for stamp, statuses, pred in rows:
        # /diagnostics at >= 1 Hz and at once on a level change (the recorder kept
        # statuses exactly at those moments), as the node publishes it
        if statuses is not None:
            ns = int(round(stamp * 1e9))
            added.append((ns, DIAGNOSTICS_TOPIC, outgoing.diagnostics(
                *divmod(ns, 1_000_000_000), statuses)))
        if pred is not None:
            added.append((int(round(pred.stamp * 1e9)), PREDICTION_TOPIC,
                          outgoing.prediction(pred, pred.frame_id)))
    for kind, record, level in transitions:
        stamp = outgoing.event_stamp(kind, record)
        if math.isfinite(stamp):
            added.append((int(round(stamp * 1e9)), EVENTS_TOPIC,
                          outgoing.event_status(kind, record, level)))
    added.sort(key=lambda r: r[0])

    notes: list[str] = []
    plugin = StoragePlugin.MCAP if source.storage == "mcap" else StoragePlugin.SQLITE3
    writer = Writer(path, version=9, storage_plugin=plugin)
    writer.open()
    try:
        conns: dict[str, Any] = {}
        for topic, msgtype in ((DIAGNOSTICS_TOPIC, "diagnostic_msgs/msg/DiagnosticArray"),
                               (PREDICTION_TOPIC, "nav_msgs/msg/Odometry"),
                               (EVENTS_TOPIC, "diagnostic_msgs/msg/DiagnosticStatus")):
            conns[topic] = writer.add_connection(topic, msgtype, typestore=store)

        def original() -> Iterator[tuple[int, str, bytes]]:
            try:
                with Reader(source.path) as reader:
                    for c in reader.connections:
                        if c.topic not in conns:
                            conns[c.topic] = _copy_connection(writer, c, store)
                    for c, ts, raw in reader.messages():
                        yield ts, c.topic, bytes(raw)
            except Exception as exc:  # noqa: BLE001 - damaged input: copy what was readable
                notes.append(f"annotated bag: input copied up to the damage ({exc})")

        for ts, topic, data in heapq.merge(original(), added, key=lambda r: r[0]):
            writer.write(conns[topic], ts, data)
    except BaseException:
        writer.close()
        raise
    writer.close()
    return notes


def run(args: argparse.Namespace) -> int:
    """Entry point of ``kinematic-monitor replay``; returns the exit code."""
    result = replay(args.bag, args.params, args.out, force=args.force,
                    report=not args.no_report, write_bag=args.write_bag,
                    series_interval=args.series_interval, read_ahead=args.read_ahead)
    code = EXIT_FAIL_ON if fail_on_met(result.events, args.fail_on) else EXIT_OK
    if args.json_summary:
        summary = result.summary()
        summary["exit_code"] = code
        print(json.dumps(summary, separators=(",", ":"), sort_keys=True), flush=True)
    for line in result.lost:
        print(f"kinematic-monitor replay: warning: {line}", file=sys.stderr)
    return code
