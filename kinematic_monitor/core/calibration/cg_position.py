"""l_r, the CG's distance ahead of the rear axle, from the lateral velocity at the CG.

The rear axle does not slide sideways in kinematic motion, so ``vy_cg = l_r * r``
(rigid-body kinematics; Rajamani 2012, kinematic model); the rear tyres' slip angle adds
``-c * a_y * vx`` (fitted as a nuisance).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.fitting import lsq
from kinematic_monitor.core.calibration.observability import FitContext, from_fit
from kinematic_monitor.core.calibration.results import Estimate, kept
from kinematic_monitor.core.model import VehicleParams

NAME = "vehicle.cg_to_rear_axle"


def fit_cg_position(sub: Aligned, seg: np.ndarray, v: VehicleParams, wheelbase: float,
                    ctx: FitContext, fit_cg: bool) -> Estimate:
    """l_r [m] from ``vy_cg = l_r r - c a_y vx``; kept unless in (0, wheelbase)."""
    r, vy = sub.r, sub.vy
    if not (fit_cg and np.all(np.isfinite(vy)) and np.any(np.abs(r) > 0.0)):
        return kept(NAME, "m", v.cg_to_rear_axle,
                    "no lateral velocity in the localisation twist" if fit_cg else "not fitted")
    fit = lsq(np.column_stack([r, -sub.ay * sub.vx]), vy, seg, ctx.boot)
    reason = ctx.reason(fit, 0, ctx.resolution.cg_to_rear_axle, "m",
                        ["l_r", "rear slip-angle term"])
    e = from_fit(NAME, "m", v.cg_to_rear_axle, fit, 0, reason)
    if e.observable and not 0.0 < e.value < wheelbase:
        e = dataclasses.replace(e, value=e.prior, observable=False,
                                reason=f"fitted {e.value:.3f} m is outside (0, wheelbase)")
    return e
