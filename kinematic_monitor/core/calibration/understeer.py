"""The understeer gradient K from steady-state cornering.

ISO 4138 steady-state circular test (constant radius or slow ramp): on the steady samples
up to ``k_max_lateral_accel``, ``delta_m + offset - atan(L kappa) = K a_y + c`` (Gillespie
1992, ch. 6: ``delta = L/R + K a_y``; SAE J670 / ISO 8855 sign, positive for understeer).
"""

from __future__ import annotations

import math

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.fitting import design, lag_column, lsq
from kinematic_monitor.core.calibration.observability import FitContext, from_fit
from kinematic_monitor.core.calibration.results import Estimate, kept
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.model import GRAVITY, VehicleParams

NAME, UNIT = "vehicle.understeer_gradient", "rad/(m/s^2)"


def per_g_degrees(k: float) -> float:
    """Understeer gradient in deg/g from rad/(m/s^2)."""
    return math.degrees(k) * GRAVITY


def fit_understeer(sub: Aligned, seg: np.ndarray, v: VehicleParams, offset: float,
                   factor: float, wheelbase: float, ctx: FitContext, rules: SelectionRules,
                   notes: list[str]) -> Estimate:
    """K from the steady samples ``sub`` with the steering offset and ratio factor applied."""
    if len(sub.t) == 0:
        return kept(NAME, UNIT, v.understeer_gradient, "no steady-state driving")
    vx, r = sub.vx, sub.r
    ay = vx * r
    delta = sub.steer / factor + offset
    y = delta - np.arctan(wheelbase * r / vx)
    spread = float(np.std(ay))
    rdot = lag_column(sub.yaw_accel)
    fit = lsq(design([ay], rdot, np.ones_like(ay)), y, seg, ctx.boot)
    if spread < rules.min_k_spread:
        reason = (f"lateral acceleration spread {spread:.2f} m/s^2 below "
                  f"{rules.min_k_spread:g} m/s^2: drive a constant-radius circle with rising "
                  "speed or a slow ramp steer (ISO 4138)")
    else:
        reason = ctx.reason(fit, 0, ctx.resolution.understeer_gradient, UNIT,
                            ["understeer gradient",
                             *(() if rdot is None else ("yaw-lag term",)),
                             "steering offset residual"])
    e = from_fit(NAME, UNIT, v.understeer_gradient, fit, 0, reason)
    if e.observable and (np.all(ay > 0) or np.all(ay < 0)):
        notes.append("understeer gradient from one turn direction only "
                     "(ISO 4138 asks for both directions)")
    return e
