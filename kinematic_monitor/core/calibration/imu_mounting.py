"""IMU yaw misalignment from its accelerations against those implied by the twist.

The IMU's axes are yawed by ``phi`` (counter-clockwise about z, REP 103) against
``base_link``, and it sits ``x`` [m] ahead of the CG. Rigid-body kinematics give the
acceleration of its point in body axes, ``a_P = (a_x - x r^2, a_y + x dr/dt)``
(the tangential and centripetal terms of a point on a rotating body), and the IMU measures
it rotated by ``-phi``:

    ax_m = g_x a_Px + sin(phi) a_Py + b_x,    ay_m = -sin(phi) a_Px + g_y a_Py + b_y.

Fitted by least squares on both rows at once, linear in ``(sin phi, g_x, g_y, x, b_x,
b_y)`` (the products of ``x`` with ``g - 1`` and ``sin phi`` are second order and left
out). The gains absorb ``cos phi``, accelerometer scale and the gravity that body pitch and
roll add in proportion to a_x and a_y; the biases absorb accelerometer bias and a fixed
mounting tilt (a 1 deg tilt adds g sin 1 deg = 0.17 m/s^2). ``a_x, a_y`` are from the
localisation twist (:func:`kinematic_monitor.core.calibration.alignment.align`).

The lever arm is a nuisance only, not reported: a time offset ``dt`` between the IMU's
stamps and the localisation's (an IMU's own low-pass filter delays it) shows as
``a_y(t - dt) ~ a_y - dt v dr/dt``, the same column as ``x dr/dt``, so the fitted ``x`` is
``x - v dt`` and no lever arm. Gains far from 1 mean the IMU accelerations do not follow
the vehicle's (wrong axes, a dead accelerometer): the yaw is then not observable.
"""

from __future__ import annotations

import math

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.fitting import Fit, lsq
from kinematic_monitor.core.calibration.observability import FitContext
from kinematic_monitor.core.calibration.results import Estimate, kept

YAW = "imu_yaw_misalignment"
LABELS = ["IMU yaw", "x gain", "y gain", "lever arm", "x bias", "y bias"]
GAINS = (0.8, 1.25)  # plausible accelerometer gains: roll and pitch add ~10 % (our choice)


def not_fitted(reason: str) -> Estimate:
    """The mounting yaw kept at 0 with ``reason``."""
    return kept(YAW, "rad", 0.0, reason)


def _rows(sub: Aligned) -> tuple[np.ndarray, np.ndarray]:
    """Design (2n x 6) and left-hand side: the x rows, then the y rows."""
    ax, ay = sub.loc_ax, sub.loc_ay
    one, zero = np.ones_like(ax), np.zeros_like(ax)
    x_rows = np.column_stack([ay, ax, zero, -sub.loc_yaw_rate_sq, one, zero])
    y_rows = np.column_stack([-ax, zero, ay, sub.loc_yaw_accel, zero, one])
    return np.vstack([x_rows, y_rows]), np.concatenate([sub.imu_ax, sub.imu_ay])


def fit_imu_mounting(sub: Aligned, seg: np.ndarray, ctx: FitContext) -> Estimate:
    """IMU yaw [rad] from the samples ``sub`` with IMU accelerations (segments ``seg``)."""
    X, y = _rows(sub)
    fit = lsq(X, y, np.concatenate([seg, seg]), ctx.boot)
    reason = ctx.reason(fit, 0, ctx.resolution.imu_yaw, "rad", LABELS)
    g_x, g_y = float(fit.beta[1]), float(fit.beta[2])
    if not reason and not (GAINS[0] <= g_x <= GAINS[1] and GAINS[0] <= g_y <= GAINS[1]):
        reason = (f"the IMU accelerations do not follow the localisation's (gains x {g_x:.3g}, "
                  f"y {g_y:.3g}; expected {GAINS[0]:g} to {GAINS[1]:g})")
    return _angle(fit, reason)


def _angle(fit: Fit, reason: str) -> Estimate:
    """phi = asin(sin phi) with the standard errors scaled by d phi / d sin phi."""
    s = float(np.clip(fit.beta[0], -1.0, 1.0))
    gain = 1.0 / max(math.sqrt(1.0 - s * s), 1e-9)
    phi = math.asin(s)
    se, sb = float(fit.se()[0]) * gain, float(fit.se_boot()[0]) * gain
    ok = reason == ""
    return Estimate(YAW, "rad", 0.0, phi if ok else 0.0, se, sb, ok, reason, phi)
