"""Residual channel formulas and level hysteresis.

Kinematic values: /work/shared/CHECK_SOURCES.md table [C] (Rajamani 2012, kinematic model);
slip ratio: ISO 8855 / Pacejka κ = (Ω·R_e − V_x)/V_x (sign from memory) and SAE J670e
braking slip (locked wheel = 1.0 braking slip, κ = −1) [V].
"""

from __future__ import annotations

import math

import pytest

from kinematic_monitor.core.checks.base import (
    ERROR,
    GRAVITY,
    OK,
    WARN,
    CusumCheck,
    LevelTracker,
    ThresholdCheck,
    drift_error,
    grip_in_use,
    kinematic_envelope,
    kinematic_sideslip,
    kinematic_yaw_rate,
    measured_sideslip,
    slip_ratio,
    yaw_rate_sigma,
)


@pytest.mark.parametrize(
    "v, delta, lf, lr, beta, rate",
    [
        (10, 0.0872665, 1.2, 1.6, 0.049952, 0.312070),
        (10, 0.1, 1.2, 1.6, 0.057271, 0.357751),
        (20, 0.0349066, 1.2, 1.6, 0.019952, 0.249384),
        (5, 0.5235988, 1.2, 1.6, 0.318670, 0.979076),
        (10, 0.2, 1.0, 1.0, 0.101010, 1.008384),
    ],
)
def test_kinematic_values_from_check_table(v, delta, lf, lr, beta, rate) -> None:  # type: ignore[no-untyped-def]
    # CHECK_SOURCES.md kinematic table [C] (Rajamani 2012)
    assert kinematic_sideslip(delta, lf + lr, lr) == pytest.approx(beta, abs=1e-6)
    assert kinematic_yaw_rate(v, delta, lf + lr, lr) == pytest.approx(rate, abs=1e-6)
    # identity ψ̇ = v·sin β / l_r (Rajamani 2012)
    assert kinematic_yaw_rate(v, delta, lf + lr, lr) == pytest.approx(
        v * math.sin(beta) / lr, abs=1e-5)


def test_slip_ratio_signs_and_guard() -> None:
    # ISO 8855 / Pacejka sign (from memory): driving → positive
    assert slip_ratio(11.0, 10.0, 1.0) == pytest.approx(0.1)
    # SAE J670e: a locked wheel has braking slip 1.0, i.e. κ = −1 [V]
    assert slip_ratio(0.0, 10.0, 1.0) == pytest.approx(-1.0)
    # low speed: denominator guarded (common practice, no source)
    assert slip_ratio(0.5, 0.0, 1.0) == pytest.approx(0.5)
    with pytest.raises(ValueError, match="min_speed"):
        slip_ratio(1.0, 1.0, 0.0)


def test_sideslip_grip_and_envelope() -> None:
    # REP 103: y left → positive sideslip for a leftward velocity component
    assert measured_sideslip(10.0, 0.5) == pytest.approx(math.atan(0.05))
    assert grip_in_use(-GRAVITY * 0.31) == pytest.approx(0.31)
    # Polack et al. 2017 (0.5·μ·g from memory)
    assert kinematic_envelope(1.0) == pytest.approx(0.5 * 9.80665)


def test_drift_error_in_body_axes() -> None:
    # heading +90°: a map-frame error of −1 m in x is +1 m to the *right*, i.e. lateral −(−1)
    lon, lat, dyaw = drift_error((0.0, 0.0, math.pi / 2), (-1.0, 2.0, math.pi / 2 + 0.1))
    assert lon == pytest.approx(2.0) and lat == pytest.approx(1.0) and dyaw == pytest.approx(0.1)


def test_yaw_rate_sigma_reduces_to_measurement_noise_at_standstill() -> None:
    assert yaw_rate_sigma(0.0, 0.0, 2.7, 0.005, 0.002, 0.03, 0.0, 0.05) == pytest.approx(0.005)
    # first-order term for steering: v/(L cos²δ)·σ_δ
    s = yaw_rate_sigma(10.0, 0.0, 2.5, 0.0, 0.001, 0.0, 0.0, 0.0)
    assert s == pytest.approx(10.0 / 2.5 * 0.001)


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


def test_short_blip_is_ignored() -> None:
    tr = LevelTracker(min_duration=0.2, clear_duration=1.0)
    tr.update(ERROR, 0.0)
    tr.update(OK, 0.1)
    assert tr.update(OK, 0.2) is None and tr.level == OK


def test_cusum_check_levels_and_onset() -> None:
    chk = CusumCheck(k=0.5, h_warn=5.0, h_error=10.0, min_duration=0.0, clear_duration=0.5)
    outs = [chk.update(0.0, t * 0.1) for t in range(10)]
    assert all(o is None for o in outs)
    outs = [chk.update(3.0, 1.0 + t * 0.1) for t in range(8)]
    assert "start" in outs and "raise" in outs and chk.level == ERROR
    assert chk.tracker.start == pytest.approx(1.0)
    # back in control: the capped statistic falls and the check clears
    t = 1.8
    while chk.level and t < 10:
        chk.update(0.0, t)
        t += 0.1
    assert chk.level == OK and t < 5.0
    assert chk.tracker.end == pytest.approx(1.7)


def test_threshold_check() -> None:
    chk = ThresholdCheck(0.1, 0.2, min_duration=0.0, clear_duration=0.3)
    assert chk.update(0.05, 0.0) is None
    assert chk.update(-0.15, 0.1) == "start" and chk.level == WARN
    assert chk.update(0.3, 0.2) == "raise"
    chk.update(math.nan, 0.3)
    assert chk.update(0.0, 0.6) == "end" and chk.tracker.end == pytest.approx(0.2)


def test_persistence_counts_from_the_estimated_onset_at_epoch_scale_stamps() -> None:
    # the deviation began at the onset estimate (CUSUM change-point, Page 1954), so
    # min_duration is counted from there; stamps near 1.8e9 s carry ~2.4e-7 s rounding
    t0 = 1_800_000_000.0
    tr = LevelTracker(min_duration=0.2, clear_duration=1.0)
    assert tr.update(WARN, t0 + 0.1, onset=t0 + 0.0) is None  # lasted 0.1 s
    assert tr.update(WARN, t0 + 0.2, onset=t0 + 0.0) == "start"
    assert tr.start == t0 and tr.detected_at == t0 + 0.2
    # (t0 + 0.6) − (t0 + 0.4) evaluates to 0.1999998 s in binary floating point
    plain = LevelTracker(min_duration=0.2, clear_duration=1.0)
    assert (t0 + 0.1 * 6) - (t0 + 0.1 * 4) < 0.2 - 1e-9
    for k in (4, 5, 6):
        out = plain.update(WARN, t0 + 0.1 * k)
    assert out == "start"


def test_cusum_block_span_moves_the_onset_to_the_block_start() -> None:
    chk = CusumCheck(k=0.5, h_warn=5.0, h_error=10.0, min_duration=0.2, clear_duration=0.5)
    for t in range(10):
        chk.update(0.0, t * 0.1, span=0.1)
    # a large shift first seen in the block [0.9, 1.0): the change began at 0.9 at the
    # earliest, so 0.2 s of deviation have passed at the decision 1.1
    assert chk.update(20.0, 1.0, span=0.1) is None
    assert chk.update(20.0, 1.1, span=0.1) == "start"
    assert chk.tracker.start == pytest.approx(0.9)
