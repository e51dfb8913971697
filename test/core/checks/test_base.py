"""Levels with hysteresis, the CUSUM and threshold tests, block means (checks/base.py)."""

from __future__ import annotations

import math

import pytest

from kinematic_monitor.core.checks.base import (
    MIN_SHIFT,
    BlockMean,
    CusumTest,
    LevelTracker,
    ThresholdTest,
    cusum_thresholds,
    mean_excess_z,
)
from kinematic_monitor.core.levels import ERROR, OK, WARN
from kinematic_monitor.core.stats import two_sided_arl


def test_level_tracker_min_duration_and_clear() -> None:
    tr = LevelTracker(min_duration=0.2, clear_duration=1.0)
    assert tr.update(WARN, 0.0) is None
    assert tr.update(WARN, 0.1) is None
    assert tr.update(WARN, 0.2) == "start" and tr.start == 0.0 and tr.detected_at == 0.2
    assert tr.update(ERROR, 0.3) is None
    assert tr.update(ERROR, 0.5) == "raise" and tr.level == ERROR
    assert tr.update(OK, 0.6) is None
    assert tr.update(WARN, 0.7) is None  # back above: the clear timer restarts
    assert tr.update(OK, 0.8) is None
    assert tr.update(OK, 1.7) is None
    assert tr.update(OK, 1.8) == "end" and tr.end == pytest.approx(0.8) and tr.level == OK
    assert tr.max_level == ERROR


def test_short_blip_is_ignored_and_reset_forgets() -> None:
    tr = LevelTracker(min_duration=0.2, clear_duration=1.0)
    tr.update(ERROR, 0.0)
    tr.update(OK, 0.1)
    assert tr.update(OK, 0.2) is None and tr.level == OK
    tr.update(WARN, 1.0)
    tr.update(WARN, 1.3)
    tr.reset()
    assert tr.level == OK and math.isnan(tr.start) and tr.update(OK, 1.4) is None


def test_cusum_levels_onset_and_recovery() -> None:
    chk = CusumTest(k=0.5, h_warn=5.0, h_error=10.0, min_duration=0.0, clear_duration=0.5)
    assert all(chk.update(0.0, t * 0.1) is None for t in range(10))
    outs = [chk.update(3.0, 1.0 + t * 0.1) for t in range(8)]
    assert "start" in outs and "raise" in outs and chk.level == ERROR
    # the change-point estimate is the last zero of the alarming side (Page 1954)
    assert chk.tracker.start == pytest.approx(1.0)
    t = 1.8
    while chk.level and t < 10:  # back in control: the capped statistic falls, it clears
        chk.update(0.0, t)
        t += 0.1
    assert chk.level == OK and t < 5.0
    assert chk.tracker.end == pytest.approx(1.7)
    names = [name for name, _ in chk.figures()]
    assert names == ["cusum [sigma]", "cusum_warn [sigma]", "cusum_error [sigma]"]


def test_cusum_block_span_moves_the_onset_to_the_block_start() -> None:
    chk = CusumTest(k=0.5, h_warn=5.0, h_error=10.0, min_duration=0.2, clear_duration=0.5)
    for t in range(10):
        chk.update(0.0, t * 0.1, span=0.1)
    # a large shift first seen in the block [0.9, 1.0): the change began at 0.9 at the
    # earliest, so 0.2 s of deviation have passed at the decision 1.1
    assert chk.update(20.0, 1.0, span=0.1) is None
    assert chk.update(20.0, 1.1, span=0.1) == "start"
    assert chk.tracker.start == pytest.approx(0.9)


def test_threshold_test() -> None:
    chk = ThresholdTest(0.1, 0.2, min_duration=0.0, clear_duration=0.3)
    assert chk.update(0.05, 0.0) is None
    assert chk.update(-0.15, 0.1) == "start" and chk.level == WARN
    assert chk.update(0.3, 0.2) == "raise"
    chk.update(math.nan, 0.3)  # non-finite counts as OK
    assert chk.update(0.0, 0.6) == "end" and chk.tracker.end == pytest.approx(0.2)


def test_persistence_counts_from_the_onset_at_epoch_scale_stamps() -> None:
    # stamps near 1.8e9 s carry ~2.4e-7 s of rounding: (t0 + 0.6) − (t0 + 0.4) < 0.2
    t0 = 1_800_000_000.0
    tr = LevelTracker(min_duration=0.2, clear_duration=1.0)
    assert tr.update(WARN, t0 + 0.1, onset=t0) is None
    assert tr.update(WARN, t0 + 0.2, onset=t0) == "start" and tr.start == t0
    plain = LevelTracker(min_duration=0.2, clear_duration=1.0)
    assert (t0 + 0.1 * 6) - (t0 + 0.1 * 4) < 0.2 - 1e-9
    outs = [plain.update(WARN, t0 + 0.1 * k) for k in (4, 5, 6)]
    assert outs[-1] == "start"


def test_thresholds_give_the_stated_run_length() -> None:
    # in-control ARL of the two-sided CUSUM (Siegmund's approximation, stats.py) equals
    # decisions per hour / alarms per hour for each threshold
    k, h_warn, h_error = cusum_thresholds(1.0, 0.001, 10.0)
    assert k == 0.5 * MIN_SHIFT
    assert two_sided_arl(k, h_warn) == pytest.approx(36_000.0, rel=1e-6)
    assert two_sided_arl(k, h_error) == pytest.approx(36_000_000.0, rel=1e-6)
    assert h_error > h_warn


def test_block_mean_excess_over_the_allowance() -> None:
    b = BlockMean()
    assert all(math.isnan(v) for v in b.z(10))
    for r in (0.03, 0.05):
        b.add(r, 0.0001, 0.01, True)
    mean, z = b.z(10)
    # mean 0.04, allowance 0.01: excess 0.03 in σ of the mean of 2 = 0.01/sqrt(2)
    assert mean == pytest.approx(0.04) and z == pytest.approx(0.03 / (0.01 / math.sqrt(2)))
    assert mean_excess_z(-0.005, 0.01, 1e-4, 1) == (-0.005, -0.0)  # inside the dead band
    b.add(0.0, 1e-4, 0.0, False)
    assert not b.all_active
    b.clear()
    assert b.n == 0 and b.all_active
