"""Statistical tests behind the checks: chi-square bounds and CUSUM change detection.

Pure Python (no scipy at run time: importing scipy.stats costs seconds of start-up), no
ROS. All thresholds are derived from a stated false-alarm rate and
a sample rate instead of being tuned to one drive:

* chi-square bounds for the normalised innovation squared (NIS) of a consistent filter,
  single-update and time-averaged (Bar-Shalom, Li, Kirubarajan 2001, ch. 5);
* a two-sided CUSUM on a standardised residual (Page 1954; Basseville & Nikiforov 1993),
  whose threshold ``h`` for a target in-control average run length (ARL) comes from
  Siegmund's approximation of the one-sided ARL (Siegmund 1985, *Sequential Analysis*);
  the last reset of the alarming side is the change-point (onset) estimate.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable
from dataclasses import dataclass
from statistics import NormalDist

SECONDS_PER_HOUR = 3600.0
_TINY = 1e-300
_EPS = 1e-16
_MAX_TERMS = 10_000


def gamma_pq(a: float, x: float) -> tuple[float, float]:
    """Regularised incomplete gamma functions (P(a, x), Q(a, x) = 1 − P), a > 0, x >= 0.

    Series for x < a + 1, Lentz's continued fraction for Q otherwise, so the smaller of
    the two is computed directly, never as 1 − (a number near 1) (Press et al.,
    *Numerical Recipes*, 3rd ed., sect. 6.2, from memory).
    """
    if not a > 0.0 or not x >= 0.0:
        raise ValueError(f"gamma_pq needs a > 0 and x >= 0, got a={a}, x={x}")
    if x == 0.0:
        return 0.0, 1.0
    if math.isinf(x):
        return 1.0, 0.0
    log_pre = a * math.log(x) - x - math.lgamma(a)
    if x < a + 1.0:
        ap, term = a, 1.0 / a
        total = term
        for _ in range(_MAX_TERMS):
            ap += 1.0
            term *= x / ap
            total += term
            if term < total * _EPS:
                break
        p = math.exp(log_pre) * total
        return p, 1.0 - p
    b = x + 1.0 - a
    c = 1.0 / _TINY
    d = 1.0 / b
    h = d
    for i in range(1, _MAX_TERMS):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        if abs(d) < _TINY:
            d = _TINY
        c = b + an / c
        if abs(c) < _TINY:
            c = _TINY
        d = 1.0 / d
        delta = d * c
        h *= delta
        if abs(delta - 1.0) < _EPS:
            break
    q = math.exp(log_pre) * h
    return 1.0 - q, q


def _gamma_quantile(a: float, p: float, x0: float) -> float:
    """x with P(a, x) = p (0 < p < 1), safeguarded Newton from ``x0`` > 0.

    The upper tail is solved as Q(a, x) = 1 − p (exact in floating point for p >= 0.5),
    the lower one as P(a, x) = p, each with a bracket that Newton steps may not leave.
    """
    upper = p > 0.5
    target = 1.0 - p if upper else p
    lo, hi = 0.0, math.inf
    x = x0
    log_norm = math.lgamma(a)
    for _ in range(200):
        pp, qq = gamma_pq(a, x)
        f = (qq - target) if upper else (pp - target)
        # P increases with x: for the upper tail f decreases, for the lower one it increases
        if (f > 0.0) == upper:
            lo = x
        else:
            hi = x
        if f == 0.0:
            return x
        dens = math.exp((a - 1.0) * math.log(x) - x - log_norm)  # dP/dx
        new = (x + (f / dens if upper else -f / dens)) if dens > 0.0 else math.nan
        if not (lo < new < hi):  # outside the bracket: bisect (geometric when unbounded)
            new = 0.5 * (lo + hi) if math.isfinite(hi) else max(2.0 * x, x + 1.0)
        if abs(new - x) <= 4.0 * _EPS * abs(x) or hi - lo <= 4.0 * _EPS * abs(x):
            return new
        x = new
    return x


@functools.lru_cache(maxsize=4096)
def chi2_ppf(p: float, dof: int) -> float:
    """Quantile of chi-square(dof) at probability ``p`` (pure Python; cached).

    χ²(k) quantile = 2·(gamma(k/2) quantile); the start is the Wilson–Hilferty cube-root
    normal approximation (Wilson & Hilferty 1931), refined by safeguarded Newton steps to
    about 1e-14 relative (checked against scipy.stats.chi2.ppf in the tests).
    """
    if dof < 1:
        raise ValueError(f"dof must be >= 1, got {dof}")
    if not 0.0 < p < 1.0:
        raise ValueError(f"probability must be in (0, 1), got {p}")
    k = float(dof)
    z = NormalDist().inv_cdf(p)
    c = 2.0 / (9.0 * k)
    wh = k * (1.0 - c + z * math.sqrt(c)) ** 3
    x0 = 0.5 * wh if wh > 1e-3 else 1e-3 * p
    return 2.0 * _gamma_quantile(0.5 * k, p, x0)


def chi2_upper(dof: int, confidence: float = 0.95) -> float:
    """One-sided upper bound of chi-square(dof) at ``confidence`` (e.g. 3.8415 for 1 dof)."""
    if dof < 1:
        raise ValueError(f"dof must be >= 1, got {dof}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    return chi2_ppf(confidence, dof)


def mean_nis_bounds(dof: int, window: int, confidence: float = 0.95) -> tuple[float, float]:
    """Two-sided bounds of the NIS averaged over ``window`` updates of ``dof`` each.

    window·mean ~ chi-square(window·dof) for a consistent filter (Bar-Shalom et al. 2001),
    so the bounds are chi2.ppf((1∓confidence)/2, window·dof) / window.
    """
    if dof < 1 or window < 1:
        raise ValueError(f"dof and window must be >= 1, got dof={dof}, window={window}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    tail = 0.5 * (1.0 - confidence)
    n = window * dof
    return chi2_ppf(tail, n) / window, chi2_ppf(1.0 - tail, n) / window


def siegmund_arl(k: float, h: float) -> float:
    """Siegmund's approximation of the in-control ARL of a one-sided CUSUM [samples].

    Standardised N(0, 1) samples, reference value ``k`` and threshold ``h`` in σ units:
    ARL ≈ (exp(2·k·b) − 2·k·b − 1) / (2·k²), b = h + 1.166 (Siegmund 1985, from memory).
    """
    if k <= 0.0 or h <= 0.0:
        raise ValueError(f"k and h must be positive, got k={k}, h={h}")
    a = 2.0 * k * (h + 1.166)
    if a > 700.0:
        return math.inf
    return (math.exp(a) - a - 1.0) / (2.0 * k * k)


def two_sided_arl(k: float, h: float) -> float:
    """In-control ARL of a two-sided CUSUM: 1/ARL = 1/ARL⁺ + 1/ARL⁻ (symmetric sides)."""
    return 0.5 * siegmund_arl(k, h)


def cusum_threshold(k: float, arl: float) -> float:
    """Threshold ``h`` [σ] of a two-sided CUSUM giving the in-control ARL ``arl`` [samples]."""
    if not arl > 1.0:
        raise ValueError(f"target ARL must be > 1 sample, got {arl}")
    lo, hi = 1e-3, 1.0
    while two_sided_arl(k, hi) < arl:
        hi *= 2.0
        if hi > 1e4:
            raise ValueError(f"no CUSUM threshold reaches ARL {arl} with k={k}")
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if two_sided_arl(k, mid) < arl:
            lo = mid
        else:
            hi = mid
    return hi


def arl_for_rate(false_alarms_per_hour: float, sample_rate_hz: float) -> float:
    """Target in-control ARL [samples] for a false-alarm rate [1/h] at a sample rate [Hz]."""
    if not false_alarms_per_hour > 0.0 or not sample_rate_hz > 0.0:
        raise ValueError(
            "false_alarms_per_hour and sample_rate_hz must be positive, got "
            f"{false_alarms_per_hour} and {sample_rate_hz}"
        )
    return sample_rate_hz * SECONDS_PER_HOUR / false_alarms_per_hour


@dataclass
class CusumResult:
    """Outcome of one CUSUM update: statistic, side (+1/-1/0) and onset estimate [s]."""

    statistic: float
    side: int
    onset: float


class Cusum:
    """Two-sided CUSUM on a standardised residual z (σ units).

    g⁺ = max(0, g⁺ + z − k), g⁻ = max(0, g⁻ − z − k) (Page 1954). The statistic is
    max(g⁺, g⁻); the stamp of the last zero of the larger side estimates the onset.
    ``cap`` bounds the statistic so it falls back quickly once the change ends.
    """

    def __init__(self, k: float = 0.5, cap: float = math.inf) -> None:
        if not k > 0.0:
            raise ValueError(f"CUSUM reference value k must be positive, got {k}")
        self.k = k
        self.cap = cap
        self.reset()

    def reset(self, stamp: float = math.nan) -> None:
        """Clear both sides; ``stamp`` [s] becomes the onset estimate of both."""
        self.g_pos = 0.0
        self.g_neg = 0.0
        self.onset_pos = stamp
        self.onset_neg = stamp

    def update(self, z: float, stamp: float) -> CusumResult:
        """Add one standardised sample taken at ``stamp`` [s]; non-finite z is ignored."""
        if math.isfinite(z):
            if self.g_pos <= 0.0:
                self.onset_pos = stamp
            if self.g_neg <= 0.0:
                self.onset_neg = stamp
            self.g_pos = min(self.cap, max(0.0, self.g_pos + z - self.k))
            self.g_neg = min(self.cap, max(0.0, self.g_neg - z - self.k))
        return self.result()

    def result(self) -> CusumResult:
        """Current statistic, side and onset estimate."""
        if self.g_pos >= self.g_neg:
            return CusumResult(self.g_pos, 1 if self.g_pos > 0.0 else 0, self.onset_pos)
        return CusumResult(self.g_neg, -1, self.onset_neg)


def run_length(samples: Iterable[float], k: float, h: float) -> int | None:
    """Index (1-based) of the first CUSUM alarm over an iterable of z values, else None."""
    c = Cusum(k)
    for i, z in enumerate(samples, start=1):
        if c.update(float(z), float(i)).statistic >= h:
            return i
    return None
