"""Wheel-speed scales (effective rolling radius / ``vehicle.wheel_radius``): axles and wheels.

Each wheel centre moves with the rigid body: at body position (p_x, p_y) from the CG its
velocity is ``(vx - r p_y, vy_cg + r p_x)`` (planar rigid-body kinematics, REP 103 axes).
A rear wheel rolls along body x, so its ground speed is the x component ``vx -+ r w/2``
(left -, right +); a front wheel is steered to roll along its velocity, so its ground speed
is the magnitude ``|(vx -+ r w/2, vy_cg + r l_f)|`` (the Ackermann ICR geometry without
using the steering angle). The scale of a wheel or axle is the least-squares slope through
zero of ground speed on ``R * w`` (``R`` = ``vehicle.wheel_radius``, ``w`` the measured
angular speed), so a wheel's effective rolling radius is ``R * scale``.
``vehicle.wheel_speed_scale`` is written from the rear axle, ``vx = s_r R (w_rl + w_rr)/2``
(the axle the monitor uses).
"""

from __future__ import annotations

import math

import numpy as np

from kinematic_monitor.core.calibration.alignment import WHEEL_ORDER, Aligned
from kinematic_monitor.core.calibration.fitting import lsq
from kinematic_monitor.core.calibration.observability import FitContext, from_fit
from kinematic_monitor.core.calibration.results import CalibrationError, Estimate
from kinematic_monitor.core.model import VehicleParams

REAR = "vehicle.wheel_speed_scale"
FRONT = "front_wheel_speed_scale"
#: report-only names of the per-wheel scales, in WHEEL_ORDER
PER_WHEEL = tuple(f"{w}_wheel_speed_scale" for w in WHEEL_ORDER)
MIN_SAMPLES = 10  # fewer samples with a wheel speed: that wheel is not fitted


def ground_speeds(sub: Aligned, v: VehicleParams, lf: float) -> np.ndarray:
    """Each wheel centre's rolling speed over ground [m/s], shape (n, 4) in WHEEL_ORDER."""
    vx, vy, r = sub.vx, sub.vy, sub.r
    half = 0.5 * v.track_width
    g_fl = np.hypot(vx - r * half, vy + r * lf)
    g_fr = np.hypot(vx + r * half, vy + r * lf)
    return np.column_stack([g_fl, g_fr, vx - r * half, vx + r * half])


def _scale(name: str, omega: np.ndarray, ground: np.ndarray, seg: np.ndarray,
           v: VehicleParams, ctx: FitContext) -> Estimate | None:
    """ground = s R omega through zero over the samples with a wheel speed (None if few)."""
    ok = np.isfinite(omega)
    if np.sum(ok) <= MIN_SAMPLES:
        return None
    fit = lsq((v.wheel_radius * omega[ok])[:, None], ground[ok], seg[ok], ctx.boot)
    reason = ctx.reason(fit, 0, ctx.resolution.wheel_speed_scale, "", ["scale"])
    return from_fit(name, "-", v.wheel_speed_scale, fit, 0, reason)


def fit_axles(sub: Aligned, seg: np.ndarray, v: VehicleParams, wheelbase: float,
              ctx: FitContext, notes: list[str]) -> dict[str, Estimate]:
    """Rear-axle scale (the parameter) and, with front wheel speeds, the front axle's."""
    rear = _scale(REAR, sub.w_rear, sub.vx, seg, v, ctx)
    if rear is None:
        raise CalibrationError("no rear wheel speeds among the selected samples")
    est = {REAR: rear}
    g = ground_speeds(sub, v, wheelbase - v.cg_to_rear_axle)
    front = _scale(FRONT, sub.w_front, 0.5 * (g[:, 0] + g[:, 1]), seg, v, ctx)
    if front is not None:
        est[FRONT] = front
        diff = front.value - rear.value
        if abs(diff) > 0.005:
            notes.append(f"front and rear wheel-speed scales differ by {100 * diff:+.2f} % "
                         "(tyre sizes or wear differ, or the driven axle slips); "
                         "vehicle.wheel_speed_scale is the rear axle's")
    return est


def fit_wheels(sub: Aligned, seg: np.ndarray, v: VehicleParams, wheelbase: float,
               ctx: FitContext, notes: list[str]) -> dict[str, Estimate]:
    """Each wheel's own scale (report-only) and a note where left and right differ."""
    g = ground_speeds(sub, v, wheelbase - v.cg_to_rear_axle)
    est: dict[str, Estimate] = {}
    for j, name in enumerate(PER_WHEEL):
        e = _scale(name, sub.wheels[:, j], g[:, j], seg, v, ctx)
        if e is not None:
            est[name] = e
    for axle, (left, right) in (("front", PER_WHEEL[:2]), ("rear", PER_WHEEL[2:])):
        if left in est and right in est and est[left].observable and est[right].observable:
            notes.extend(_left_right_note(axle, est[left], est[right]))
    return est


def _left_right_note(axle: str, left: Estimate, right: Estimate) -> list[str]:
    """A note when one side's rolling radius is more than 0.5 % off the other's."""
    ratio = left.value / right.value
    # first-order error of a ratio; an upper bound, as both errors share the twist's
    se = ratio * math.hypot(left.uncertainty / left.value, right.uncertainty / right.value)
    if abs(ratio - 1.0) <= 0.005:
        return []
    return [f"{axle} left and right rolling radii differ: left/right = {ratio:.5f} "
            f"({100 * (ratio - 1.0):+.2f} % +-{100 * se:.3f} %, 1 sigma at most); a "
            "wheel-difference yaw rate without per-wheel radii is off by about "
            "(left/right - 1) x speed / track width"]
