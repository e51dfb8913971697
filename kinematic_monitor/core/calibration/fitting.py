"""Least squares with a segment (block) bootstrap and a Newey-West long-run variance.

``se_fit`` comes from ``sigma^2 (J^T J)^-1`` with ``sigma^2`` the residual variance times
the Newey-West long-run factor; ``se_boot`` from a seeded block bootstrap over segments
(drawn with replacement). Both are built from the residuals, so model error that stays in
them counts as error, as if it were random between drives; model error that is the same in
every sample is a bias no residual shows.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass
class Fit:
    """A least-squares solution: coefficients, covariance and bootstrap replicates."""

    beta: np.ndarray
    cov: np.ndarray
    boot: np.ndarray  # (n_boot, p) bootstrap estimates
    resid: np.ndarray
    cond: float  # condition number of the column-scaled design
    corr: np.ndarray  # correlation matrix of the coefficients

    def se(self) -> np.ndarray:
        """Standard errors from the covariance."""
        return np.sqrt(np.diag(self.cov))

    def se_boot(self) -> np.ndarray:
        """Standard deviations of the bootstrap replicates (NaN with fewer than two)."""
        if len(self.boot) < 2:
            return np.full(len(self.beta), np.nan)
        return np.asarray(np.std(self.boot, axis=0, ddof=1))


@dataclass(frozen=True)
class Boot:
    """Bootstrap generator, number of resamples and Newey-West lags of one run."""

    rng: np.random.Generator
    n: int
    lags: int

    def without_resamples(self) -> Boot:
        """The same lags, no bootstrap (for the inner steps of an iteration)."""
        return Boot(self.rng, 0, self.lags)


def long_run_factor(resid: np.ndarray, seg: np.ndarray, lags: int) -> float:
    """Newey-West (Bartlett kernel) factor 1 + 2 sum (1 - k/(M+1)) rho_k, at least 1.

    Newey & West, Econometrica 55 (1987): residuals correlated over a few samples (here
    by the low-pass filter and the vehicle's own dynamics) make sigma^2 (X^T X)^-1 too
    small by about this factor. Pairs across segment borders are skipped.
    """
    e = resid - np.mean(resid)
    var = float(e @ e)
    if var <= 0.0 or lags < 1:
        return 1.0
    f = 1.0
    for k in range(1, min(lags, len(e) - 1) + 1):
        same = seg[k:] == seg[:-k]
        rho = float(np.sum((e[k:] * e[:-k])[same])) / var
        f += 2.0 * (1.0 - k / (lags + 1.0)) * rho
    return max(f, 1.0)


def _bootstrap(Xs: np.ndarray, y: np.ndarray, seg: np.ndarray, scale: np.ndarray,
               opts: Boot) -> np.ndarray:
    """Replicates from per-segment normal equations with resampled segment counts."""
    p = Xs.shape[1]
    ids = np.unique(seg)
    nb = len(ids)
    if nb < 2 or opts.n <= 0:
        return np.zeros((0, p))
    idx = np.searchsorted(ids, seg)
    A = np.zeros((nb, p, p))
    b = np.zeros((nb, p))
    np.add.at(A, idx, Xs[:, :, None] * Xs[:, None, :])
    np.add.at(b, idx, Xs * y[:, None])
    out = []
    for _ in range(opts.n):
        w = np.bincount(opts.rng.integers(0, nb, nb), minlength=nb).astype(float)
        Ab = np.einsum("b,bij->ij", w, A)
        bb = w @ b
        try:
            out.append(np.linalg.solve(Ab, bb) / scale)
        except np.linalg.LinAlgError:
            continue
    return np.array(out) if out else np.zeros((0, p))


def lsq(X: np.ndarray, y: np.ndarray, seg: np.ndarray, boot_opts: Boot) -> Fit:
    """Solve X beta = y; ``seg`` gives each row's bootstrap segment."""
    n, p = X.shape
    scale = np.linalg.norm(X, axis=0)
    scale[scale == 0.0] = 1.0
    Xs = X / scale
    bs, *_ = np.linalg.lstsq(Xs, y, rcond=None)
    beta = bs / scale
    resid = y - X @ beta
    dof = max(n - p, 1)
    sigma2 = float(resid @ resid) / dof * long_run_factor(resid, seg, boot_opts.lags)
    sv = np.linalg.svd(Xs, compute_uv=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    xtx_s = Xs.T @ Xs
    try:
        inv_s = np.linalg.inv(xtx_s)
    except np.linalg.LinAlgError:
        inv_s = np.linalg.pinv(xtx_s)
    cov = sigma2 * inv_s / np.outer(scale, scale)
    sd = np.sqrt(np.abs(np.diag(cov)))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(sd, sd)
    return Fit(beta, cov, _bootstrap(Xs, y, seg, scale, boot_opts), resid, cond, corr)


def design(cols: Sequence[np.ndarray], rdot: np.ndarray | None,
           last: np.ndarray) -> np.ndarray:
    """Columns + the yaw-lag column (when present) + the offset column, in that order."""
    return np.column_stack([*cols, *(() if rdot is None else (rdot,)), last])


def lag_column(rdot: np.ndarray) -> np.ndarray | None:
    """The yaw-acceleration regressor [rad/s^2], or None when it carries no signal."""
    return rdot if float(np.std(rdot)) > 1e-6 else None
