"""Signal helpers against scipy.ndimage and closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import uniform_filter1d

from kinematic_monitor.core.calibration import signals


@pytest.mark.parametrize("n", [3, 4, 5, 10, 25])
def test_moving_average_is_scipy_uniform_filter(n: int) -> None:
    # scipy.ndimage.uniform_filter1d, mode 'nearest' (ends held), default origin: the same
    # window for odd and even lengths
    x = np.random.default_rng(n).normal(size=60)
    np.testing.assert_allclose(signals.smooth(x, n), uniform_filter1d(x, n, mode="nearest"),
                               rtol=0, atol=1e-12)


def test_moving_average_short_or_unit_window_is_a_copy() -> None:
    x = np.array([1.0, 2.0, 3.0])
    for n in (1, 5):
        out = signals.smooth(x, n)
        np.testing.assert_array_equal(out, x)
        assert out is not x


def test_nan_aware_average_keeps_nan_and_a_constant() -> None:
    # the mean of the finite neighbours of a constant is that constant (closed form)
    x = np.full(40, 2.5)
    x[[3, 10, 11, 30]] = np.nan
    out = signals.smooth_nan(x, 5)
    assert np.all(np.isnan(out[[3, 10, 11, 30]]))
    ok = np.isfinite(x)
    np.testing.assert_allclose(out[ok], 2.5, rtol=0, atol=1e-15)


def test_derivative_of_a_quadratic_is_exact_inside() -> None:
    # a centred moving average of t^2 adds a constant (the window's variance), and central
    # differences are exact for quadratics: d/dt = 2 t away from the ends [C]
    t = np.arange(0.0, 5.0, 0.02)
    d = signals.derivative(t, t**2, 5)
    np.testing.assert_allclose(d[5:-5], 2.0 * t[5:-5], rtol=0, atol=1e-9)


def test_interpolation_marks_gaps_and_drops_nan() -> None:
    tc = np.array([0.0, 0.1, 0.2, 1.0, 1.1])
    xc = np.array([0.0, 1.0, np.nan, 3.0, 4.0])
    ts = np.array([-0.05, 0.05, 0.15, 0.5, 1.0, 1.05, 1.2])
    x, ok = signals.interp_with_gap(ts, tc, xc, max_gap=0.2)
    good = np.isfinite(xc)
    np.testing.assert_allclose(x, np.interp(ts, tc[good], xc[good]))  # numpy's interpolation
    # before the first / after the last sample, or between neighbours 0.9 s apart (the NaN
    # at 0.2 s is dropped): not ok;
    # an exact stamp is ok
    assert ok.tolist() == [False, True, False, False, True, True, False]
    out = signals.interp_or_nan(ts, tc, xc, 0.2)
    assert np.isnan(out[~ok]).all() and np.array_equal(out[ok], x[ok])


def test_interpolation_without_data() -> None:
    x, ok = signals.interp_with_gap(np.array([1.0, 2.0]), np.zeros(0), np.zeros(0), 0.2)
    assert np.isnan(x).all() and not ok.any()
    x, ok = signals.interp_with_gap(np.array([1.0]), np.array([1.0]), np.array([np.nan]), 0.2)
    assert np.isnan(x).all() and not ok.any()
