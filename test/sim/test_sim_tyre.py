"""Tyre model checks against the Magic Formula evaluated by hand and Burckhardt's curve."""

from __future__ import annotations

import math

import pytest

from kinematic_monitor.sim.scenarios import SURFACE_MU, burckhardt_peak
from kinematic_monitor.sim.tyre import (
    TyreCoefficients,
    TyreOnRoad,
    combined_forces,
    magic_formula,
    peak_slip,
    pure_forces,
)

# A stated coefficient set for the hand checks (our own numbers).
B, C, D, E = 10.0, 1.65, 4000.0, 0.0


def test_magic_formula_matches_hand_evaluation():
    # Pacejka 2012: y = D sin(C atan(Bx - E(Bx - atan Bx))); at x = 0.05, E = 0:
    # Bx = 0.5, atan(0.5) = 0.463647609, C*atan = 0.765018555, sin = 0.692550384
    # -> y = 2770.2015 (evaluated independently with `bc -l`, 12 digits)
    assert magic_formula(0.05, B, C, D, E) == pytest.approx(2770.2015, abs=1e-3)
    # odd symmetry of the formula
    assert magic_formula(-0.05, B, C, D, E) == pytest.approx(-2770.2015, abs=1e-3)
    # with E = 0.5 at x = 0.2: Bx = 2, phi = 2 - 0.5 (2 - atan 2) = 1.553574359
    # -> y = 3988.0387 (evaluated independently with `bc -l`)
    assert magic_formula(0.2, B, C, D, 0.5) == pytest.approx(3988.0387, abs=1e-3)


def test_magic_formula_peak_is_d_at_x_peak():
    # Pacejka 2012: the peak value is D, reached where C*atan(phi) = pi/2; for E = 0 this is
    # x_peak = tan(pi/(2C)) / B (derived from the formula).
    x_peak = math.tan(math.pi / (2 * C)) / B
    assert peak_slip(B, C, E) == pytest.approx(x_peak, rel=1e-9)
    assert magic_formula(x_peak, B, C, D, E) == pytest.approx(D, rel=1e-12)
    # and it is the maximum: neighbours are lower
    for dx in (-1e-3, 1e-3):
        assert magic_formula(x_peak + dx, B, C, D, E) < D
    # with E != 0 the peak value is still D
    xp = peak_slip(B, 1.3, -0.2)
    assert magic_formula(xp, B, 1.3, D, -0.2) == pytest.approx(D, rel=1e-12)


def test_slope_at_zero_is_bcd():
    # Pacejka 2012: B*C*D is the slope at zero slip (central difference, any E)
    h = 1e-7
    for e in (0.0, 0.6, -0.2):
        slope = (magic_formula(h, B, C, D, e) - magic_formula(-h, B, C, D, e)) / (2 * h)
        assert slope == pytest.approx(B * C * D, rel=1e-6)


def test_stiffness_per_load_is_kept_when_mu_changes():
    # our parameterisation: B = c / (C mu), so BCD = c Fz on any road (documented in tyre.py)
    coef = TyreCoefficients(c_alpha=9.0, c_kappa=18.0)
    fz = 4000.0
    for mu in (1.0, 0.5, 0.1):
        t = TyreOnRoad.make(coef, mu)
        assert t.By * t.Cy * mu * fz == pytest.approx(9.0 * fz)
        h = 1e-7
        fy = (pure_forces(0.0, h, fz, t)[1] - pure_forces(0.0, -h, fz, t)[1]) / (2 * h)
        assert fy == pytest.approx(9.0 * fz, rel=1e-6)
    # peak slip shrinks with mu (CHECK_SOURCES: peak-grip slip lower on snow)
    assert TyreOnRoad.make(coef, 0.2).kappa_peak < TyreOnRoad.make(coef, 1.0).kappa_peak


def test_combined_slip_reduces_to_pure_and_respects_the_peak():
    t = TyreOnRoad.make(TyreCoefficients(), 1.0)
    fz = 4000.0
    # pure longitudinal / lateral: identical to the Magic Formula (definition of the rule)
    fx, fy = combined_forces(0.05, 0.0, fz, t)
    assert fx == pytest.approx(pure_forces(0.05, 0.0, fz, t)[0], rel=1e-12)
    assert fy == 0.0
    fx, fy = combined_forces(0.0, -0.04, fz, t)
    assert fy == pytest.approx(pure_forces(0.0, -0.04, fz, t)[1], rel=1e-12)
    # friction circle: the resultant never exceeds mu*Fz (Kamm circle, common textbook bound)
    for k in (-1.0, -0.2, 0.05, 0.3, 1.5):
        for a in (-0.3, -0.05, 0.02, 0.2):
            fx, fy = combined_forces(k, a, fz, t)
            assert math.hypot(fx, fy) <= 1.0 * fz * (1 + 1e-12)
            # force points along the slip (signs follow ISO 8855 slip signs)
            assert math.copysign(1, fx) == math.copysign(1, k)
            assert math.copysign(1, fy) == math.copysign(1, a)
    # a spinning wheel loses lateral force
    assert abs(combined_forces(0.5, 0.05, fz, t)[1]) < 0.5 * abs(
        combined_forces(0, 0.05, fz, t)[1]
    )
    assert combined_forces(0.1, 0.1, 0.0, t) == (0.0, 0.0)


def test_locked_wheel_keeps_most_of_peak():
    # documented choice in tyre.py: a locked wheel (kappa = -1) keeps ~75 % of peak force
    t = TyreOnRoad.make(TyreCoefficients(), 1.0)
    fx = pure_forces(-1.0, 0.0, 4000.0, t)[0]
    assert -0.85 * 4000 < fx < -0.65 * 4000


def test_bad_coefficients_are_named():
    with pytest.raises(ValueError, match="C_y"):
        TyreCoefficients(C_y=2.5)
    with pytest.raises(ValueError, match="c_alpha"):
        TyreCoefficients(c_alpha=float("nan"))
    with pytest.raises(ValueError, match="mu"):
        TyreOnRoad.make(TyreCoefficients(), 0.0)
    with pytest.raises(ValueError, match="E="):
        peak_slip(10.0, 1.5, 1.2)


def test_surface_table_uses_burckhardt_peaks():
    # CHECK_SOURCES [C]: Burckhardt dry asphalt (1.2801, 23.99, 0.52) peaks at 1.17, s ~ 0.17
    mu, s = burckhardt_peak(1.2801, 23.99, 0.52)
    assert mu == pytest.approx(1.17, abs=0.005)
    assert s == pytest.approx(0.17, abs=0.005)
    assert SURFACE_MU["dry"] == pytest.approx(1.17, abs=0.005)
    # ordering dry > wet > gravel > snow > ice (Burckhardt [M] and Noon sliding for gravel)
    order = [SURFACE_MU[k] for k in ("dry", "wet", "gravel", "snow", "ice")]
    assert order == sorted(order, reverse=True)
    # ice from Burckhardt (0.05, 306.39, 0) [from memory]: the curve tends to c1 = 0.05
    assert SURFACE_MU["ice"] == pytest.approx(0.05, abs=1e-3)
