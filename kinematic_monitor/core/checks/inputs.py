"""Input staleness: an input silent for longer than its timeout.

One check per input (joint states, localisation, IMU when enabled), on the header-stamp clock
or, live, the node's clock (``Monitor.check_stale``), whichever is later. A stale input makes
every check that needs it STALE and opens an ``input_stale`` event (WARN for the IMU, ERROR
for the others).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from kinematic_monitor.core.checks.base import Check, CheckContext, CheckInfo, LevelTracker
from kinematic_monitor.core.levels import ERROR, OK, STALE, WARN

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.core.triage import Evidence


class InputCheck(Check):
    """Staleness of input ``input_name`` (one of ``motion.INPUTS``)."""


    def __init__(self, ctx: CheckContext, input_name: str) -> None:
        super().__init__(ctx, ())
        self.input_name = input_name
        self.timeout = ctx.state.timeouts[input_name]  # [s] effective, as of the last decision
        self.info = CheckInfo(f"input_{input_name}", f"input {input_name}",  # type: ignore[misc]
                              peak_kinds=("input_stale",), own_events_only=True)
        self._tracker = LevelTracker(0.0, 0.0)

    @property
    def level(self) -> int:
        """STALE while silent, else OK (the status level)."""
        return STALE if self._tracker.level else OK

    @property
    def tracker(self) -> LevelTracker:
        """The staleness tracker (its level is the event's: WARN or ERROR)."""
        return self._tracker

    @property
    def stale(self) -> bool:
        """True while the input is silent beyond its timeout."""
        return bool(self._tracker.level)

    def decide(self, t: float, first_stamp: float) -> None:
        """Staleness at time ``t`` [s]; before any sample of this input the age counts from
        the first sample of any input (``first_stamp``)."""
        last = self.state.last_seen[self.input_name]
        ref = last if math.isfinite(last) else first_stamp
        timeout = self.timeout = self.state.timeout(self.input_name)
        stale = math.isfinite(ref) and t - ref > timeout
        level = (WARN if self.input_name == "imu" else ERROR) if stale else OK
        out = self._tracker.update(level, t, onset=ref + timeout if math.isfinite(ref)
                                   else t, end_hint=last if math.isfinite(last) else t)
        self.figures = {"age [s]": t - ref if math.isfinite(ref) else math.nan,
                        "timeout [s]": timeout}
        self.book.handle(self.name, out, t)

    def status_message(self, level: int, active: bool, summary: str | None,
                       inactive: str) -> str:
        """'ok' or how long the input has been silent."""
        return f"no {self.input_name} for more than {self.timeout:.2f} s" if level else "ok"

    def evidence(self, ev: Evidence) -> None:
        """Triage as a stale input, with what went silent."""
        ev.channel = "input"
        ev.detail = f"{self.input_name} input silent for more than {self.timeout:.2f} s"

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """How long the input was silent [s]."""
        return [(f"{self.input_name}_age_s", self.figures.get("age [s]", math.nan))]
