"""Filter consistency: the time-averaged NIS of the pose filter against chi-square bounds.

For a consistent filter, K·(mean NIS over K updates) ~ χ²(K·n_z) (Bar-Shalom, Li,
Kirubarajan 2001, ch. 5): a mean above the bound that gives ``checks.false_alarm_rate``
windows per hour says the localisation and the kinematic filter disagree more than their
stated noise allows (WARN, status only); below the lower 95 % bound the localisation's
covariance looks pessimistic.
"""

from __future__ import annotations

import functools
from collections import deque

from kinematic_monitor.core.checks.base import Check, CheckContext, CheckInfo
from kinematic_monitor.core.levels import OK, WARN
from kinematic_monitor.core.stats import SECONDS_PER_HOUR, chi2_upper, mean_nis_bounds


@functools.lru_cache(maxsize=64)
def nis_bounds(dof: int, n: int, rate_hz: int, windows_warn_per_hour: float
               ) -> tuple[float, float, float]:
    """Mean-NIS bounds over ``n`` updates of ``dof`` each at ``rate_hz`` updates per
    second: (95 % lower, 95 % upper, WARN bound for that many false windows per hour)."""
    windows_per_hour = SECONDS_PER_HOUR * rate_hz / n
    conf = 1.0 - min(0.5, windows_warn_per_hour / windows_per_hour)
    lo, hi = mean_nis_bounds(dof, n, 0.95)
    return lo, hi, chi2_upper(dof * n, conf) / n


class FilterConsistencyCheck(Check):
    """See the module docstring; the bounds use the state's localisation update rate."""

    info = CheckInfo("nis", "filter consistency")

    def __init__(self, ctx: CheckContext) -> None:
        super().__init__(ctx, ("localization",))
        self.window = ctx.config.checks.nis_window
        self.nis: deque[float] = deque(maxlen=max(1, self.window))
        self.dof = 3

    def add(self, nis: float) -> None:
        """One pose update's NIS (3 degrees of freedom) while moving."""
        self.nis.append(float(nis))

    def clear(self) -> None:
        """The filter was restarted: start a new window."""
        self.nis.clear()

    def _evaluate(self) -> tuple[int, str, dict[str, float]]:
        n = len(self.nis)
        if n < (self.nis.maxlen or 0):
            return OK, f"collecting ({n}/{self.window} updates)", {}
        mean = sum(self.nis) / n
        # the update rate in whole Hz, as for the jump bounds: the bounds are then computed
        # once per rate (the estimate jitters with the stamps)
        rate = max(1, round(self.state.loc_rate_guess))
        lo, hi, hi_fa = nis_bounds(self.dof, n, rate, self.ctx.config.checks.false_alarm_rate)
        figs = {"mean_nis [-]": mean, "mean_nis_95_lower [-]": lo,
                "mean_nis_95_upper [-]": hi, "mean_nis_warn [-]": hi_fa}
        if mean > hi_fa:
            return WARN, "localisation inconsistent with the kinematic filter", figs
        if mean < lo:
            return OK, "localisation covariance looks pessimistic", figs
        return OK, "consistent", figs

    @property
    def level(self) -> int:
        """WARN while the windowed mean NIS is above its bound."""
        return self._evaluate()[0]

    def status_figures(self) -> dict[str, float]:
        """Mean NIS and its bounds (once the window is full)."""
        return self._evaluate()[2]

    def status_message(self, level: int, active: bool, summary: str | None,
                       inactive: str) -> str:
        """'collecting', 'consistent', 'pessimistic' or the WARN reason; when not moving and
        OK, why it is not meaningful now."""
        if level == OK and not active:
            return inactive
        return self._evaluate()[1]
