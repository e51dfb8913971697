"""Scoring detector events against the simulator's truth (pure, no ROS).

Used by the demo (its summary against truth) and by the detection benchmark
(``bench/grading.py``, which holds the suite, the pipeline and the baseline).

Matching rule. All times are in the header-stamp clock: truth intervals (simulated
seconds) are shifted by the sensor epoch. An event *matches* a truth interval when its
``start`` lies in [truth.start − ``PRE_WINDOW``, truth.end + ``POST_WINDOW``] (0.5 s, 1.0 s),
or when it started earlier and is still open at truth.start (the monitor keeps one open
event per kind, so a second episode inside an open event extends it; latency then 0).

* a truth interval is *detected* when an event of the same kind matches it; its latency
  is ``detected_at`` − truth.start of the earliest matching event (by ``detected_at``);
* an event that matches a truth interval only of another kind is a *wrong kind* event
  (counted against the truth interval's kind);
* an event that matches no truth interval at all is a *false alarm*;
* truth intervals of kind ``none`` (a declared relocalisation) are not to be detected,
  but an event inside one is not a false alarm either (it is counted as wrong kind
  under ``none``).

Must-detect rule (stated in the benchmark output): see :data:`MUST_DETECT_RULE` and
:func:`must_detect`. These limits are common practice, no source; they are applied the
same way to every scenario.
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from kinematic_monitor.core.events import KINDS, Event
from kinematic_monitor.core.model import KINEMATIC_ENVELOPE, kinematic_envelope

PRE_WINDOW = 0.5  # s, an event may start this much before the truth onset
POST_WINDOW = 1.0  # s, ... or this much after the truth end
MUST_MIN_DURATION = 0.5  # s
MUST_LATERAL_YAW = 0.05  # rad/s
MUST_LATERAL_BETA = 0.05  # rad
MUST_LONG_SLIP = 0.15  # -
EPOCH = 1_800_000_000.0  # s, header stamp at simulated time 0 (sim.sensors.DEFAULT_EPOCH_NS)
FAULT_KINDS = ("localization_fault", "calibration_bias", "input_stale")
TABLE_KINDS = KINDS + ("none",)

MUST_DETECT_RULE = (
    "must-detect: injected faults always; lateral_slip lasting >= "
    f"{MUST_MIN_DURATION:g} s with peak yaw-rate residual beyond the linear reference >= "
    f"{MUST_LATERAL_YAW:g} rad/s or peak sideslip residual >= {MUST_LATERAL_BETA:g} rad, "
    f"and peak |a_y| >= {KINEMATIC_ENVELOPE:g}*mu*g (outside the kinematic envelope); "
    f"longitudinal_slip lasting >= {MUST_MIN_DURATION:g} s with peak |slip ratio| >= "
    f"{MUST_LONG_SLIP:g}; other truth episodes are optional (no miss, no false alarm)"
)
MATCH_RULE = (
    f"an event matches a truth episode when it starts within [onset - {PRE_WINDOW:g} s, "
    f"end + {POST_WINDOW:g} s]; same kind = detected, other kind only = wrong kind, "
    "no episode = false alarm; an event still open at the onset also matches (latency 0); "
    "latency = detected_at - truth onset"
)


# --------------------------------------------------------------------------- truth
@dataclass(frozen=True)
class Truth:
    """A truth episode in the header-stamp clock [s] and whether it must be detected."""

    kind: str
    start: float
    end: float
    must: bool = True
    detail: Mapping[str, Any] = field(default_factory=dict)


def must_detect(kind: str, duration: float, detail: Mapping[str, Any]) -> bool:
    """The must-detect rule of the module docstring for one truth interval."""
    if kind in FAULT_KINDS:
        return True
    if kind == "none":
        return False
    if duration < MUST_MIN_DURATION:
        return False
    if kind == "lateral_slip":
        yaw = abs(float(detail.get("yaw_rate_residual", 0.0)))
        beta = abs(float(detail.get("sideslip_residual", 0.0)))
        ay = abs(float(detail.get("max_abs_ay", math.inf)))
        mu = float(detail.get("min_mu", 0.0))
        beyond = ay >= kinematic_envelope(mu)
        return beyond and (yaw >= MUST_LATERAL_YAW or beta >= MUST_LATERAL_BETA)
    if kind == "longitudinal_slip":
        return abs(float(detail.get("peak_slip_ratio", 0.0))) >= MUST_LONG_SLIP
    return True


def to_truth(intervals: Iterable[Any], epoch: float) -> list[Truth]:
    """``sim.truth.TruthInterval``s (simulated seconds) to :class:`Truth` (stamp clock)."""
    out = []
    for iv in intervals:
        detail = dict(iv.detail)
        out.append(Truth(iv.kind, epoch + iv.start, epoch + iv.end,
                         must_detect(iv.kind, iv.end - iv.start, detail), detail))
    return sorted(out, key=lambda t: (t.start, t.kind))


# --------------------------------------------------------------------------- matching
@dataclass
class KindRow:
    """One row of the per-kind table; latencies [s]."""

    kind: str
    episodes: int = 0  # must-detect truth episodes
    detected: int = 0
    missed: int = 0
    optional: int = 0  # optional truth episodes
    optional_detected: int = 0
    latencies: list[float] = field(default_factory=list)
    wrong_kind: int = 0  # events of another kind matching an episode of this kind
    false_alarms: int = 0  # events of this kind matching nothing

    @property
    def median_latency(self) -> float:
        """Median detection latency [s] of the must-detect episodes (NaN if none)."""
        return statistics.median(self.latencies) if self.latencies else math.nan

    @property
    def max_latency(self) -> float:
        """Largest detection latency [s] of the must-detect episodes (NaN if none)."""
        return max(self.latencies) if self.latencies else math.nan

    def add(self, other: KindRow) -> None:
        """Accumulate another row of the same kind."""
        self.episodes += other.episodes
        self.detected += other.detected
        self.missed += other.missed
        self.optional += other.optional
        self.optional_detected += other.optional_detected
        self.latencies.extend(other.latencies)
        self.wrong_kind += other.wrong_kind
        self.false_alarms += other.false_alarms


@dataclass
class Grade:
    """Result of grading one run: per-kind rows and the offending events."""

    rows: dict[str, KindRow]
    missed: list[Truth] = field(default_factory=list)
    wrong: list[tuple[Event, Truth]] = field(default_factory=list)
    false_alarms: list[Event] = field(default_factory=list)
    warn_false_alarms: int = 0  # false alarms at any level (all are WARN or ERROR)


def _matches(ev: Event, tr: Truth) -> bool:
    if tr.start - PRE_WINDOW <= ev.start <= tr.end + POST_WINDOW:
        return True
    # an event already open at the onset (the monitor keeps one open event per kind)
    end = ev.end if math.isfinite(ev.end) else math.inf
    return ev.start <= tr.start <= end


def _latency(ev: Event, tr: Truth) -> float:
    """detected_at − onset; 0 for an event raised before the onset and still open."""
    return max(ev.detected_at - tr.start, 0.0) if ev.start < tr.start - PRE_WINDOW else (
        ev.detected_at - tr.start)


def grade(events: Sequence[Event], truths: Sequence[Truth],
          ignore_kinds: Iterable[str] = ()) -> Grade:
    """Apply the matching rule (module docstring) to one run's events and truth.

    Events whose kind is in ``ignore_kinds`` are left out (e.g. ``input_stale`` when the
    case does not grade inputs).
    """
    ign = set(ignore_kinds)
    evs = [e for e in events if e.kind not in ign]
    rows = {k: KindRow(k) for k in TABLE_KINDS}
    g = Grade(rows)
    for tr in truths:
        row = rows[tr.kind]
        hits = [e for e in evs if e.kind == tr.kind and _matches(e, tr)]
        if tr.must:
            row.episodes += 1
            if hits:
                row.detected += 1
                row.latencies.append(min(_latency(e, tr) for e in hits))
            else:
                row.missed += 1
                g.missed.append(tr)
        else:
            row.optional += 1
            row.optional_detected += 1 if hits else 0
    for ev in evs:
        matched = [tr for tr in truths if _matches(ev, tr)]
        if not matched:
            rows[ev.kind].false_alarms += 1
            g.false_alarms.append(ev)
        elif all(tr.kind != ev.kind for tr in matched):
            # kinds are told apart first by faults (the stronger claim), then slip
            tr = next((t for t in matched if t.kind in FAULT_KINDS), matched[0])
            rows[tr.kind].wrong_kind += 1
            g.wrong.append((ev, tr))
    return g


