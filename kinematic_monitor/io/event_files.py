"""Event files: ``events.json``, ``events.csv`` and the JSON-lines event log.

``events.json`` follows the interface contract (schema ``kinematic_monitor.events/1``);
each entry is :meth:`kinematic_monitor.core.events.Event.to_dict`. The JSON-lines log holds
one :meth:`~kinematic_monitor.core.events.Transition.to_dict` record per line, written and
flushed (optionally fsynced) at each event start and end.
"""

from __future__ import annotations

import csv
import io
import json
import os
from collections.abc import Iterable
from typing import IO, Any

from kinematic_monitor.core.events import SCHEMA, Event, Transition

CSV_COLUMNS = ("start", "end", "detected_at", "kind", "level", "x", "y", "summary", "peak")


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
