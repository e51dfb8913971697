"""Statistical building blocks against outside references.

* chi-square bounds: scipy.stats.chi2 and the values in /work/shared/CHECK_SOURCES.md
  (Bar-Shalom, Li, Kirubarajan 2001, ch. 5 — chapter number from memory);
* CUSUM in-control ARL with k = 0.5σ: ≈ 168 (h = 4σ) and ≈ 465 (h = 5σ) for the two-sided
  tabular CUSUM (Montgomery, *Introduction to Statistical Quality Control*, from memory),
  checked by a seeded Monte-Carlo run and against Siegmund's approximation (from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from kinematic_monitor.core.stats import (
    Cusum,
    arl_for_rate,
    chi2_upper,
    cusum_threshold,
    mean_nis_bounds,
    run_length,
    siegmund_arl,
    two_sided_arl,
)


@pytest.mark.parametrize("dof, value", [(1, 3.8415), (2, 5.9915), (3, 7.8147)])
def test_chi2_upper_matches_tabulated(dof: int, value: float) -> None:
    # CHECK_SOURCES.md [C, scipy.stats.chi2]: 95 % one-sided bounds
    assert chi2_upper(dof, 0.95) == pytest.approx(value, abs=5e-5)
    assert chi2_upper(dof, 0.95) == pytest.approx(chi2.ppf(0.95, dof), rel=1e-12)


def test_time_averaged_nis_bounds() -> None:
    # CHECK_SOURCES.md: n_z = 3, K = 100, two-sided 95 %: [2.5391, 3.4987]
    lo, hi = mean_nis_bounds(3, 100, 0.95)
    assert lo == pytest.approx(2.5391, abs=5e-5)
    assert hi == pytest.approx(3.4987, abs=5e-5)


def test_bad_arguments_are_named() -> None:
    with pytest.raises(ValueError, match="dof"):
        chi2_upper(0)
    with pytest.raises(ValueError, match="confidence"):
        mean_nis_bounds(3, 10, 1.5)
    with pytest.raises(ValueError, match="k"):
        Cusum(0.0)
    with pytest.raises(ValueError, match="false_alarms_per_hour"):
        arl_for_rate(0.0, 10.0)


def test_siegmund_two_sided_close_to_montgomery_table() -> None:
    # Montgomery's table (from memory): k = 0.5, h = 4 → 168; h = 5 → 465
    assert two_sided_arl(0.5, 4.0) == pytest.approx(168, rel=0.03)
    assert two_sided_arl(0.5, 5.0) == pytest.approx(465, rel=0.03)
    assert siegmund_arl(0.5, 5.0) == pytest.approx(2 * two_sided_arl(0.5, 5.0))


def test_threshold_inverts_arl() -> None:
    h = cusum_threshold(0.5, 465.0)
    assert h == pytest.approx(5.0, abs=0.05)
    assert two_sided_arl(0.5, h) == pytest.approx(465.0, rel=1e-6)
    # one false alarm per hour at 10 Hz: ARL 36 000 samples
    assert arl_for_rate(1.0, 10.0) == pytest.approx(36000.0)


@pytest.mark.parametrize("h, expected", [(4.0, 168.0), (5.0, 465.0)])
def test_cusum_in_control_arl_monte_carlo(h: float, expected: float) -> None:
    # Montgomery (from memory); seeded Monte-Carlo, ±12 % tolerance (≈ 4 standard errors
    # of the mean over 400 runs, run lengths are roughly geometric: sd ≈ mean)
    rng = np.random.default_rng(2024)
    runs = 400
    lengths = []
    for _ in range(runs):
        c = Cusum(0.5)
        n = 0
        while True:
            block = rng.standard_normal(256)
            for z in block:
                n += 1
                if c.update(float(z), float(n)).statistic >= h:
                    break
            else:
                continue
            break
        lengths.append(n)
    mean = float(np.mean(lengths))
    assert mean == pytest.approx(expected, rel=0.12)


def test_cusum_onset_is_last_reset_before_change() -> None:
    rng = np.random.default_rng(5)
    z = list(rng.standard_normal(300) * 0.3) + [2.0] * 20  # change at sample 301
    c = Cusum(0.5)
    alarm_at = None
    for i, v in enumerate(z, start=1):
        r = c.update(v, float(i))
        if r.statistic >= 5.0:
            alarm_at = i
            break
    assert alarm_at is not None and 301 < alarm_at <= 306
    assert 296 <= c.result().onset <= 301 and c.result().side == 1


def test_cusum_negative_side_and_nan_ignored() -> None:
    c = Cusum(0.5)
    for i in range(10):
        c.update(-2.0, float(i))
    assert c.result().side == -1 and c.result().statistic == pytest.approx(15.0)
    before = c.result().statistic
    c.update(math.nan, 11.0)
    assert c.result().statistic == before


def test_run_length_helper() -> None:
    assert run_length([3.0, 3.0, 3.0], 0.5, 5.0) == 2
    assert run_length([0.0] * 10, 0.5, 5.0) is None


@pytest.mark.parametrize("dof", [1, 2, 3, 5, 30, 150, 1000])
@pytest.mark.parametrize("p", [1e-9, 0.001, 0.025, 0.3, 0.5, 0.6, 0.95, 0.975, 0.999,
                               1.0 - 2.7e-8, 1.0 - 1e-12])
def test_pure_python_chi2_quantile_matches_scipy(dof: int, p: float) -> None:
    # reference: scipy.stats.chi2.ppf (the run-time code imports no scipy)
    from kinematic_monitor.core.stats import chi2_ppf

    assert chi2_ppf(p, dof) == pytest.approx(chi2.ppf(p, dof), rel=1e-12)


@pytest.mark.parametrize("a", [0.5, 1.5, 25.0, 500.0])
@pytest.mark.parametrize("x", [1e-6, 0.3, 1.0, 24.0, 26.0, 80.0, 520.0])
def test_incomplete_gamma_matches_scipy(a: float, x: float) -> None:
    # reference: scipy.special.gammainc / gammaincc (regularised lower / upper)
    from scipy.special import gammainc, gammaincc

    from kinematic_monitor.core.stats import gamma_pq

    p, q = gamma_pq(a, x)
    assert p == pytest.approx(gammainc(a, x), rel=1e-12, abs=1e-300)
    assert q == pytest.approx(gammaincc(a, x), rel=1e-12, abs=1e-300)


def test_chi2_quantile_bad_arguments_are_named() -> None:
    from kinematic_monitor.core.stats import chi2_ppf, gamma_pq

    with pytest.raises(ValueError, match="probability"):
        chi2_ppf(1.0, 3)
    with pytest.raises(ValueError, match="dof"):
        chi2_ppf(0.5, 0)
    with pytest.raises(ValueError, match="a > 0"):
        gamma_pq(-1.0, 1.0)


def test_stats_module_does_not_import_scipy() -> None:
    # start-up cost: importing scipy.stats takes seconds; the run-time path must not
    import subprocess
    import sys

    code = ("import sys, kinematic_monitor.core.stats, kinematic_monitor.core.monitor; "
            "print('scipy' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "False"
