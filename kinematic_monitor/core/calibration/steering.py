"""Steering offset, steering ratio and wheelbase from the yaw rate (rear-axle form).

Measurement equation (Rajamani 2012, kinematic model; the rear-axle centre moves along the
heading at ``vx`` with path curvature ``kappa = r / vx``), for road-wheel angles:
``delta_m = atan(L * kappa) + K * a_y + T * dr/dt - offset``, where ``delta_m`` is the
measured bicycle angle and ``delta_true = delta_m + offset`` as in
:mod:`kinematic_monitor.core.model`. ``K * a_y`` is the steady-state understeer term of
Gillespie 1992, ch. 6 (``delta = L/R + K a_y``), fitted as a nuisance so that cornering
does not bias the offset. ``T * dr/dt`` is the yaw-lag term, also a nuisance: in the
linear single-track model (Rajamani 2012, dynamic bicycle model; derivation ours) with the
lateral velocity quasi-steady, the axle forces that also turn the body (``I_z dr/dt``)
need ``delta = L r / v + K a_y + (I_z / L)(1/C_f + 1/C_r) dr/dt``; the selected samples
are steady only within ``max_yaw_accel``, and a drive that enters its bends more gently
than it leaves them leaves a mean ``dr/dt`` that, unmodelled, biased the offset (0.0025 deg
on the simulated gentle loop, twice the stated standard error). ``L`` is fitted too
(linearised, Gauss-Newton) when the data make it observable.

Steering ratio: the converters hand over road-wheel angles only; a steering-wheel angle
(:func:`steering_wheel_input`) has been divided by the file's ratio. A wrong ratio then
scales every angle by ``f = true ratio / file ratio``: ``delta_m = f (atan(L kappa) +
K a_y + T dr/dt - offset)``, linear in ``(f, f K, f T, -f offset)``; the reported ratio is
``vehicle.steering_ratio * f``. Only ``f * L`` is observable from yaw rate, so ``L`` is
kept. Nothing here divides by the ratio again.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from kinematic_monitor.core.calibration.alignment import Aligned
from kinematic_monitor.core.calibration.fitting import Fit, design, lag_column, lsq
from kinematic_monitor.core.calibration.observability import FitContext, from_fit, se_reason
from kinematic_monitor.core.calibration.results import Estimate, kept
from kinematic_monitor.core.model import VehicleParams

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig

OFFSET, WHEELBASE, RATIO = "vehicle.steering_offset", "vehicle.wheelbase", "vehicle.steering_ratio"


def steering_wheel_input(config: MonitorConfig) -> bool:
    """True when the steering is read as a steering-wheel angle and divided by the ratio.

    The rule (``vehicle.steering_ratio`` in the parameter schema): a JointState steer joint
    is a steering-wheel angle whenever ``vehicle.steering_ratio != 1``; a single-value
    steering input (``inputs.steering.topic``) is one when ``inputs.steering.kind`` is
    'steering_wheel'. The converters divide by the ratio, so every sample holds road-wheel
    angles.
    """
    if config.inputs.steering.topic:
        return config.inputs.steering.kind == "steering_wheel"
    return config.vehicle.steering_ratio != 1.0


@dataclass(frozen=True)
class SteeringFit:
    """The steering estimates and what the later fits need from them."""

    estimates: dict[str, Estimate]
    offset: float  # [rad] fitted offset (also when not observable)
    understeer: float  # [rad/(m/s^2)] the nuisance K of the fit
    wheelbase: float  # [m] L used (fitted when observable, else the input)
    factor: float  # [-] true road-wheel angle per converted angle (1 for road-wheel input)


def fit_steering(sub: Aligned, seg: np.ndarray, v: VehicleParams, ctx: FitContext,
                 steering_wheel: bool, fit_wheelbase: bool) -> SteeringFit:
    """The steering estimates from the kinematic samples ``sub`` (segments ``seg``)."""
    rdot = lag_column(sub.yaw_accel)
    if not steering_wheel:
        return _road_wheel(sub, seg, rdot, v, ctx, fit_wheelbase)
    est, offset, k_nuis = _steering_wheel(sub, seg, rdot, v, ctx)
    est[WHEELBASE] = kept(WHEELBASE, "m", v.wheelbase,
                          "steering given as steering-wheel angle: yaw rate shows only "
                          "steering_ratio x wheelbase; wheelbase kept")
    return SteeringFit(est, offset, k_nuis, v.wheelbase, est[RATIO].value / v.steering_ratio)


def _wheelbase_rows(sub: Aligned, L: float) -> tuple[np.ndarray, np.ndarray]:
    """Jacobian column of atan(L kappa) in L and the linearised left-hand side."""
    kappa = sub.kappa
    J = kappa / (1.0 + (L * kappa) ** 2)
    return J, sub.steer - np.arctan(L * kappa) + L * J


def _gauss_newton(sub: Aligned, seg: np.ndarray, rdot: np.ndarray | None, v: VehicleParams,
                  ctx: FitContext) -> tuple[Fit, float]:
    """The linearised fit of (L, K, [T], offset) at the Gauss-Newton solution L [m]."""
    minus = -np.ones_like(sub.vx)
    L = v.wheelbase
    for _ in range(4):  # Gauss-Newton on L (the model is linear in K, T and offset)
        J, y = _wheelbase_rows(sub, L)
        fit = lsq(design([J, sub.ay], rdot, minus), y, seg, ctx.boot.without_resamples())
        L_new = float(fit.beta[0])
        if not (0.2 * v.wheelbase < L_new < 5.0 * v.wheelbase):
            break
        done = abs(L_new - L) < 1e-7
        L = L_new
        if done:
            break
    J, y = _wheelbase_rows(sub, L)
    return lsq(design([J, sub.ay], rdot, minus), y, seg, ctx.boot), L


def _road_wheel(sub: Aligned, seg: np.ndarray, rdot: np.ndarray | None, v: VehicleParams,
                ctx: FitContext, fit_wheelbase: bool) -> SteeringFit:
    """delta_m = atan(L kappa) + K a_y + T dr/dt - offset."""
    lag = [] if rdot is None else ["yaw-lag term"]
    labels = ["wheelbase", "understeer term", *lag, "steering offset"]
    fit: Fit | None = None
    reason_L = "not fitted"
    L = v.wheelbase
    if fit_wheelbase:
        fit, L = _gauss_newton(sub, seg, rdot, v, ctx)
        reason_L = ctx.reason(fit, 0, ctx.resolution.wheelbase, "m", labels)
        if not (0.2 * v.wheelbase < float(fit.beta[0]) < 5.0 * v.wheelbase) and not reason_L:
            reason_L = f"fitted {float(fit.beta[0]):.3g} m is implausible"
    est: dict[str, Estimate] = {}
    if fit is not None and reason_L == "":
        est[WHEELBASE] = from_fit(WHEELBASE, "m", v.wheelbase, fit, 0, "")
        i_k = 1
    else:
        est[WHEELBASE] = Estimate(
            WHEELBASE, "m", v.wheelbase, v.wheelbase,
            float(fit.se()[0]) if fit is not None else math.nan,
            float(fit.se_boot()[0]) if fit is not None else math.nan,
            False, reason_L, float(fit.beta[0]) if fit is not None else math.nan)
        L, i_k = v.wheelbase, 0
        y = sub.steer - np.arctan(L * sub.kappa)
        fit = lsq(design([sub.ay], rdot, -np.ones_like(sub.vx)), y, seg, ctx.boot)
        labels = labels[1:]
    i_o = len(labels) - 1
    reason = ctx.reason(fit, i_o, ctx.resolution.steering_offset, "rad", labels)
    est[OFFSET] = from_fit(OFFSET, "rad", v.steering_offset, fit, i_o, reason)
    return SteeringFit(est, float(fit.beta[i_o]), float(fit.beta[i_k]), L, 1.0)


def _steering_wheel(sub: Aligned, seg: np.ndarray, rdot: np.ndarray | None,
                    v: VehicleParams, ctx: FitContext
                    ) -> tuple[dict[str, Estimate], float, float]:
    """delta_m = f (atan(L kappa) + K a_y + T dr/dt - offset) = a atan(L kappa) + b a_y
    (+ t dr/dt) + c; the ratio factor f = a, K = b/a, offset = -c/a.

    ``delta_m`` is the road-wheel angle the converter made with the file's ratio; the
    steering-wheel angle read / true ratio is the true angle, so f = true / file ratio and
    the corrected ratio is ``vehicle.steering_ratio * f``. Returns (estimates, offset, K).
    """
    ay = sub.ay
    X = design([np.arctan(v.wheelbase * sub.kappa), ay], rdot, np.ones_like(ay))
    fit = lsq(X, sub.steer, seg, ctx.boot)
    a, b, c = float(fit.beta[0]), float(fit.beta[1]), float(fit.beta[-1])
    lag = [] if rdot is None else ["yaw-lag term"]
    labels = ["steering ratio", "understeer term", *lag, "steering offset"]
    # delta method for (rho, offset): gradients of (a) and (-c/a)
    g_off = np.zeros(len(fit.beta))
    g_off[0], g_off[-1] = c / a**2, -1.0 / a
    se_off = float(math.sqrt(max(g_off @ fit.cov @ g_off, 0.0)))
    boot_off = -fit.boot[:, -1] / fit.boot[:, 0] if len(fit.boot) > 1 else np.zeros(0)
    sb_off = float(np.std(boot_off, ddof=1)) if len(boot_off) > 1 else math.nan
    r_ratio = ctx.reason(fit, 0, ctx.resolution.steering_ratio, "", labels)
    est = {RATIO: from_fit(RATIO, "-", v.steering_ratio, fit, 0, r_ratio,
                           transform=v.steering_ratio)}
    off = -c / a
    worst = max(se_off, sb_off if math.isfinite(sb_off) else 0.0)
    r_off = se_reason(worst, ctx.resolution.steering_offset, "rad")
    est[OFFSET] = Estimate(OFFSET, "rad", v.steering_offset,
                           off if not r_off else v.steering_offset, se_off, sb_off, not r_off,
                           r_off, off)
    return est, off, b / a
