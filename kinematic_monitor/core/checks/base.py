"""What every check is made of: a level with hysteresis, its statistical test, block means.

A check (one module each in this package) is one object that owns its residual, its
statistical test, its level, its status (name, message, key-values with units), its
time-series figures and its peak figures. The monitor (``core/monitor.py``) hands it the
samples it asked for and takes decisions on a fixed grid of header-stamp time; a check that
finds a deviation reports it to the event book (``core/episodes.py``), which triages it into
an event.

Levels are REP 107 ints (``core/levels.py``). Units SI, angles in radians (REP 103).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, ClassVar, Protocol

from kinematic_monitor.core.levels import ERROR, LEVEL_NAMES, OK, WARN
from kinematic_monitor.core.motion import MotionState
from kinematic_monitor.core.stats import Cusum, arl_for_rate, cusum_threshold

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig
    from kinematic_monitor.core.triage import Evidence

PREFIX = "kinematic_monitor: "
#: the smallest persistent shift [σ of the standardised residual] every CUSUM is tuned to
#: find quickly: reference value k = MIN_SHIFT / 2 (Page 1954; common practice, no source
#: for the value 1 σ)
MIN_SHIFT = 1.0
#: relative error allowed to the kinematic model's prediction [-] before a residual counts
#: (common practice, no source)
MODEL_TOLERANCE = 0.05
#: absolute yaw-rate error allowed to the kinematic prediction [rad/s] (common practice,
#: no source)
YAW_RATE_TOLERANCE = 0.01


@dataclass
class CheckStatus:
    """One diagnostic status: name 'kinematic_monitor: ...', level 0..3, message, values.

    ``values`` maps a key (unit in the key, e.g. 'yaw_rate_residual [rad/s]') to a string.
    """

    name: str
    level: int
    message: str
    values: dict[str, str] = field(default_factory=dict)


class EventSink(Protocol):
    """Where a check reports its transitions (the monitor's event book)."""

    def handle(self, channel: str, out: str | None, t: float,
               extra: dict[str, float] | None = None) -> None:
        """A transition ('start', 'raise', 'end' or None) of ``channel`` at ``t`` [s]."""

    def close(self, channel: str, end: float) -> None:
        """``channel`` stopped holding its event open at ``end`` [s]."""


class LevelTracker:
    """Turns a per-decision candidate level into a level with hysteresis.

    A level is entered when the deviation has lasted ``min_duration`` [s]: counted from
    the estimated onset passed to ``update`` (e.g. the CUSUM change-point) when that is
    earlier than the first decision at the level; the alarm clears when the candidate has
    been OK for ``clear_duration`` [s]. ``update`` returns 'start', 'raise', 'end' or None.
    """

    def __init__(self, min_duration: float, clear_duration: float) -> None:
        self.min_duration = min_duration
        self.clear_duration = clear_duration
        self.reset()

    def reset(self) -> None:
        """Back to OK without reporting an end."""
        self.level = OK
        self.max_level = OK
        self.start = math.nan
        self.end = math.nan
        self.detected_at = math.nan
        self._above_since: dict[int, float] = {}
        self._below_since = math.nan

    def update(
        self, candidate: int, stamp: float, onset: float = math.nan, end_hint: float = math.nan
    ) -> str | None:
        """Feed the candidate level at ``stamp`` [s]; ``onset``/``end_hint`` estimate times."""
        if candidate <= OK and self.level == OK and not self._above_since:
            return None  # OK and staying OK: what the general path below gives, unchanged
        for lvl in (WARN, ERROR):
            if candidate >= lvl:
                self._above_since.setdefault(lvl, stamp)
            else:
                self._above_since.pop(lvl, None)
        reached = OK
        for lvl in (WARN, ERROR):
            since = self._above_since.get(lvl)
            if since is not None and math.isfinite(onset):
                # the deviation has lasted since its estimated onset (e.g. the CUSUM
                # change-point), not only since the statistic crossed the threshold
                since = min(since, onset)
            # 1e-6 s slack: stamps near 1.8e9 s carry ~2.4e-7 s of float rounding
            if since is not None and stamp - since >= self.min_duration - 1e-6:
                reached = lvl
        if self.level == OK:
            if reached > OK:
                self.level = self.max_level = reached
                first = self._above_since[WARN]
                self.start = onset if math.isfinite(onset) and onset <= first else first
                self.detected_at = stamp
                self.end = math.nan
                self._below_since = math.nan
                return "start"
            return None
        if candidate > OK:
            self._below_since = math.nan
            if reached > self.level:
                self.level = reached
                self.max_level = max(self.max_level, reached)
                return "raise"
            return None
        if not math.isfinite(self._below_since):
            self._below_since = stamp
        if stamp - self._below_since >= self.clear_duration - 1e-6:
            self.level = OK
            end = end_hint if math.isfinite(end_hint) else self._below_since
            self.end = max(end, self.start)
            self._above_since.clear()
            return "end"
        return None


def cusum_thresholds(false_alarm_rate: float, error_rate: float,
                     decisions_per_second: float) -> tuple[float, float, float]:
    """(k, h_warn, h_error) [σ] of a two-sided CUSUM taking ``decisions_per_second``
    standardised values: k = MIN_SHIFT / 2 and thresholds whose in-control run lengths give
    ``false_alarm_rate`` and ``error_rate`` alarms per hour [1/h] (``stats.cusum_threshold``)."""
    k = 0.5 * MIN_SHIFT
    return (k, cusum_threshold(k, arl_for_rate(false_alarm_rate, decisions_per_second)),
            cusum_threshold(k, arl_for_rate(error_rate, decisions_per_second)))


class CusumTest:
    """A two-sided CUSUM on a standardised residual with WARN/ERROR thresholds and hysteresis.

    ``h_warn``/``h_error`` [σ] come from false-alarm rates (:func:`cusum_thresholds`).
    The statistic is capped at ``h_error`` so it falls back within about
    h_error/k decisions once the residual returns to zero mean.
    """

    def __init__(self, k: float, h_warn: float, h_error: float, min_duration: float,
                 clear_duration: float) -> None:
        self.k = k
        self.h_warn = h_warn
        self.h_error = max(h_error, h_warn)
        self.cusum = Cusum(k, cap=self.h_error * 1.0001)
        self.tracker = LevelTracker(min_duration, clear_duration)
        self.statistic = 0.0
        self.side = 0
        self.last_z = math.nan
        self._last_excess = math.nan

    @property
    def level(self) -> int:
        """Current level (OK/WARN/ERROR)."""
        return self.tracker.level

    def reset(self, stamp: float = math.nan) -> None:
        """Forget the history (used when the check becomes inactive or time jumps)."""
        self.cusum.reset(stamp)
        self.tracker.reset()
        self.statistic = 0.0
        self.side = 0
        self._last_excess = math.nan

    def update(self, z: float, stamp: float, span: float = 0.0) -> str | None:
        """Feed one standardised residual z [σ] at ``stamp`` [s]; returns a transition.

        ``span`` [s]: z summarises data from [stamp − span, stamp) (a block mean), so a
        change first seen in it began no earlier than stamp − span: the onset estimate.
        """
        res = self.cusum.update(z, stamp)
        self.statistic, self.side, self.last_z = res.statistic, res.side, z
        if math.isfinite(z) and res.side != 0 and res.side * z > self.k:
            self._last_excess = stamp
        if res.statistic >= self.h_error:
            candidate = ERROR
        elif res.statistic >= self.h_warn:
            candidate = WARN
        else:
            candidate = OK
        onset = res.onset - span if math.isfinite(res.onset) else res.onset
        return self.tracker.update(candidate, stamp, onset, self._last_excess)

    def figures(self) -> list[tuple[str, float]]:
        """The statistic and its thresholds, for statuses and the time series [σ]."""
        return [("cusum [sigma]", self.statistic), ("cusum_warn [sigma]", self.h_warn),
                ("cusum_error [sigma]", self.h_error)]


class ThresholdTest:
    """A magnitude against WARN/ERROR thresholds (same unit), with hysteresis."""

    def __init__(self, warn: float, error: float, min_duration: float,
                 clear_duration: float) -> None:
        self.warn = warn
        self.error = max(error, warn)
        self.tracker = LevelTracker(min_duration, clear_duration)
        self.value = math.nan
        self._onset = math.nan
        self._last_above = math.nan

    @property
    def level(self) -> int:
        """Current level (OK/WARN/ERROR)."""
        return self.tracker.level

    def update(self, value: float, stamp: float, span: float = 0.0) -> str | None:
        """Feed a magnitude at ``stamp`` [s]; non-finite values count as OK.

        ``span`` [s]: the value summarises data from [stamp − span, stamp) (a block mean),
        so a deviation first seen in it began no earlier than stamp − span.
        """
        self.value = value
        mag = abs(value) if math.isfinite(value) else 0.0
        candidate = ERROR if mag >= self.error else WARN if mag >= self.warn else OK
        if candidate > OK:
            if not math.isfinite(self._onset):
                self._onset = stamp - span
            self._last_above = stamp
        elif self.tracker.level == OK:
            self._onset = math.nan
        out = self.tracker.update(candidate, stamp, self._onset, self._last_above)
        if out == "end":
            self._onset = math.nan
        return out


def mean_excess_z(mean: float, allowance: float, noise_var: float, n_eff: int
                  ) -> tuple[float, float]:
    """(mean, z): the part of |mean| beyond the model allowance, in σ of the block mean.

    The allowance is a dead band for the kinematic model's own error (deterministic, so
    it does not average out); the noise variance of one sample shrinks with ``n_eff``.
    """
    excess = math.copysign(max(0.0, abs(mean) - allowance), mean)
    sd = math.sqrt(noise_var / n_eff)
    return mean, excess / sd if sd > 0.0 else math.nan


class BlockMean:
    """Residual samples of one decision period: sums of residual, noise variance and model
    allowance, and whether every sample was taken while the check was meaningful."""

    __slots__ = ("n", "s", "noise_var", "allowance", "all_active")

    def __init__(self) -> None:
        self.clear()

    def clear(self) -> None:
        """Empty the block (at each decision)."""
        self.n = 0
        self.s = 0.0
        self.noise_var = 0.0
        self.allowance = 0.0
        self.all_active = True

    def add(self, r: float, noise_var: float, allowance: float, active: bool) -> None:
        """One residual ``r``, the variance of its noise and its model allowance."""
        self.n += 1
        self.s += r
        self.noise_var += noise_var
        self.allowance += allowance
        self.all_active = self.all_active and active

    def z(self, n_eff_cap: int) -> tuple[float, float]:
        """(mean residual, standardised excess over the allowance) of the block."""
        if self.n == 0:
            return math.nan, math.nan
        return mean_excess_z(self.s / self.n, self.allowance / self.n,
                             self.noise_var / self.n, max(1, min(self.n, n_eff_cap)))


@dataclass
class CheckContext:
    """What every check is built from: the shared latest inputs, where it reports, the
    decision period [s], the configuration, and the monitor's notes and counters."""

    state: MotionState
    book: EventSink
    period: float
    config: MonitorConfig
    notes: list[tuple[float, str]] = field(default_factory=list)
    counters: dict[str, int] = field(default_factory=dict)

    def error_rate(self) -> float:
        """False ERROR alarms per hour allowed [1/h]: checks.false_alarm_rate · (1 −
        checks.error_confidence)."""
        c = self.config.checks
        return c.false_alarm_rate * (1.0 - c.error_confidence)

    def cusum(self, decisions_per_second: float | None = None) -> CusumTest:
        """A CUSUM test taking ``decisions_per_second`` values (default: one per decision
        period) with the configured false-alarm rates and durations."""
        c = self.config.checks
        rate = decisions_per_second if decisions_per_second else 1.0 / self.period
        k, h_warn, h_error = cusum_thresholds(c.false_alarm_rate, self.error_rate(), rate)
        return CusumTest(k, h_warn, h_error, c.min_duration, c.clear_duration)


@dataclass(frozen=True)
class CheckInfo:
    """Who a check is: ``name``, its id and triage channel ('yaw_rate'); ``label``, its status
    name after ``kinematic_monitor: `` and, with underscores, its time-series name; ``unit``
    of its residual; ``peak_kinds``, the event kinds that keep its peak figures
    (:meth:`Check.peaks`); ``own_events_only``: only while it holds the event open itself."""

    name: str
    label: str
    unit: str = "-"
    peak_kinds: tuple[str, ...] = ()
    own_events_only: bool = False


class Check:
    """Base of every check: its :class:`CheckInfo` (``info``), ``needs``, the inputs it
    needs (a stale one makes its status STALE), ``figures``, its current key-values (unit in
    the key), and ``test``, the statistical test whose tracker gives its level."""

    info: ClassVar[CheckInfo] = CheckInfo("", "")
    test: CusumTest | ThresholdTest

    def __init__(self, ctx: CheckContext, needs: Iterable[str] = ()) -> None:
        self.ctx = ctx
        self.state = ctx.state
        self.book = ctx.book
        self.noise = ctx.config.noise
        self.needs = frozenset(needs)
        self.figures: dict[str, float] = {}

    @property
    def name(self) -> str:
        """The check's id and triage channel."""
        return self.info.name

    @property
    def label(self) -> str:
        """Its status and time-series name."""
        return self.info.label

    @property
    def level(self) -> int:
        """Current level (REP 107 OK/WARN/ERROR) before the stale-input rule."""
        return self.test.tracker.level

    @property
    def tracker(self) -> LevelTracker:
        """The level tracker whose start/end times an event takes."""
        return self.test.tracker

    def status_figures(self) -> dict[str, float]:
        """Key-values for ``/diagnostics`` and the time series (figures, then the test's)."""
        return dict(self.figures)

    def status_message(self, level: int, active: bool, summary: str | None,
                       inactive: str) -> str:
        """The status message at ``level``: the open event's summary, the level's name, or
        why the check is not meaningful now (``inactive``, e.g. below checks.min_speed)."""
        if level:
            return summary if summary else LEVEL_NAMES[level].lower()
        return "ok" if active else inactive

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """(name, value) figures an open event of ``kind`` keeps the largest of."""
        return []

    def evidence(self, ev: Evidence) -> None:
        """Add what this check knows to the evidence of an alarm on its own channel."""


class ThresholdCheck(Check):
    """A check whose test is a :class:`ThresholdTest` on a magnitude."""

    test: ThresholdTest

    def __init__(self, ctx: CheckContext, test: ThresholdTest, needs: Iterable[str] = ()
                 ) -> None:
        super().__init__(ctx, needs)
        self.test = test


class CusumCheck(Check):
    """A check whose test is a :class:`CusumTest` on standardised residuals."""

    test: CusumTest

    def __init__(self, ctx: CheckContext, needs: Iterable[str] = (),
                 test: CusumTest | None = None) -> None:
        super().__init__(ctx, needs)
        self.test = test if test is not None else ctx.cusum()

    def status_figures(self) -> dict[str, float]:
        """Figures, then the CUSUM statistic and its thresholds [σ]."""
        figs = dict(self.figures)
        figs.update(self.test.figures())
        return figs

    def deactivate(self, t: float) -> None:
        """Not meaningful now (e.g. standstill): close its event at ``t`` [s] and forget."""
        if self.test.level:
            self.book.close(self.name, t)
        self.test.reset(t)


class BlockCheck(CusumCheck):
    """A CUSUM check on block means of residual samples, one block per decision period."""

    def __init__(self, ctx: CheckContext, needs: Iterable[str] = ()) -> None:
        super().__init__(ctx, needs)
        self.period = ctx.period
        self.block = BlockMean()

    def decide(self, t: float, n_eff_cap: int, active: bool) -> None:
        """Decision at grid time ``t`` [s] on the block of [t − period, t)."""
        block = self.block
        mean, z = block.z(n_eff_cap)
        if block.n and block.all_active and active and math.isfinite(z):
            self.figures.update({f"block_mean_residual [{self.info.unit}]": mean,
                                 "excess [sigma]": z})
            self.book.handle(self.name, self.test.update(z, t, span=self.period), t)
        elif not active or (block.n and not block.all_active):
            self.deactivate(t)
        block.clear()
