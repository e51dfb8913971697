"""Filter-consistency check: time-averaged NIS bounds (Bar-Shalom et al. 2001, ch. 5)."""

from __future__ import annotations

import pytest
from scipy.stats import chi2

from fixtures.checks import setup
from kinematic_monitor.core.checks.consistency import FilterConsistencyCheck, nis_bounds
from kinematic_monitor.core.levels import OK, WARN


def test_time_averaged_bounds_match_check_values() -> None:
    # CHECK_SOURCES.md [C, scipy.stats.chi2]: n_z = 3, K = 100, two-sided 95 %: [2.5391, 3.4987]
    lo, hi, warn = nis_bounds(3, 100, 50, 1.0)
    assert lo == pytest.approx(2.5391, abs=1e-4) and hi == pytest.approx(3.4987, abs=1e-4)
    windows_per_hour = 3600.0 * 50 / 100
    assert warn == pytest.approx(chi2.ppf(1.0 - 1.0 / windows_per_hour, 300) / 100, rel=1e-9)


def test_levels_over_a_full_window() -> None:
    ctx, _, _ = setup()
    chk = FilterConsistencyCheck(ctx)
    for _ in range(49):
        chk.add(3.0)
    assert chk.level == OK and "collecting" in chk.status_message(OK, True, None, "")
    chk.add(3.0)
    assert chk.level == OK and chk.status_message(OK, True, None, "") == "consistent"
    for _ in range(50):
        chk.add(9.0)  # three times the expected mean of chi-square(3)
    assert chk.level == WARN and "mean_nis [-]" in chk.status_figures()
    chk.clear()
    assert chk.level == OK
