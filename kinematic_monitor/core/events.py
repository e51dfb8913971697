"""Event records (pure, no file I/O): an episode and its start/end transitions.

The files made of them (``events.json``, ``events.csv``, the JSON-lines event log) are
written by :mod:`kinematic_monitor.io.event_files`.

``events.json`` follows docs/interface.md section 4, schema ``kinematic_monitor.events/1``::

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

import math
from dataclasses import dataclass, field
from typing import Any

from kinematic_monitor.core.levels import ERROR, LEVEL_NAMES, WARN

SCHEMA = "kinematic_monitor.events/1"
KINDS = ("lateral_slip", "longitudinal_slip", "localization_fault", "calibration_bias",
         "input_stale")
#: the kinds that say the tyres slipped (the others: a source or an input is wrong)
SLIP_KINDS = ("lateral_slip", "longitudinal_slip")
EVENT_KEYS = ("start", "end", "detected_at", "kind", "level", "position", "peak", "summary")


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
