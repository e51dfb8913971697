"""Result types: which estimates are written, which are report-only."""

from __future__ import annotations

import math

from kinematic_monitor.core.calibration.results import CalibrationResult, Estimate, kept


def result(*estimates: Estimate) -> CalibrationResult:
    return CalibrationResult({e.name: e for e in estimates}, 60.0, 0.0, 60.0, 12, {}, [],
                             "road_wheel", "localisation twist")


def test_only_observable_parameters_are_written() -> None:
    res = result(Estimate("vehicle.steering_offset", "rad", 0.0, 0.01, 1e-4, 2e-4),
                 kept("vehicle.wheelbase", "m", 2.7, "no excitation"),
                 Estimate("imu_gyro_bias", "rad/s", 0.0, 0.003, 1e-5, 1e-5),
                 Estimate("vehicle.wheel_speed_scale", "-", 1.0, math.nan, observable=True))
    assert res.parameter_updates() == {"vehicle.steering_offset": 0.01}
    assert [e.name for e in res.report_only()] == ["imu_gyro_bias"]


def test_uncertainty_is_the_larger_finite_error() -> None:
    assert Estimate("a", "-", 0, 0, 1e-3, 2e-3).uncertainty == 2e-3
    assert Estimate("a", "-", 0, 0, 1e-3, math.nan).uncertainty == 1e-3
    assert math.isnan(Estimate("a", "-", 0, 0).uncertainty)
    k = kept("vehicle.wheelbase", "m", 2.7, "why")
    assert (k.value, k.prior, k.observable, k.reason) == (2.7, 2.7, False, "why")
    assert k.is_parameter and not Estimate("front_wheel_speed_scale", "-", 1, 1).is_parameter
