"""``kinematic-monitor demo``: a simulated drive watched live by the node, then the report.

Live (default): the drive is simulated into ``OUT/drive`` (bag, truth.json, params.yaml);
the node and a bag player run as two separate processes over DDS (localhost discovery, a
ROS domain of their own; the player publishes the recorded messages and ``/clock``, the
node runs with ``use_sim_time``). The node's operator lines are shown as events fire;
after the drive the node is stopped (SIGINT), its event log ``OUT/live_events.jsonl`` is
compared with the simulator's truth, and the offline replay of the same bag writes
``OUT/report`` (report.html, events.json, ...) and is compared with what the node saw.
``--offline`` skips the DDS part (simulate and replay only).

The demo drive (invented, our own pad): a 40 m skid-pad circle at 11 m/s crossing an ice
patch on its far side and a snow patch on its left side on every lap, and a 2.5 m
localisation jump injected for 3 s between the two laps.
"""

from __future__ import annotations

import argparse
import math
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from collections import Counter
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path
from typing import IO, Any

from kinematic_monitor.apps.cli import EXIT_OK, EXIT_USAGE, UsageError

HELP = ("live demo: simulated vehicle and the node as separate processes over DDS, "
        "operator lines as events fire, then the offline report")

CAUTION = ("CAUTION: kinematic_monitor is an advisory tool for test engineers; it is not a "
           "safety function and must not be relied on to keep a vehicle or people safe.")
DEFAULT_OUT_PREFIX = "kinematic_monitor_demo_"  # default --out: a new temporary folder
DEFAULT_DURATION = 50.0  # [s] of simulated driving: two laps of the pad
DEMO_SEED = 3
TIME_TOLERANCE = 0.2  # [s] live vs offline start / detected_at (the project's criterion)
LIVE_PREFIX = "  LIVE | "
OPERATOR_LINE = re.compile(r"^\[\s*-?[\d.]+ s\] (WARN|ERROR) ")
_CREATED = ("drive", "report", "live_events.jsonl", "node.log", "player.log")


# --- the drive ------------------------------------------------------------------------

def demo_scenario(duration: float = DEFAULT_DURATION) -> Any:
    """The demo drive: 40 m circle at 11 m/s (0.31 g), ice and snow patches, dry elsewhere."""
    import math as _m

    from kinematic_monitor.sim.scenarios import FrictionPatch, skidpad_circle

    sc = skidpad_circle(speed=11.0, duration=duration, patches=(
        FrictionPatch.of("ice", "circle", 0.0, 80.0, radius=6.0),
        FrictionPatch.of("snow", "rect", -40.0, 40.0, length=10.0, width=12.0,
                         angle=_m.pi / 2),
    ))
    sc.name = "demo_pad_ice_snow"
    return sc


def demo_faults(duration: float) -> list[Any]:
    """A short localisation jump between the laps (when the drive is long enough)."""
    from kinematic_monitor.sim.faults import parse_fault

    return [parse_fault("loc-jump:start=27,dx=2.5,duration=3")] if duration >= 31.0 else []


def simulate_drive(out: Path, duration: float, seed: int = DEMO_SEED) -> Any:
    """Simulate the demo drive into the bag folder ``out``; returns ``SimulationOutput``."""
    from kinematic_monitor.sim import truth
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.scenarios import simulate

    trace = simulate(demo_scenario(duration), seed=seed)
    return write_simulation(out, trace, seed=seed, storage="mcap",
                            faults=demo_faults(duration),
                            scenario_truth=truth.truth_intervals(trace))


# --- events: log -> list, comparison, grading --------------------------------------------

def events_from_log(records: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Events (``events.json`` entries) from JSON-lines start/end records, start order.

    An event whose end record is missing (process killed) is kept with ``end`` None.
    """
    found: dict[tuple[str, Any, Any], dict[str, Any]] = {}
    for r in records:
        key = (str(r.get("kind")), r.get("start"), r.get("detected_at"))
        ev = {k: v for k, v in r.items() if k != "type"}
        if r.get("type") == "end" or key not in found:
            found[key] = ev
    return sorted(found.values(), key=lambda e: (e.get("start") or 0.0, str(e.get("kind"))))


def compare_events(live: Sequence[Mapping[str, Any]], offline: Sequence[Mapping[str, Any]],
                   tolerance: float = TIME_TOLERANCE) -> list[str]:
    """Differences between two event lists ([] when they agree).

    Agreement: the same number of events of each kind, and paired in start order, their
    ``start`` and ``detected_at`` within ``tolerance`` [s].
    """
    problems: list[str] = []
    kinds = sorted({str(e.get("kind")) for e in [*live, *offline]})
    for kind in kinds:
        a = sorted((e for e in live if e.get("kind") == kind), key=lambda e: e["start"])
        b = sorted((e for e in offline if e.get("kind") == kind), key=lambda e: e["start"])
        if len(a) != len(b):
            problems.append(f"{kind}: {len(a)} live vs {len(b)} offline "
                            f"(live starts {_starts(a)}, offline starts {_starts(b)})")
            continue
        for x, y in zip(a, b, strict=True):
            for key in ("start", "detected_at"):
                dx = _f(x.get(key)) - _f(y.get(key))
                if not abs(dx) <= tolerance:
                    problems.append(f"{kind} at {_f(y.get('start')):.3f}: {key} differs by "
                                    f"{dx:+.3f} s (tolerance {tolerance:g} s)")
    return problems


def _f(v: Any) -> float:
    return float(v) if isinstance(v, (int, float)) else math.nan


def _starts(evs: Sequence[Mapping[str, Any]]) -> str:
    return "[" + ", ".join(f"{_f(e.get('start')):.2f}" for e in evs) + "]"


def grade_against_truth(evs: Sequence[Mapping[str, Any]], truth_doc: Mapping[str, Any]) -> Any:
    """Grade events with the rule of ``detection_eval`` against ``truth.json`` windows."""
    from kinematic_monitor.core.events import Event
    from kinematic_monitor.sim.scoring import Truth, grade, must_detect

    truths = []
    for iv in truth_doc.get("truth", []):
        start, end = float(iv["start"]), float(iv["end"])
        detail = dict(iv.get("detail") or {})
        truths.append(Truth(iv["kind"], start, end, must_detect(iv["kind"], end - start, detail),
                            detail))
    level = {"WARN": 1, "ERROR": 2}
    events = [Event(start=_f(e.get("start")), detected_at=_f(e.get("detected_at")),
                    kind=str(e["kind"]), level=level.get(str(e.get("level")), 1),
                    summary=str(e.get("summary", "")),
                    end=_f(e.get("end")) if e.get("end") is not None else math.nan)
              for e in evs]
    return grade(events, truths)


def summary_lines(evs: Sequence[Mapping[str, Any]], truth_doc: Mapping[str, Any],
                  t0: float) -> list[str]:
    """The closing summary: events by kind and level, truth episodes found or missed."""
    lines = []
    by = Counter((str(e.get("kind")), str(e.get("level"))) for e in evs)
    if by:
        lines.append("events: " + ", ".join(f"{k} {lv} x{n}" for (k, lv), n in sorted(by.items())))
    else:
        lines.append("events: none")
    g = grade_against_truth(evs, truth_doc)
    for kind, row in g.rows.items():
        if row.episodes == 0 and row.optional == 0 and row.false_alarms == 0:
            continue
        lat = (f", median delay {row.median_latency:.2f} s" if row.latencies else "")
        lines.append(f"truth {kind}: {row.detected}/{row.episodes} detected{lat}; "
                     f"{row.optional_detected}/{row.optional} marginal episodes seen; "
                     f"{row.false_alarms} unmatched events")
    for tr in g.missed:
        lines.append(f"  missed {tr.kind} at {tr.start - t0:.2f}-{tr.end - t0:.2f} s")
    for ev, tr in g.wrong:
        lines.append(f"  {ev.kind} at {ev.start - t0:.2f} s during {tr.kind} "
                     f"{tr.start - t0:.2f}-{tr.end - t0:.2f} s")
    return lines


# --- processes ------------------------------------------------------------------------

def demo_domain_id() -> int:
    """A ROS domain id in 1..101 for this run (from the process id)."""
    return 1 + (os.getpid() * 7) % 101


def dds_env(domain: int) -> dict[str, str]:
    """Environment for a DDS child: discovery on this machine only, its own domain id."""
    env = dict(os.environ)
    env["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    env["ROS_DOMAIN_ID"] = str(domain)
    env["PYTHONUNBUFFERED"] = "1"
    env.pop("ROS_LOCALHOST_ONLY", None)
    return env


class Child:
    """A subprocess whose output lines go to a callback; ``stop()`` always leaves it dead."""

    def __init__(self, argv: Sequence[str], env: Mapping[str, str], log_path: Path,
                 on_line: Callable[[str], None] | None = None) -> None:
        self.log = open(log_path, "w", encoding="utf-8")  # noqa: SIM115 - closed in stop()
        self.p = subprocess.Popen(list(argv), env=dict(env), stdout=subprocess.PIPE,
                                  stderr=subprocess.STDOUT, text=True, bufsize=1,
                                  start_new_session=True)
        self.lines: list[str] = []
        self._on_line = on_line
        self._lock = threading.Lock()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        stream: IO[str] | None = self.p.stdout
        if stream is None:
            return
        for line in stream:
            line = line.rstrip("\n")
            with self._lock:
                self.lines.append(line)
                if not self.log.closed:
                    self.log.write(line + "\n")
                    self.log.flush()
            if self._on_line is not None:
                self._on_line(line)

    def seen(self, text: str) -> bool:
        with self._lock:
            return any(text in line for line in self.lines)

    def alive(self) -> bool:
        return self.p.poll() is None

    def wait_for(self, text: str, timeout: float) -> bool:
        """Wait until a line contains ``text`` (False on timeout or exit)."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.seen(text):
                return True
            if not self.alive():
                self._reader.join(timeout=1.0)
                return self.seen(text)
            time.sleep(0.05)
        return False

    def tail(self, n: int = 8) -> str:
        with self._lock:
            return "\n".join(self.lines[-n:])

    def stop(self, grace: float = 5.0) -> int | None:
        """SIGINT, then SIGKILL of its process group after ``grace`` [s]; the exit code."""
        if self.p.poll() is None:
            try:
                self.p.send_signal(signal.SIGINT)
                self.p.wait(timeout=grace)
            except subprocess.TimeoutExpired:
                try:
                    os.killpg(self.p.pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
                self.p.wait(timeout=5.0)
        self._reader.join(timeout=2.0)
        with self._lock:
            self.log.close()
        return self.p.returncode


# --- the subcommand ---------------------------------------------------------------------

def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``kinematic-monitor demo``."""
    parser.add_argument("--out", metavar="DIR", default=None,
                        help="folder for the drive, the live event log and the report "
                             "(created; default: a new folder in the system's temporary "
                             f"folder, {DEFAULT_OUT_PREFIX}*, named when the demo starts)")
    parser.add_argument("--force", action="store_true",
                        help="replace the outputs of an earlier demo in --out")
    parser.add_argument("--duration", type=float, default=DEFAULT_DURATION, metavar="S",
                        help=f"simulated seconds of driving (default {DEFAULT_DURATION:g}; "
                             "the low-grip patches come at about 14 s and 20 s of each lap)")
    parser.add_argument("--rate", type=float, default=1.0, metavar="R",
                        help="play the drive R times faster than real time (default 1.0)")
    parser.add_argument("--offline", action="store_true",
                        help="no DDS: simulate and replay only")
    parser.add_argument("--domain-id", type=int, default=None, metavar="N",
                        help="ROS domain id for the node and player (default: from the pid)")


def _check_args(args: argparse.Namespace) -> Path:
    if not (math.isfinite(args.duration) and 5.0 <= args.duration <= 600.0):
        raise UsageError(f"--duration {args.duration!r} must be between 5 and 600 s")
    if not (math.isfinite(args.rate) and 0.1 <= args.rate <= 20.0):
        raise UsageError(f"--rate {args.rate!r} must be between 0.1 and 20")
    if args.domain_id is not None and not 0 <= args.domain_id <= 101:
        raise UsageError(f"--domain-id {args.domain_id} must be in 0..101")
    if args.out is None:  # nothing in the working directory unless asked
        out = Path(tempfile.mkdtemp(prefix=DEFAULT_OUT_PREFIX))
        print(f"writing the demo into {out} (choose the folder with --out DIR)", flush=True)
        return out
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out {out} exists and is not a folder")
    if out.is_dir():
        present = [p.name for p in out.iterdir()]
        foreign = [n for n in present if n not in _CREATED]
        if foreign:
            raise UsageError(f"--out {out} holds other files ({', '.join(sorted(foreign)[:3])})"
                             "; choose an empty or new folder")
        if present and not args.force:
            raise UsageError(f"--out {out} holds an earlier demo; use --force to replace it")
        for name in present:
            p = out / name
            shutil.rmtree(p) if p.is_dir() else p.unlink()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"--out {out}: cannot create the folder ({exc.strerror})") from None
    return out


def run(args: argparse.Namespace) -> int:
    """Run the demo; returns the exit code."""
    print(CAUTION, flush=True)
    out = _check_args(args)
    drive = out / "drive"
    print(f"simulating the demo drive ({args.duration:g} s, ice and snow patches) "
          f"into {drive} ...", flush=True)
    sim = simulate_drive(drive, args.duration)
    import json

    truth_doc = json.loads(Path(sim.truth).read_text())
    t0 = float(truth_doc.get("epoch", 0.0))
    live_events: list[dict[str, Any]] | None = None
    if not args.offline:
        live_events = run_live(out, sim, args.rate, args.domain_id, args.duration)
        if live_events is None:
            return EXIT_USAGE
        print("summary of the live run:")
        for line in summary_lines(live_events, truth_doc, t0):
            print("  " + line)
    print("offline replay of the recorded drive ...", flush=True)
    from kinematic_monitor.apps.replay import replay

    result = replay(str(drive), str(sim.params), str(out / "report"), force=True,
                    progress=False)
    offline = list(result.events)
    if live_events is None:
        for ev in offline:
            print(f"  [{_f(ev['detected_at']) - t0:6.2f} s] {ev['level']} {ev['kind']}: "
                  f"{ev['summary']}")
        print("summary of the offline replay:")
        for line in summary_lines(offline, truth_doc, t0):
            print("  " + line)
    else:
        diffs = compare_events(live_events, offline)
        if diffs:
            print(f"live and offline events DIFFER ({len(diffs)}):")
            for d in diffs:
                print("  " + d)
        else:
            print(f"live and offline events agree: {len(offline)} events, same kinds, start "
                  f"and detection times within {TIME_TOLERANCE:g} s")
    print(f"report: {(out / 'report' / 'report.html').resolve()}", flush=True)
    return EXIT_OK


def run_live(out: Path, sim: Any, rate: float, domain: int | None,
             duration: float) -> list[dict[str, Any]] | None:
    """Node and player over DDS; returns the node's events (None if the node failed)."""
    from kinematic_monitor.io.event_files import read_event_log

    domain = demo_domain_id() if domain is None else domain
    env = dds_env(domain)
    log_path = out / "live_events.jsonl"
    py = sys.executable

    def show(line: str) -> None:
        if OPERATOR_LINE.match(line):
            print(LIVE_PREFIX + line, flush=True)

    node_argv = [py, "-m", "kinematic_monitor", "node", "--params", str(sim.params), "--",
                 "--ros-args", "-p", "use_sim_time:=true",
                 "-p", f"output.events_log:={log_path.resolve()}"]
    player_argv = [py, "-m", "kinematic_monitor.ros.player", str(out / "drive"),
                   "--rate", f"{rate:g}", "--wait", "15"]
    node: Child | None = None
    player: Child | None = None
    try:
        print(f"starting the node (ROS domain {domain}, localhost only) ...", flush=True)
        node = Child(node_argv, env, out / "node.log", on_line=show)
        if not node.wait_for("running (", timeout=30.0):
            print("the node did not start; its last output:\n" + node.tail(), file=sys.stderr)
            return None
        print(f"playing the drive at {rate:g}x real time ({duration / rate:.0f} s); "
              "events as they fire:", flush=True)
        player = Child(player_argv, env, out / "player.log")
        code = _wait_exit(player, timeout=duration / rate + 40.0)
        if code != 0:
            print(f"the player failed (exit {code}); its last output:\n" + player.tail(),
                  file=sys.stderr)
        time.sleep(0.5)  # the last messages reach the node
        ncode = node.stop(grace=5.0)
        if ncode not in (0, None):
            print(f"the node exited with {ncode}; its last output:\n" + node.tail(),
                  file=sys.stderr)
        node = None
    finally:
        for child in (player, node):
            if child is not None:
                child.stop(grace=3.0)
    if not log_path.exists():
        print(f"the node wrote no event log at {log_path}", file=sys.stderr)
        return None
    return events_from_log(read_event_log(log_path))


def _wait_exit(child: Child, timeout: float) -> int | None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        code = child.p.poll()
        if code is not None:
            return code
        time.sleep(0.1)
    return None
