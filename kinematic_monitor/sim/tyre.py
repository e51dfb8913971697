"""Tyre forces: Pacejka Magic Formula with a normalised-slip combined-slip rule.

Pure slip (Pacejka, *Tire and Vehicle Dynamics*, 3rd ed., 2012):

    y(x) = D sin(C atan(B x - E (B x - atan(B x))))

with ``x`` the slip angle alpha [rad] (lateral) or the slip ratio kappa [-] (longitudinal),
``D = mu * F_z`` (peak force) and ``B*C*D`` the slope at zero slip. We parameterise the tyre
by its slip stiffness *per unit load* (``c = BCD / F_z``), so ``B = c / (C * mu)``: the
cornering and slip stiffness stay the same on a slippery road while the peak force drops
and the peak moves to smaller slip (as CHECK_SOURCES notes: peak-grip slip is lower on snow).

Sign conventions (ISO 8855 / Pacejka): kappa = (Omega R_e - V_x) / |V_x|, positive when
driving; a positive slip angle alpha (wheel heading left of its velocity) gives a positive
(leftward) lateral force.

Combined slip: the normalised-slip ("friction ellipse in slip space") rule. With the
pure-slip peak positions kappa_p and alpha_p, s_x = kappa/kappa_p, s_y = alpha/alpha_p and
s = hypot(s_x, s_y); then F_x = (s_x/s) F_x0(s kappa_p) and F_y = (s_y/s) F_y0(s alpha_p).
The resultant never exceeds the peak, the force points along the slip direction, and the
rule reduces to pure slip when either slip is zero. This is the simplified similarity
approach described by Pacejka (2012, ch. 4, combined slip; section number from memory).

Default coefficients (invented tyre, typical passenger-car shape): C = 1.3 lateral and
1.65 longitudinal (the typical shape factors of a published coefficient set, as listed in
CHECK_SOURCES); E = -0.2 lateral and 0.6 longitudinal are our own choice (E < 1 keeps the
curve single-peaked; a locked wheel then keeps about 75 % of the peak force).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


def magic_formula(x: float, B: float, C: float, D: float, E: float) -> float:
    """Pacejka Magic Formula y = D sin(C atan(Bx - E(Bx - atan(Bx)))) (Pacejka 2012)."""
    bx = B * x
    return D * math.sin(C * math.atan(bx - E * (bx - math.atan(bx))))


def peak_slip(B: float, C: float, E: float) -> float:
    """Slip x > 0 at which the Magic Formula peaks (requires 1 < C < 2 and E < 1).

    The peak is where C*atan(phi) = pi/2 with phi = Bx - E(Bx - atan(Bx)); phi(x) is
    monotonic for E < 1, so bisection on x is exact to float precision.
    """
    if not (1.0 < C < 2.0):
        raise ValueError(f"shape factor C={C!r} must be in (1, 2) for a peaked curve")
    if not E < 1.0:
        raise ValueError(f"curvature factor E={E!r} must be < 1")
    if not B > 0.0:
        raise ValueError(f"stiffness factor B={B!r} must be > 0")
    target = math.tan(math.pi / (2.0 * C))
    lo, hi = 0.0, 1.0 / B
    while (B * hi - E * (B * hi - math.atan(B * hi))) < target:
        hi *= 2.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        bx = B * mid
        if bx - E * (bx - math.atan(bx)) < target:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-15 * hi:
            break
    return 0.5 * (lo + hi)


@dataclass(frozen=True)
class TyreCoefficients:
    """Magic Formula coefficients of one axle's tyres (lateral: slip angle; longitudinal: kappa).

    ``c_alpha`` [1/rad]: cornering stiffness per unit vertical load (C_alpha / F_z).
    ``c_kappa`` [-]: longitudinal slip stiffness per unit vertical load (C_kappa / F_z).
    ``C_y``, ``E_y``, ``C_x``, ``E_x``: Magic Formula shape and curvature factors.
    """

    c_alpha: float = 10.0
    c_kappa: float = 18.0
    C_y: float = 1.3
    E_y: float = -0.2
    C_x: float = 1.65
    E_x: float = 0.6

    def __post_init__(self) -> None:
        for name in ("c_alpha", "c_kappa"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0.0):
                raise ValueError(f"tyre {name}={v!r} must be a positive finite number")
        for name in ("C_y", "C_x"):
            v = getattr(self, name)
            if not (1.0 < v < 2.0):
                raise ValueError(f"tyre {name}={v!r} must be in (1, 2)")
        for name in ("E_y", "E_x"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v < 1.0):
                raise ValueError(f"tyre {name}={v!r} must be finite and < 1")

    def lateral_b(self, mu: float) -> float:
        """Stiffness factor B_y [1/rad] on a road with peak friction ``mu``."""
        return self.c_alpha / (self.C_y * mu)

    def longitudinal_b(self, mu: float) -> float:
        """Stiffness factor B_x [-] on a road with peak friction ``mu``."""
        return self.c_kappa / (self.C_x * mu)


@dataclass(frozen=True)
class TyreOnRoad:
    """Per-road-friction constants for fast force evaluation (one axle, one mu)."""

    mu: float
    Bx: float
    Cx: float
    Ex: float
    By: float
    Cy: float
    Ey: float
    kappa_peak: float
    alpha_peak: float

    @classmethod
    def make(cls, coef: TyreCoefficients, mu: float) -> TyreOnRoad:
        """Pre-compute B factors and peak slips for road friction ``mu`` (> 0)."""
        if not (math.isfinite(mu) and mu > 0.0):
            raise ValueError(f"road friction mu={mu!r} must be a positive finite number")
        Bx = coef.longitudinal_b(mu)
        By = coef.lateral_b(mu)
        return cls(
            mu=mu,
            Bx=Bx,
            Cx=coef.C_x,
            Ex=coef.E_x,
            By=By,
            Cy=coef.C_y,
            Ey=coef.E_y,
            kappa_peak=peak_slip(Bx, coef.C_x, coef.E_x),
            alpha_peak=peak_slip(By, coef.C_y, coef.E_y),
        )


def pure_forces(kappa: float, alpha: float, fz: float, t: TyreOnRoad) -> tuple[float, float]:
    """Pure-slip longitudinal and lateral forces [N] (no interaction) for load ``fz`` [N]."""
    d = t.mu * fz
    return (
        magic_formula(kappa, t.Bx, t.Cx, d, t.Ex),
        magic_formula(alpha, t.By, t.Cy, d, t.Ey),
    )


def combined_forces(kappa: float, alpha: float, fz: float, t: TyreOnRoad) -> tuple[float, float]:
    """Longitudinal and lateral tyre forces [N] under combined slip (normalised-slip rule).

    ``kappa`` [-] slip ratio (ISO 8855 sign), ``alpha`` [rad] slip angle, ``fz`` [N] load.
    """
    if fz <= 0.0:
        return 0.0, 0.0
    sx = kappa / t.kappa_peak
    sy = alpha / t.alpha_peak
    s = math.sqrt(sx * sx + sy * sy)
    if s < 1e-12:
        return 0.0, 0.0
    d = t.mu * fz
    bx = t.Bx * s * t.kappa_peak
    fx0 = d * math.sin(t.Cx * math.atan(bx - t.Ex * (bx - math.atan(bx))))
    by = t.By * s * t.alpha_peak
    fy0 = d * math.sin(t.Cy * math.atan(by - t.Ey * (by - math.atan(by))))
    return fx0 * sx / s, fy0 * sy / s
