"""Observability rules: when a fitted quantity is determined by the data, and why not.

A quantity is *not observable* when its standard error (the larger of fit and bootstrap)
exceeds its resolution, its correlation with another fitted quantity exceeds
``max_correlation`` or the column-scaled design's condition number exceeds
``max_condition``; it then keeps its input value and the reason is reported.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from kinematic_monitor.core.calibration.fitting import Boot, Fit
from kinematic_monitor.core.calibration.results import Estimate


@dataclass(frozen=True)
class Resolution:
    """Largest standard error at which a quantity still counts as observable.

    Our choices (common practice, no source): a tenth of the effect each calibration is
    meant to catch (1 deg offset, 2 % radius, 1 deg IMU yaw, the 0.001 rad/s gyro bias the
    heading check starts to see), a few centimetres for lengths.
    """

    steering_offset: float = 0.002  # [rad] ~0.1 deg
    wheel_speed_scale: float = 0.002  # [-] (also each wheel's own scale)
    steering_ratio: float = 0.02  # [relative]
    wheelbase: float = 0.02  # [m]
    cg_to_rear_axle: float = 0.05  # [m]
    understeer_gradient: float = 3.0e-4  # [rad/(m/s^2)] ~0.17 deg/g
    gyro_bias: float = 1.0e-4  # [rad/s] ~0.006 deg/s
    gyro_bias_drift: float = 1.0e-6  # [rad/s^2] 0.06 mrad/s per minute
    imu_yaw: float = 0.002  # [rad] ~0.1 deg


@dataclass(frozen=True)
class FitContext:
    """What every fit of one calibration shares: resolutions, bootstrap, limits."""

    resolution: Resolution
    boot: Boot
    max_correlation: float
    max_condition: float

    def reason(self, fit: Fit, i: int, limit: float, unit: str,
               labels: Sequence[str]) -> str:
        """'' when coefficient i of the fit is observable, else why not."""
        se = max(float(fit.se()[i]), float(fit.se_boot()[i]) if len(fit.boot) > 1 else 0.0)
        if not math.isfinite(se) or se > limit:
            return (f"standard error {se:.3g} {unit} exceeds the resolution {limit:.3g} {unit} "
                    f"(condition number {fit.cond:.3g})")
        c = np.abs(np.nan_to_num(fit.corr[i]))
        c[i] = 0.0
        j = int(np.argmax(c)) if len(c) else 0
        if len(c) > 1 and c[j] > self.max_correlation:
            return (f"correlation {fit.corr[i, j]:+.3f} with {labels[j]} "
                    f"(limit {self.max_correlation}); condition number {fit.cond:.3g}")
        if fit.cond > self.max_condition:
            return f"condition number {fit.cond:.3g} exceeds {self.max_condition:.3g}"
        return ""


def from_fit(name: str, unit: str, prior: float, fit: Fit, i: int, reason: str,
             transform: float = 1.0) -> Estimate:
    """Coefficient i of ``fit`` times ``transform`` as an estimate (observable if no reason)."""
    val = float(fit.beta[i]) * transform
    se = float(fit.se()[i]) * abs(transform)
    sb = float(fit.se_boot()[i]) * abs(transform)
    ok = reason == ""
    return Estimate(name, unit, prior, val if ok else prior, se, sb, ok, reason, val)


def se_reason(se: float, limit: float, unit: str) -> str:
    """'' when a derived quantity's standard error is within its resolution, else why not."""
    if se <= limit:
        return ""
    return f"standard error {se:.3g} {unit} exceeds the resolution {limit:.3g} {unit}"
