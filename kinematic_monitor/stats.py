"""Statistical tests behind the checks: chi-square bounds and CUSUM change detection.

Pure Python/scipy, no ROS. All thresholds are derived from a stated false-alarm rate and
a sample rate instead of being tuned to one drive:

* chi-square bounds for the normalised innovation squared (NIS) of a consistent filter,
  single-update and time-averaged (Bar-Shalom, Li, Kirubarajan 2001, ch. 5);
* a two-sided CUSUM on a standardised residual (Page 1954; Basseville & Nikiforov 1993),
  whose threshold ``h`` for a target in-control average run length (ARL) comes from
  Siegmund's approximation of the one-sided ARL (Siegmund 1985, *Sequential Analysis*);
  the last reset of the alarming side is the change-point (onset) estimate.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from scipy.stats import chi2

SECONDS_PER_HOUR = 3600.0


def chi2_upper(dof: int, confidence: float = 0.95) -> float:
    """One-sided upper bound of chi-square(dof) at ``confidence`` (e.g. 3.8415 for 1 dof)."""
    if dof < 1:
        raise ValueError(f"dof must be >= 1, got {dof}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    return float(chi2.ppf(confidence, dof))


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
    return float(chi2.ppf(tail, n)) / window, float(chi2.ppf(1.0 - tail, n)) / window


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
