"""Signal helpers of the calibration: moving averages, derivatives, gap-aware interpolation.

Arrays are sampled on one time base ``t`` [s]; ``n`` is a window length in samples.
"""

from __future__ import annotations

import numpy as np


def smooth(x: np.ndarray, n: int) -> np.ndarray:
    """Centred moving average over ``n`` samples, the ends held at the first/last value."""
    if n <= 1 or len(x) < n:
        return x.copy()
    kernel = np.ones(n) / n
    pad = n // 2
    xp = np.concatenate([np.full(pad, x[0]), x, np.full(n - 1 - pad, x[-1])])
    return np.convolve(xp, kernel, mode="valid")


def smooth_nan(x: np.ndarray, n: int) -> np.ndarray:
    """Centred moving average over n samples ignoring NaN (NaN stays NaN)."""
    if n <= 1 or len(x) < n:
        return x.copy()
    ok = np.isfinite(x)
    num = smooth(np.where(ok, x, 0.0), n)
    den = smooth(ok.astype(float), n)
    with np.errstate(invalid="ignore", divide="ignore"):
        out: np.ndarray = num / den
    out[~ok] = np.nan
    return out


def derivative(t: np.ndarray, x: np.ndarray, n: int) -> np.ndarray:
    """d x / d t [unit of x per s] of ``x`` smoothed over ``n`` samples."""
    if len(t) < 2:
        return np.zeros_like(x)
    return np.asarray(np.gradient(smooth(x, n), t), dtype=float)


def interp_with_gap(ts: np.ndarray, tc: np.ndarray, xc: np.ndarray,
                    max_gap: float) -> tuple[np.ndarray, np.ndarray]:
    """Interpolate (tc, xc) at ts; ok where neighbours are within max_gap [s] and finite."""
    if len(tc) == 0:
        return np.full(len(ts), np.nan), np.zeros(len(ts), bool)
    good = np.isfinite(xc)
    tc, xc = tc[good], xc[good]
    if len(tc) == 0:
        return np.full(len(ts), np.nan), np.zeros(len(ts), bool)
    i = np.searchsorted(tc, ts)
    lo = np.clip(i - 1, 0, len(tc) - 1)
    hi = np.clip(i, 0, len(tc) - 1)
    ok = (i > 0) & (i < len(tc)) & ((tc[hi] - tc[lo]) <= max_gap)
    exact = (i < len(tc)) & (tc[hi] == ts)
    ok |= exact
    return np.interp(ts, tc, xc), ok


def interp_or_nan(ts: np.ndarray, tc: np.ndarray, xc: np.ndarray,
                  max_gap: float) -> np.ndarray:
    """:func:`interp_with_gap` with NaN where it is not ok."""
    x, ok = interp_with_gap(ts, tc, xc, max_gap)
    return np.where(ok, x, np.nan)
