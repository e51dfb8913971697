"""Observability rules: resolution, correlation and condition number (closed-form designs)."""

from __future__ import annotations

import numpy as np
import pytest

from kinematic_monitor.core.calibration import fitting
from kinematic_monitor.core.calibration.observability import (
    FitContext,
    Resolution,
    from_fit,
    se_reason,
)

CTX = FitContext(Resolution(), fitting.Boot(np.random.default_rng(0), 0, 0), 0.99, 1.0e4)


def fit(X: np.ndarray, y: np.ndarray) -> fitting.Fit:
    return fitting.lsq(X, y, np.zeros(len(y), int), CTX.boot)


def test_well_determined_coefficient_is_observable() -> None:
    rng = np.random.default_rng(1)
    x = rng.uniform(-1, 1, 1000)
    f = fit(np.column_stack([x, np.ones_like(x)]), 0.01 * x + rng.normal(0, 1e-3, 1000))
    assert CTX.reason(f, 0, 1e-3, "rad", ["a", "b"]) == ""
    e = from_fit("vehicle.x", "rad", 0.5, f, 0, "")
    assert e.observable and e.value == e.fitted == pytest.approx(0.01, abs=1e-4)


def test_standard_error_above_the_resolution() -> None:
    rng = np.random.default_rng(2)
    x = rng.uniform(-1, 1, 100)
    f = fit(x[:, None], rng.normal(0, 1.0, 100))
    # OLS slope standard error sigma / sqrt(sum x^2) ~ 1 / sqrt(100 / 3) = 0.17 [C]
    why = CTX.reason(f, 0, 0.01, "m", ["a"])
    assert why.startswith("standard error 0.1") and "exceeds the resolution 0.01 m" in why
    e = from_fit("vehicle.x", "m", 0.5, f, 0, why)
    assert not e.observable and e.value == 0.5 and e.fitted == pytest.approx(float(f.beta[0]))


def test_correlated_columns_are_named() -> None:
    rng = np.random.default_rng(3)
    x = rng.uniform(1.0, 1.001, 10000)  # almost constant: collinear with the offset column
    f = fit(np.column_stack([x, np.ones_like(x)]), 2 * x + 1)
    why = CTX.reason(f, 0, 1e9, "", ["slope", "offset"])
    assert why.startswith("correlation -1.000 with offset (limit 0.99)")


def test_condition_number_limit() -> None:
    rng = np.random.default_rng(4)
    x = rng.normal(size=(1000, 2))
    x[:, 1] = x[:, 0] + 1e-5 * x[:, 1]
    f = fit(x, x[:, 0])
    loose = FitContext(CTX.resolution, CTX.boot, 1.0, 1.0e4)  # correlation rule off
    assert loose.reason(f, 0, 1e9, "", ["a", "b"]).startswith("condition number")


def test_transform_scales_value_and_errors() -> None:
    rng = np.random.default_rng(5)
    x = rng.uniform(-1, 1, 500)
    f = fit(x[:, None], 1.05 * x + rng.normal(0, 0.01, 500))
    e = from_fit("vehicle.steering_ratio", "-", 14.0, f, 0, "", transform=14.0)
    assert e.value == pytest.approx(14.0 * 1.05, rel=1e-3)
    assert e.se_fit == pytest.approx(14.0 * float(f.se()[0]))


def test_derived_error_reason() -> None:
    assert se_reason(1e-4, 2e-3, "rad") == ""
    assert se_reason(3e-3, 2e-3, "rad") == ("standard error 0.003 rad exceeds the resolution "
                                            "0.002 rad")
