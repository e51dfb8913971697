"""Residuals of the kinematic model over the selected samples, before and after calibration."""

from __future__ import annotations

import math

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.results import Estimate, Residuals
from kinematic_monitor.core.calibration.steering import OFFSET, SteeringFit
from kinematic_monitor.core.calibration.understeer import NAME as UNDERSTEER
from kinematic_monitor.core.calibration.wheels import REAR
from kinematic_monitor.core.model import VehicleParams


def kinematic_rate(delta: np.ndarray, vx: np.ndarray, L: float, K: float,
                   ay: np.ndarray) -> np.ndarray:
    """Rear-axle kinematic yaw rate vx tan(delta - K a_y) / L [rad/s]."""
    return np.asarray(vx * np.tan(delta - K * ay) / L)


def residual(name: str, unit: str, before: np.ndarray, after: np.ndarray) -> Residuals:
    """Mean and RMS of ``before`` and ``after``."""
    return Residuals(name, unit, float(np.mean(before)), float(np.sqrt(np.mean(before**2))),
                     float(np.mean(after)), float(np.sqrt(np.mean(after**2))))


def kinematic_residuals(sub: Aligned, v: VehicleParams, est: dict[str, Estimate],
                        steering: SteeringFit) -> list[Residuals]:
    """Yaw rate (measured - kinematic) and speed (localisation - rear wheels)."""
    ek = est[UNDERSTEER]
    k_nuis = steering.understeer
    K_after = ek.value if ek.observable else (k_nuis if math.isfinite(k_nuis) else 0.0)
    ay, vx, r = sub.ay, sub.vx, sub.r
    rate_before = kinematic_rate(sub.steer + v.steering_offset, vx, v.wheelbase,
                                 v.understeer_gradient, ay)
    rate_after = kinematic_rate(sub.steer / steering.factor + est[OFFSET].value, vx,
                                steering.wheelbase, K_after, ay)
    speed_before = v.wheel_radius * v.wheel_speed_scale * sub.w_rear
    speed_after = v.wheel_radius * est[REAR].value * sub.w_rear
    return [
        residual("yaw rate (measured - kinematic)", "rad/s", r - rate_before, r - rate_after),
        residual("speed (localisation - rear wheels)", "m/s", vx - speed_before,
                 vx - speed_after),
    ]
