"""Event records, the ``events.json`` / ``events.csv`` writers and the JSON-lines event log.

``events.json`` follows DESIGN.md section 4, schema ``kinematic_monitor.events/1``::

    {"schema": "kinematic_monitor.events/1", "source": "<bag path>",
     "events": [{"start", "end", "detected_at", "kind", "level", "position", "peak",
                 "summary"}, ...]}

Times are header-stamp seconds; ``level`` is "WARN" or "ERROR" (the highest reached);
``position`` is [x, y] [m] in the localisation frame; ``peak`` maps a figure name (unit in
the name, e.g. ``yaw_rate_residual_rad_s``) to a number.

JSON-lines event log: one object per line, written and flushed (optionally fsynced) at
each event start and end, so nothing is lost if the process dies::

    {"type": "start", "start": ..., "end": null, "detected_at": ..., "kind": ..., ...}
    {"type": "end",   "start": ..., "end": ...,  "detected_at": ..., "kind": ..., ...}

The fields besides ``type`` are those of an ``events.json`` entry; an event's start and
end lines share ``start``, ``kind`` and ``detected_at`` (together they identify it).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import IO, Any

from kinematic_monitor.core.checks.base import ERROR, LEVEL_NAMES, WARN

SCHEMA = "kinematic_monitor.events/1"
KINDS = ("lateral_slip", "longitudinal_slip", "localization_fault", "calibration_bias",
         "input_stale")
EVENT_KEYS = ("start", "end", "detected_at", "kind", "level", "position", "peak", "summary")
CSV_COLUMNS = ("start", "end", "detected_at", "kind", "level", "x", "y", "summary", "peak")


@dataclass
class Event:
    """One episode: times [s, header-stamp clock], kind, level (WARN=1/ERROR=2), figures.

    ``end`` is NaN while the event is open.
    """

    start: float
    detected_at: float
    kind: str
    level: int
    position: tuple[float, float] = (math.nan, math.nan)
    peak: dict[str, float] = field(default_factory=dict)
    summary: str = ""
    end: float = math.nan

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"event kind {self.kind!r} is not one of {', '.join(KINDS)}")
        if self.level not in (WARN, ERROR):
            raise ValueError(f"event level {self.level!r} must be WARN (1) or ERROR (2)")

    @property
    def is_open(self) -> bool:
        """True until the episode has ended."""
        return not math.isfinite(self.end)

    def to_dict(self) -> dict[str, Any]:
        """The ``events.json`` entry (exactly the contract's keys, JSON-safe values)."""
        return {
            "start": _num(self.start),
            "end": _num(self.end),
            "detected_at": _num(self.detected_at),
            "kind": self.kind,
            "level": LEVEL_NAMES[self.level],
            "position": [_num(self.position[0]), _num(self.position[1])],
            "peak": {k: _num(v) for k, v in self.peak.items()},
            "summary": self.summary,
        }


@dataclass(frozen=True)
class Transition:
    """An event start or end, as returned by ``Monitor.pop_transitions``."""

    type: str  # "start" or "end"
    event: Event

    def to_dict(self) -> dict[str, Any]:
        """The JSON-lines record: ``{"type": ..., **event.to_dict()}``."""
        return {"type": self.type, **self.event.to_dict()}


def _num(value: float) -> float | None:
    """A finite float rounded to µs-level precision, or None (JSON has no NaN)."""
    if value is None or not math.isfinite(value):
        return None
    return round(float(value), 6)


def events_to_json(source: str, events: Iterable[Event]) -> dict[str, Any]:
    """The ``events.json`` document (schema kinematic_monitor.events/1) as a dict."""
    return {"schema": SCHEMA, "source": str(source), "events": [e.to_dict() for e in events]}


def write_events_json(path: str | os.PathLike[str], source: str, events: Iterable[Event]) -> None:
    """Write ``events.json`` to ``path`` (UTF-8, indented)."""
    with open(path, "w", encoding="utf-8") as f:
        json.dump(events_to_json(source, events), f, indent=2, allow_nan=False)
        f.write("\n")


def events_to_csv(events: Iterable[Event], out: IO[str] | None = None) -> str:
    """CSV with columns start,end,detected_at,kind,level,x,y,summary,peak (peak as JSON).

    Writes to ``out`` when given; always returns the text.
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for e in events:
        d = e.to_dict()
        w.writerow([
            "" if d["start"] is None else d["start"],
            "" if d["end"] is None else d["end"],
            "" if d["detected_at"] is None else d["detected_at"],
            d["kind"], d["level"],
            "" if d["position"][0] is None else d["position"][0],
            "" if d["position"][1] is None else d["position"][1],
            d["summary"], json.dumps(d["peak"], sort_keys=True),
        ])
    text = buf.getvalue()
    if out is not None:
        out.write(text)
    return text


class EventLogWriter:
    """Appends JSON-lines event records; each line is flushed (and fsynced if asked)."""

    def __init__(self, path: str | os.PathLike[str], fsync: bool = False) -> None:
        self.path = os.fspath(path)
        self.fsync = fsync
        self._f: IO[str] | None = open(self.path, "a", encoding="utf-8")  # noqa: SIM115

    def write(self, transition: Transition) -> None:
        """Write one start/end record and flush it to the OS (and disk with fsync)."""
        if self._f is None:
            raise ValueError(f"event log {self.path} is closed")
        self._f.write(json.dumps(transition.to_dict(), allow_nan=False) + "\n")
        self._f.flush()
        if self.fsync:
            os.fsync(self._f.fileno())

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._f is not None:
            self._f.close()
            self._f = None

    def __enter__(self) -> EventLogWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def read_event_log(path: str | os.PathLike[str]) -> list[dict[str, Any]]:
    """Read a JSON-lines event log back (skips a truncated last line)."""
    out = []
    with open(path, encoding="utf-8") as f:
        for line in f:
            line = line.strip()
            if not line:
                continue
            try:
                out.append(json.loads(line))
            except json.JSONDecodeError:
                continue
    return out
