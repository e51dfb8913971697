"""The whole calibration: inputs, errors, exclusions and the written parameters."""

from __future__ import annotations

import pytest

from fixtures.calibration import FILE, config, make_drive
from kinematic_monitor.config import validation
from kinematic_monitor.core import calibration as cal
from kinematic_monitor.core.samples import ChassisSample, LocalizationSample


def test_too_little_usable_data_is_a_clear_error() -> None:
    with pytest.raises(cal.CalibrationError) as info:
        cal.calibrate(make_drive(7, 40.0), config())
    msg = str(info.value)
    assert msg.startswith("only ")
    assert "s of usable driving; need at least 60 s of moving, low-lateral-acceleration" in msg


def test_slow_drive_rejected_with_reason() -> None:
    with pytest.raises(cal.CalibrationError, match="below minimum speed"):
        cal.calibrate(make_drive(8, 90.0, constant_speed=1.5), config())


def test_missing_localisation_is_a_clear_error() -> None:
    drive = [s for s in make_drive(9, 10.0) if isinstance(s, ChassisSample)]
    with pytest.raises(cal.CalibrationError, match="localisation"):
        cal.calibrate(drive, config())


def test_a_dict_of_parameters_is_refused_with_the_way_out() -> None:
    with pytest.raises(TypeError, match="MonitorConfig.*validate"):
        cal.calibrate(make_drive(9, 10.0), dict(FILE))  # type: ignore[arg-type]


def test_localisation_jump_and_excluded_windows_are_not_used() -> None:
    drive = make_drive(10, 120.0, offset=0.01)
    jumped = [LocalizationSample(s.stamp, s.x + 3.0, s.y, s.yaw, s.vx, s.vy, s.yaw_rate)
              if isinstance(s, LocalizationSample) and 1060.0 <= s.stamp < 1080.0 else s
              for s in drive]
    res = cal.calibrate(jumped, config(), exclude=[(1010.0, 1020.0)], seed=10)
    assert res.rejected_seconds.get("localisation jump", 0.0) >= 1.5
    assert res.rejected_seconds.get("excluded window (events)", 0.0) >= 5.0
    e = res.estimates["vehicle.steering_offset"]
    assert abs(e.value - 0.01) < 4 * e.uncertainty


def test_parameter_updates_validate() -> None:
    res = cal.calibrate(make_drive(12, 120.0, offset=-0.0175, scale=1.02), config(), seed=12)
    cfg = validation.validate({**FILE, **res.parameter_updates()})
    assert cfg.vehicle.steering_offset == pytest.approx(-0.0175, abs=1e-3)
    assert cfg.vehicle.wheel_speed_scale == pytest.approx(1.02, abs=2e-3)
    assert all(name.startswith("vehicle.") for name in res.parameter_updates())


def test_drives_given_as_a_list() -> None:
    a, b = make_drive(14, 50.0), make_drive(15, 50.0, t0=5000.0)
    res = cal.calibrate([a, b], config(), seed=14)
    one = cal.calibrate(a, config(), cal.SelectionRules(min_usable=30.0), seed=14)
    assert res.usable_seconds > 1.8 * one.usable_seconds


@pytest.mark.slow
def test_simulated_gentle_drives_recover_faults_within_stated_errors() -> None:
    # acceptance of the calibration issue on two seeds of bench/calibration_coverage.py:
    # steering +1.0 deg, wheel radius -2 %, 5-minute gentle drive -> offset within
    # +-0.05 deg, scale within +-0.2 %, and the stated 1-sigma errors cover the truth at
    # 95 % (|error| < 1.96 SE, normal quantile, scipy.stats.norm.ppf(0.975) = 1.95996).
    # Without the yaw-lag term the offset came out 0.0025 deg low on every seed with
    # SE ~0.0012 deg (mean z ~ -2); the mean z over the seeds must stay below 1.
    import calibration_coverage as cc
    from scipy.stats import norm

    assert norm.ppf(0.975) == pytest.approx(cc.Z95, abs=1e-12)
    rows = [cc.run_seed(seed, 300.0, n_boot=100) for seed in (0, 1)]
    for r in rows:
        assert r.accurate, r
        assert r.offset_z < cc.Z95 and r.scale_z < cc.Z95, r
    mean_z = sum((r.offset - cc.TRUE_OFFSET) / r.offset_se for r in rows) / len(rows)
    assert abs(mean_z) < 1.0
