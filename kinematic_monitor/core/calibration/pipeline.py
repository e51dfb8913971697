"""Estimate the vehicle's calibration from ordinary drives (pure core, no ROS, no file I/O).

Input: time-ordered samples (:class:`ChassisSample`, :class:`LocalizationSample`,
:class:`ImuSample`) from one or more drives, and the current configuration (a
``MonitorConfig`` from ``kinematic_monitor.config.validation.validate``). Output: a
:class:`CalibrationResult` with each quantity's estimate, its standard error from the
fit's covariance and from a block bootstrap over segments, and whether the data make it
observable. Units and frames follow REP 103 (SI, radians, body x forward, y left, z up,
counter-clockwise positive).

Steps, each in its own module: align every input on the localisation stamps
(:mod:`.alignment`); select kinematic driving and cut it into bootstrap segments
(:mod:`.selection`); fit by least squares (:mod:`.fitting`) and judge observability
(:mod:`.observability`): steering offset, ratio and wheelbase (:mod:`.steering`),
wheel-speed scales of the axles and of each wheel (:mod:`.wheels`), l_r
(:mod:`.cg_position`), the understeer gradient (:mod:`.understeer`), the gyro bias and its
drift (:mod:`.gyro`) and the IMU yaw misalignment (:mod:`.imu_mounting`); residuals before
and after (:mod:`.residuals`).

The stated errors are checked by ``bench/calibration_coverage.py`` (seeds of a 5-minute
simulated gentle drive with the dynamic simulator: the 95 % intervals cover the injected
offset, scales, gyro bias and IMU yaw).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from kinematic_monitor.core.calibration import gyro, imu_mounting
from kinematic_monitor.core.calibration.alignment import Aligned, align, concat
from kinematic_monitor.core.calibration.cg_position import NAME as CG
from kinematic_monitor.core.calibration.cg_position import fit_cg_position
from kinematic_monitor.core.calibration.fitting import Boot
from kinematic_monitor.core.calibration.observability import FitContext, Resolution
from kinematic_monitor.core.calibration.residuals import kinematic_residuals
from kinematic_monitor.core.calibration.results import (
    CalibrationError,
    CalibrationResult,
    Estimate,
    Residuals,
)
from kinematic_monitor.core.calibration.rules import SelectionRules
from kinematic_monitor.core.calibration.selection import segments, select, select_imu
from kinematic_monitor.core.calibration.steering import fit_steering, steering_wheel_input
from kinematic_monitor.core.calibration.understeer import NAME as UNDERSTEER
from kinematic_monitor.core.calibration.understeer import fit_understeer
from kinematic_monitor.core.calibration.wheels import fit_axles, fit_wheels
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig


def calibrate(
    drives: Iterable[Any] | Sequence[Iterable[Any]],
    config: MonitorConfig,
    rules: SelectionRules | None = None,
    *,
    exclude: Sequence[tuple[float, float]] = (),
    seed: int = 0,
    n_boot: int = 200,
    resolution: Resolution | None = None,
    max_correlation: float = 0.99,
    max_condition: float = 1.0e4,
    fit_wheelbase: bool = True,
    fit_cg: bool = True,
) -> CalibrationResult:
    """Estimate the calibration from samples of one drive or a list of drives.

    ``drives``: an iterable of samples, or a list of such iterables (one per bag).
    ``config``: the validated configuration (``validate`` a dict of parameters first).
    ``exclude``: (start, end) stamp windows [s] not to use (e.g. events of a replay).
    Raises :class:`CalibrationError` when there is too little usable data.
    """
    if isinstance(config, Mapping):
        raise TypeError("calibrate() takes a MonitorConfig: pass the parameters through "
                        "kinematic_monitor.config.validation.validate first")
    rules = rules or SelectionRules()
    v = config.vehicle
    d = _aligned(drives, config, rules)
    lags = max(3 * int(round(rules.fit_smooth_time / max(float(np.median(d.dt)), 1e-6))), 1)
    ctx = FitContext(resolution or Resolution(), Boot(np.random.default_rng(seed), n_boot, lags),
                     max_correlation, max_condition)
    reasons: dict[str, float] = {}
    seg = segments(d, select(d, v, rules, rules.max_lateral_accel, exclude, reasons), rules)
    use = seg >= 0
    _require_usable(d, use, rules, reasons)
    sub, S = d.subset(use), seg[use]
    notes: list[str] = []
    steering = fit_steering(sub, S, v, ctx, steering_wheel_input(config), fit_wheelbase)
    est: dict[str, Estimate] = dict(steering.estimates)
    est.update(fit_axles(sub, S, v, steering.wheelbase, ctx, notes))
    est[CG] = fit_cg_position(sub, S, v, steering.wheelbase, ctx, fit_cg)
    segk = segments(d, select(d, v, rules, rules.k_max_lateral_accel, exclude, None), rules)
    usek = segk >= 0
    est[UNDERSTEER] = fit_understeer(d.subset(usek), segk[usek], v, steering.offset,
                                     steering.factor, steering.wheelbase, ctx, rules, notes)
    residuals = kinematic_residuals(sub, v, est, steering)
    imu_est, imu_residuals, imu_seconds = _imu_estimates(d, config, rules, exclude, ctx, notes)
    est.update(imu_est)
    residuals.extend(imu_residuals)
    est.update(fit_wheels(sub, S, v, steering.wheelbase, ctx, notes))
    return CalibrationResult(
        estimates=est, usable_seconds=float(np.sum(d.dt[use])),
        k_usable_seconds=float(np.sum(d.dt[usek])), total_seconds=float(np.sum(d.dt)),
        n_segments=int(len(np.unique(S))),
        rejected_seconds={k: s for k, s in reasons.items() if s > 0.0},
        residuals=residuals,
        steering_input="steering_wheel" if steering_wheel_input(config) else "road_wheel",
        yaw_rate_source=d.yaw_rate_source, notes=notes, imu_seconds=imu_seconds,
    )


def _as_streams(drives: Any) -> list[Iterable[Any]]:
    if isinstance(drives, list | tuple) and drives and not isinstance(
            drives[0], ChassisSample | LocalizationSample | ImuSample) and \
            hasattr(drives[0], "__iter__"):
        return list(drives)
    return [drives]


def _aligned(drives: Any, config: MonitorConfig, rules: SelectionRules) -> Aligned:
    """Every drive aligned on its localisation stamps, one after the other."""
    ref_x = config.inputs.localization.reference_x
    parts = [p for i, s in enumerate(_as_streams(drives))
             if (p := align(s, config.vehicle, ref_x, rules, i)) is not None]
    if not parts:
        raise CalibrationError("no usable input: need both joint states (steering and wheel "
                               "speeds) and localisation in the data")
    return concat(parts)


def _require_usable(d: Aligned, use: np.ndarray, rules: SelectionRules,
                    reasons: dict[str, float]) -> None:
    """CalibrationError naming the main rejections when too little driving is usable."""
    usable = float(np.sum(d.dt[use]))
    if usable >= rules.min_usable:
        return
    why = ", ".join(f"{k} {s:.0f} s" for k, s in sorted(reasons.items(), key=lambda kv: -kv[1])
                    if s >= 0.5)
    raise CalibrationError(
        f"only {usable:.0f} s of usable driving; need at least {rules.min_usable:.0f} s "
        f"of moving, low-lateral-acceleration data (of {float(np.sum(d.dt)):.0f} s; rejected: "
        f"{why or 'short runs'})")


def _imu_estimates(d: Aligned, config: MonitorConfig, rules: SelectionRules,
                   exclude: Sequence[tuple[float, float]], ctx: FitContext, notes: list[str]
                   ) -> tuple[dict[str, Estimate], list[Residuals], float]:
    """Gyro bias and drift and the IMU yaw, the IMU residual, and the seconds used."""
    seg = segments(d, select_imu(d, exclude), rules)
    use = seg >= 0
    seconds = float(np.sum(d.dt[use]))
    if seconds < rules.min_imu_usable:
        why = (f"only {seconds:.0f} s of IMU data with localisation (need "
               f"{rules.min_imu_usable:g} s)" if np.any(np.isfinite(d.imu_rate))
               else "no IMU in the data")
        return ({**gyro.not_fitted(why).estimates, imu_mounting.YAW: imu_mounting.not_fitted(why)},
                [], seconds)
    g = gyro.fit_gyro(d.subset(use), seg[use], config.vehicle, rules, ctx, notes)
    est = dict(g.estimates)
    acc = use & np.isfinite(d.imu_ax) & np.isfinite(d.imu_ay) & np.isfinite(d.loc_ax) \
        & np.isfinite(d.loc_ay)
    if float(np.sum(d.dt[acc])) < rules.min_imu_usable:
        est[imu_mounting.YAW] = imu_mounting.not_fitted("too little IMU acceleration data "
                                                        "with localisation")
    else:
        est[imu_mounting.YAW] = imu_mounting.fit_imu_mounting(d.subset(acc), seg[acc], ctx)
    return est, [] if g.residual is None else [g.residual], seconds
