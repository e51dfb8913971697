"""The event book: check alarms in, one event per kind and episode out (pure, no ROS).

A check reports 'start', 'raise' and 'end' of its alarm (``checks/base.py``). At a start the
alarm is triaged (``triage.classify``) into an event kind; several checks agreeing on a kind
share one open event, which ends when the last of them clears. A declared relocalisation is a
note, not an event. The book keeps each open event's peak figures up to date (the checks say
which they have for which kinds) and records every start and end as a transition.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Protocol

from kinematic_monitor.core.checks.base import Check
from kinematic_monitor.core.events import Event, Transition
from kinematic_monitor.core.levels import ERROR, WARN
from kinematic_monitor.core.triage import Evidence, Verdict, classify

#: the slow drift channel (one value per checks.drift_horizon) corroborates, never prolongs
SLOW_CHANNEL = "drift"


@dataclass
class _Slot:
    event: Event
    channels: set[str] = field(default_factory=set)


class BookOwner(Protocol):
    """What the event book asks of the monitor that owns it."""

    events: list[Event]
    notes: list[tuple[float, str]]
    counters: dict[str, int]

    def evidence(self, channel: str, extra: dict[str, float] | None) -> Evidence:
        """The triage evidence of an alarm on ``channel`` now."""

    def position(self) -> tuple[float, float]:
        """The vehicle's [x, y] [m] in the localisation frame (NaN: unknown)."""

    def first_and_now(self) -> tuple[float, float]:
        """The first and the latest stamp [s] (no event starts before the first)."""

    def common_peaks(self) -> list[tuple[str, float]]:
        """Figures every event keeps the largest of, after the checks' own."""


class EventBook:
    """Open events by kind; see the module docstring. Checks are attached with
    :meth:`attach`; ``owner`` is the monitor (events, notes and counters outlive a time
    reset, the book does not); ``transitions`` collects the starts and ends."""

    def __init__(self, owner: BookOwner, transitions: list[Transition]) -> None:
        self.owner = owner
        self.transitions = transitions
        self.checks: dict[str, Check] = {}
        self._peak_order: list[Check] = []
        self._slots: dict[str, _Slot] = {}  # kind -> open event
        self._channel_kind: dict[str, str] = {}

    def attach(self, checks: Sequence[Check], peak_order: Sequence[Check]) -> None:
        """The checks that report here, and those with peak figures in the order an event
        lists them."""
        self.checks = {c.name: c for c in checks}
        self._peak_order = list(peak_order)

    def open_kinds(self) -> set[str]:
        """Kinds with an open event."""
        return set(self._slots)

    def summary_for(self, channel: str) -> str | None:
        """The summary of the event ``channel`` holds open, if any."""
        kind = self._channel_kind.get(channel)
        slot = self._slots.get(kind) if kind else None
        return slot.event.summary if slot else None

    def handle(self, channel: str, out: str | None, t: float,
               extra: dict[str, float] | None = None) -> None:
        """A check's transition ('start', 'raise', 'end' or None) at ``t`` [s]."""
        if out is None:
            return
        tracker = self.checks[channel].tracker
        if out == "start":
            self._start(channel, t, extra, tracker.start, tracker.level)
        elif out == "raise":
            kind = self._channel_kind.get(channel)
            if kind is not None and kind in self._slots:
                ev = self._slots[kind].event
                ev.level = max(ev.level, min(ERROR, tracker.level))
        elif out == "end":
            self.close(channel, tracker.end)

    def _start(self, channel: str, t: float, extra: dict[str, float] | None, start: float,
               level: int) -> None:
        verdict = classify(self.owner.evidence(channel, extra))
        if channel == SLOW_CHANNEL and "localization_fault" in self._slots:
            # drift compares dead reckoning with the localisation: while a localisation
            # fault is open, a drift alarm is that fault's consequence
            verdict = Verdict("localization_fault", "drift", verdict.summary)
        if verdict.note:
            self.owner.counters["notes"] += 1
            self.owner.notes.append((t, verdict.summary))
            return
        kind = verdict.kind
        slot = self._slots.get(kind)
        if slot is not None and channel == SLOW_CHANNEL:
            return  # the slow channel corroborates but never prolongs an open episode
        self._channel_kind[channel] = kind
        if slot is None:
            first = self.owner.first_and_now()[0]
            if math.isfinite(first) and start < first:
                start = first  # an onset estimate before the data began: the data's start
            ev = Event(start=start, detected_at=t, kind=kind, level=max(WARN, min(ERROR, level)),
                       position=self.owner.position(), summary=verdict.summary)
            slot = _Slot(ev, {channel})
            self._slots[kind] = slot
            self.owner.events.append(ev)
            self._update_peak(slot)
            self.transitions.append(Transition("start", ev))
        else:
            # the start stays as first detected, so a prefix of the data gives the same
            # event (causality); the level may rise
            slot.channels.add(channel)
            slot.event.level = max(slot.event.level, min(ERROR, level))

    def close(self, channel: str, end: float) -> None:
        """``channel`` stopped holding its event open at ``end`` [s] (NaN: now)."""
        kind = self._channel_kind.pop(channel, None)
        if kind is None or kind not in self._slots:
            return
        slot = self._slots[kind]
        slot.channels.discard(channel)
        if not slot.channels:
            ev = slot.event
            ev.end = max(end if math.isfinite(end) else self.owner.first_and_now()[1], ev.start)
            del self._slots[kind]
            self.transitions.append(Transition("end", ev))

    def update_peaks(self) -> None:
        """Keep each open event's largest figures (at each decision)."""
        for slot in self._slots.values():
            self._update_peak(slot)

    def _update_peak(self, slot: _Slot) -> None:
        ev = slot.event
        figures: list[tuple[str, float]] = []
        for check in self._peak_order:
            info = check.info
            if ev.kind in info.peak_kinds and not (
                    info.own_events_only and info.name not in slot.channels):
                figures += check.peaks(ev.kind)
        figures += self.owner.common_peaks()
        peak = ev.peak
        for name, value in figures:
            if math.isfinite(value) and (name not in peak or abs(value) > abs(peak[name])):
                peak[name] = value

    def flush(self, end: float) -> None:
        """Close every open event at ``end`` [s]."""
        for kind in list(self._slots):
            slot = self._slots.pop(kind)
            slot.event.end = max(end, slot.event.start)
            self.transitions.append(Transition("end", slot.event))
        self._channel_kind.clear()
