"""Least squares, Newey-West factor and segment bootstrap against scipy and closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from kinematic_monitor.core.calibration import fitting


def boot(n: int = 0, lags: int = 0, seed: int = 0) -> fitting.Boot:
    return fitting.Boot(np.random.default_rng(seed), n, lags)


def test_straight_line_fit_matches_scipy_linregress() -> None:
    # without lags the covariance is the ordinary sigma^2 (X^T X)^-1 with n - 2 degrees of
    # freedom, as scipy.stats.linregress states its standard errors
    rng = np.random.default_rng(1)
    x = rng.uniform(-3, 3, 400)
    y = 0.7 * x - 0.2 + rng.normal(0, 0.3, 400)
    fit = fitting.lsq(np.column_stack([x, np.ones_like(x)]), y, np.zeros(400, int), boot())
    ref = stats.linregress(x, y)
    assert fit.beta[0] == pytest.approx(ref.slope, abs=1e-12)
    assert fit.beta[1] == pytest.approx(ref.intercept, abs=1e-12)
    assert fit.se()[0] == pytest.approx(ref.stderr, rel=1e-9)
    assert fit.se()[1] == pytest.approx(ref.intercept_stderr, rel=1e-9)
    # correlation of slope and intercept: -mean(x) / sqrt(mean(x^2)) [C, OLS covariance]
    assert fit.corr[0, 1] == pytest.approx(-np.mean(x) / np.sqrt(np.mean(x**2)), rel=1e-9)
    assert np.isnan(fit.se_boot()).all()  # no resamples asked for


def test_newey_west_factor_of_an_ar1_residual() -> None:
    # Newey & West, Econometrica 55 (1987), Bartlett kernel: 1 + 2 sum_k (1 - k/(M+1)) rho_k;
    # for AR(1) residuals rho_k = phi^k [C]
    phi, M, n = 0.5, 10, 200_000
    rng = np.random.default_rng(2)
    e = np.zeros(n)
    w = rng.normal(size=n)
    for k in range(1, n):
        e[k] = phi * e[k - 1] + w[k]
    expected = 1 + 2 * sum((1 - k / (M + 1)) * phi**k for k in range(1, M + 1))
    got = fitting.long_run_factor(e, np.zeros(n, int), M)
    assert got == pytest.approx(expected, rel=0.02)
    # pairs across segment borders do not count: alternate segments every sample
    assert fitting.long_run_factor(e, np.arange(n) % 2, 1) == 1.0
    assert fitting.long_run_factor(np.zeros(10), np.zeros(10, int), 3) == 1.0


def test_bootstrap_agrees_with_the_fit_on_independent_noise() -> None:
    # with independent noise, resampling whole segments estimates the same variance as the
    # covariance formula (Efron & Tibshirani, An Introduction to the Bootstrap, 1993, from
    # memory); 400 resamples give the standard deviation to about +-4 %
    rng = np.random.default_rng(3)
    n = 5000
    x = rng.uniform(0, 10, n)
    y = 2.0 * x + 1.0 + rng.normal(0, 0.5, n)
    seg = np.arange(n) // 50
    fit = fitting.lsq(np.column_stack([x, np.ones(n)]), y, seg, boot(400, 0, 4))
    assert fit.boot.shape == (400, 2)
    np.testing.assert_allclose(fit.se_boot(), fit.se(), rtol=0.15)


def test_one_segment_gives_no_bootstrap() -> None:
    x = np.linspace(0, 1, 50)
    fit = fitting.lsq(x[:, None], 3 * x, np.zeros(50, int), boot(50))
    assert fit.boot.shape == (0, 1) and fit.beta[0] == pytest.approx(3.0)


def test_collinear_columns_give_an_infinite_or_huge_condition_number() -> None:
    x = np.linspace(0, 1, 100)
    fit = fitting.lsq(np.column_stack([x, 2 * x]), x, np.arange(100) // 10, boot(20))
    assert fit.cond > 1e12


def test_design_and_lag_column() -> None:
    a, b, c = np.ones(3), np.arange(3.0), np.full(3, 7.0)
    assert fitting.design([a], None, c).shape == (3, 2)
    np.testing.assert_array_equal(fitting.design([a], b, c)[:, 1], b)
    assert fitting.lag_column(np.zeros(5)) is None
    assert fitting.lag_column(b) is b
