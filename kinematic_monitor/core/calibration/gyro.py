"""Gyro bias, and whether it drifts, from the IMU yaw rate against the localisation's.

Measurement equation: ``w_imu - w_ref = b + d * tau + s * w_ref``, where ``w_ref`` is the
localisation yaw rate (its twist, else differenced yaw) and exactly 0 at standstill
(localisation speed and rear-wheel speed below ``standstill_speed``), ``b`` [rad/s] the bias
at the middle of each drive, ``d`` [rad/s^2] a linear drift over ``tau``, the time from that
middle, and ``s`` [-] the gyro's scale-factor error, a nuisance: without it a scale error
times the mean yaw rate of a drive that turns more one way than the other reads as bias.
On a steady circle bias and scale cannot be told apart (the correlation rule says so).
A heading integrated from the gyro drifts by ``b`` radians per second, so a heading check
must know ``b``; a drift that stands out from its standard
error says the bias wanders in the drive (e.g. warming up) and is best tracked online.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.fitting import Fit, lsq
from kinematic_monitor.core.calibration.observability import FitContext, from_fit
from kinematic_monitor.core.calibration.residuals import residual
from kinematic_monitor.core.calibration.results import Estimate, Residuals, kept
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.calibration.selection import standstill
from kinematic_monitor.core.model import VehicleParams

BIAS, DRIFT = "imu_gyro_bias", "imu_gyro_bias_drift"
BIAS_UNIT, DRIFT_UNIT = "rad/s", "rad/s^2"
DRIFT_Z = 3.0  # drift or scale error count as found beyond 3 SE (common practice, no source)
MIN_STANDSTILL = 5.0  # [s] of standstill for a standstill-only note (our choice)


@dataclass(frozen=True)
class GyroFit:
    """The gyro estimates and the IMU yaw-rate residual before and after."""

    estimates: dict[str, Estimate]
    residual: Residuals | None


def not_fitted(reason: str) -> GyroFit:
    """Both gyro estimates kept at 0 with ``reason``."""
    return GyroFit({BIAS: kept(BIAS, BIAS_UNIT, 0.0, reason),
                    DRIFT: kept(DRIFT, DRIFT_UNIT, 0.0, reason)}, None)


def _from_middle(sub: Aligned) -> np.ndarray:
    """tau [s]: each sample's time from the mean time of its drive's samples."""
    tau = np.empty(len(sub.t))
    for src in np.unique(sub.source):
        m = sub.source == src
        tau[m] = sub.t[m] - float(np.mean(sub.t[m]))
    return tau


def fit_gyro(sub: Aligned, seg: np.ndarray, v: VehicleParams, rules: SelectionRules,
             ctx: FitContext, notes: list[str]) -> GyroFit:
    """Bias and drift from the IMU samples ``sub`` (segments ``seg``)."""
    still = standstill(sub, v, rules)
    ref = np.where(still, 0.0, sub.loc_rate)
    y = sub.imu_rate - ref
    tau = _from_middle(sub)
    fit = lsq(np.column_stack([np.ones_like(tau), tau, ref]), y, seg, ctx.boot)
    labels = ["gyro bias", "gyro bias drift", "gyro scale error"]
    res = ctx.resolution
    est = {BIAS: from_fit(BIAS, BIAS_UNIT, 0.0, fit, 0,
                          ctx.reason(fit, 0, res.gyro_bias, BIAS_UNIT, labels)),
           DRIFT: from_fit(DRIFT, DRIFT_UNIT, 0.0, fit, 1,
                           ctx.reason(fit, 1, res.gyro_bias_drift, DRIFT_UNIT, labels))}
    notes.extend(_drift_note(est[DRIFT], float(np.ptp(tau))))
    notes.extend(_scale_note(fit))
    still_s = float(np.sum(sub.dt[still]))
    if still_s >= MIN_STANDSTILL:
        notes.append(_standstill_note(sub.imu_rate[still], still_s, est[BIAS]))
    return GyroFit(est, residual("yaw rate (IMU - localisation)", "rad/s", y, fit.resid))


def _scale_note(fit: Fit) -> list[str]:
    """A note when the gyro's scale-factor error stands out from its standard error."""
    s = float(fit.beta[2])
    se = max(float(fit.se()[2]), float(np.nan_to_num(fit.se_boot()[2])))
    if not (se > 0.0 and abs(s) > DRIFT_Z * se):
        return []
    return [f"the gyro reads yaw rate {100 * s:+.2f} % (+-{100 * se:.2f} %) against the "
            "localisation (scale-factor error, fitted with the bias)"]


def _drift_note(e: Estimate, span: float) -> list[str]:
    if not e.observable:
        return []
    unc = e.uncertainty
    z = e.fitted / unc if unc > 0.0 else (0.0 if e.fitted == 0.0 else math.inf)
    per_min = math.degrees(e.fitted) * 60.0
    if abs(z) > DRIFT_Z:
        return [f"the gyro bias drifts: {per_min:+.4f} deg/s per minute ({z:+.1f} standard "
                f"errors) over {span:.0f} s; estimate it online rather than set it once"]
    return [f"no gyro bias drift found: {per_min:+.4f} deg/s per minute is within "
            f"{DRIFT_Z:g} standard errors over {span:.0f} s"]


def _standstill_note(rate: np.ndarray, seconds: float, bias: Estimate) -> str:
    mean = float(np.mean(rate))
    return (f"gyro at standstill ({seconds:.0f} s): mean {mean:+.5f} rad/s "
            f"({math.degrees(mean):+.3f} deg/s) against {bias.fitted:+.5f} rad/s over all "
            "samples")
