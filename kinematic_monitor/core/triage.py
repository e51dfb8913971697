"""Triage: which source is wrong when a residual channel alarms (pure, no ROS).

Rules, in order (σ = standard deviation of the yaw-rate comparison in question):

1. ``input`` channel → ``input_stale``.
2. ``slip_ratio`` channel → ``longitudinal_slip`` (spin if κ > 0, lock/skid if κ < 0).
3. ``wheel_scale`` channel (both axles show the same small slip) → ``calibration_bias``;
   beyond ``CALIBRATION_MAX_SCALE`` (5 %) both axles spin or lock → ``longitudinal_slip``.
4. ``heading`` channel (localisation yaw drifts against the IMU-integrated heading) →
   ``localization_fault``; ``localization`` / ``nis`` channel (pose jump, inconsistent updates) →
   ``localization_fault``; when the localisation declared the jump (covariance collapse
   or reset message) it is a *note* (no ERROR).
5. yaw-rate / sideslip / drift channels:
   a. IMU and localisation yaw rates disagree (> ``agree_sigmas``·σ) and the IMU agrees
      with the kinematic prediction → ``localization_fault``;
   b. low lateral acceleration (|a_y| < ``CALIBRATION_MAX_AY``) and a residual that, in
      steering terms, is small (< ``CALIBRATION_MAX_STEER``) but at least half the steering
      angle (a constant offset shows when driving straight) → ``calibration_bias`` (run
      ``kinematic-monitor calibrate``);
   c. otherwise ``lateral_slip``: understeer when measured and kinematic yaw rates have
      the same sign and |measured| < |kinematic|, else oversteer (ISO 8855 / SAE J670
      meaning); "on low grip" when |a_y| is inside the kinematic envelope 0.5·μ·g.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kinematic_monitor.core.model import GRAVITY, kinematic_envelope


@dataclass
class Evidence:
    """Figures at the decision time. Units: rad/s, m/s², rad, m/s, m; NaN when unknown.

    ``yaw_rate_sigma``: σ of a measured-vs-kinematic yaw-rate comparison (includes the
    model allowance); ``meas_sigma``: σ of IMU-vs-localisation (measurement noise only,
    falls back to ``yaw_rate_sigma``).
    """

    channel: str
    yaw_rate_kin: float = math.nan
    yaw_rate_imu: float = math.nan
    yaw_rate_loc: float = math.nan
    yaw_rate_sigma: float = math.nan
    meas_sigma: float = math.nan
    lateral_accel: float = math.nan
    speed: float = math.nan
    steer: float = math.nan
    wheelbase: float = math.nan
    slip_front: float = math.nan
    slip_rear: float = math.nan
    loc_jump: float = math.nan
    loc_declared_reset: bool = False
    friction_assumed: float = 1.0
    detail: str = ""


@dataclass
class Verdict:
    """Triage result: event kind, a short sub-kind, a one-line summary, and note flag."""

    kind: str
    subkind: str
    summary: str
    note: bool = False


CALIBRATION_MAX_AY = 0.15 * GRAVITY  # m/s²; "low lateral acceleration" (common practice, no
# source): well inside the kinematic envelope for any road surface drier than snow
CALIBRATION_MAX_STEER = 0.05  # rad (≈ 2.9°): larger steering-equivalent residuals are not
# taken for a calibration error (common practice, no source)
CALIBRATION_MIN_RATIO = 0.5  # residual at least half the steering angle: shows when straight
CALIBRATION_MAX_SCALE = 0.05  # [-] a wheel-radius error beyond 5 % is not a calibration
# matter (tyre pressure and wear change R_e by a few percent; common practice, no source)
AGREE_SIGMAS = 3.0  # two measurements agree within 3σ (common practice, no source)


def _fin(*vals: float) -> bool:
    return all(math.isfinite(v) for v in vals)


def measured_yaw_rate(ev: Evidence) -> float:
    """The referee yaw rate [rad/s]: IMU when present, else localisation."""
    return ev.yaw_rate_imu if math.isfinite(ev.yaw_rate_imu) else ev.yaw_rate_loc


def classify(ev: Evidence) -> Verdict:
    """Apply the rules in the module docstring to one piece of evidence."""
    ch = ev.channel
    if ch == "input":
        return Verdict("input_stale", "stale", ev.detail or "an input is missing or late")
    if ch == "slip_ratio":
        return _wheel_slip(ev)
    if ch == "wheel_scale":
        return _wheel_scale(ev)
    if ch == "heading":
        return Verdict("localization_fault", "heading",
                       ev.detail or "localisation heading drifts against the IMU-integrated "
                       "heading")
    if ch in ("localization", "nis"):
        return _localization(ev)
    return _motion(ev)  # yaw-rate, sideslip and drift channels


def _wheel_slip(ev: Evidence) -> Verdict:
    front = abs(_z(ev.slip_front)) >= abs(_z(ev.slip_rear))
    kappa = _z(ev.slip_front) if front else _z(ev.slip_rear)
    axle = "front" if front else "rear"
    what = "wheel spin" if kappa > 0 else "wheel lock"
    return Verdict("longitudinal_slip", what,
                   f"{what} on the {axle} axle: slip ratio {kappa:+.2f}")


def _wheel_scale(ev: Evidence) -> Verdict:
    k = _nanmean(ev.slip_front, ev.slip_rear)
    if _fin(k) and abs(k) > CALIBRATION_MAX_SCALE:
        # both axles far off the ground speed: the wheels spin or lock together
        what = "wheel spin" if k > 0 else "wheel lock"
        return Verdict("longitudinal_slip", what, f"{what} on both axles: slip ratio {k:+.2f}")
    return Verdict(
        "calibration_bias", "wheel_radius",
        f"wheel speeds {abs(k) * 100:.1f} % {'above' if k > 0 else 'below'} ground speed "
        "on both axles: check wheel radius (run kinematic-monitor calibrate)",
    )


def _localization(ev: Evidence) -> Verdict:
    if ev.loc_declared_reset:
        return Verdict("localization_fault", "relocalization",
                       "localisation relocalised (declared): note only", note=True)
    if ev.channel == "nis":
        return Verdict("localization_fault", "inconsistent",
                       ev.detail or "localisation updates inconsistent with the filter")
    return Verdict(
        "localization_fault", "jump",
        f"localisation jumped {ev.loc_jump:.2f} m against the kinematic prediction"
        if _fin(ev.loc_jump) else (ev.detail or "localisation jumped"),
    )


def _motion(ev: Evidence) -> Verdict:
    kin = ev.yaw_rate_kin
    imu, loc, sig = ev.yaw_rate_imu, ev.yaw_rate_loc, ev.yaw_rate_sigma
    msig = ev.meas_sigma if _fin(ev.meas_sigma) else sig
    if _fin(imu, loc, sig, kin, msig) and sig > 0.0 and msig > 0.0:
        if abs(loc - imu) > AGREE_SIGMAS * msig and abs(imu - kin) <= AGREE_SIGMAS * sig:
            return Verdict(
                "localization_fault", "heading",
                f"localisation yaw rate {loc:+.3f} rad/s disagrees with IMU {imu:+.3f} "
                f"and kinematic {kin:+.3f} rad/s",
            )
    meas = measured_yaw_rate(ev)
    ay = ev.lateral_accel if _fin(ev.lateral_accel) else (
        ev.speed * meas if _fin(ev.speed, meas) else math.nan)
    if _fin(meas, kin, ev.speed, ev.steer, ev.wheelbase) and abs(ev.speed) > 0.1:
        steer_meas = math.atan(meas * ev.wheelbase / ev.speed)
        steer_res = abs(steer_meas - ev.steer)
        low_ay = _fin(ay) and abs(ay) < CALIBRATION_MAX_AY
        if low_ay and CALIBRATION_MIN_RATIO * abs(ev.steer) <= steer_res <= CALIBRATION_MAX_STEER:
            return Verdict(
                "calibration_bias", "steering_offset",
                f"persistent yaw-rate bias {meas - kin:+.3f} rad/s at low lateral acceleration "
                f"(steering off by about {math.degrees(steer_meas - ev.steer):+.1f} deg): "
                "run kinematic-monitor calibrate",
            )
    if not _fin(meas, kin):
        return Verdict("lateral_slip", "slip", ev.detail or "vehicle motion departs from the "
                       "kinematic prediction")
    return _lateral(meas, kin, ay, ev.friction_assumed)


def _lateral(meas: float, kin: float, ay: float, friction: float) -> Verdict:
    """Lateral slip: understeer or oversteer (ISO 8855 / SAE J670), on low grip or not."""
    same_sign = meas * kin > 0.0
    under = same_sign and abs(meas) < abs(kin)
    sub = "understeer" if under else "oversteer"
    grip = ""
    if _fin(ay) and abs(ay) <= kinematic_envelope(friction):
        grip = " on low grip"
    if abs(kin) > 1e-6:
        pct = (abs(meas) - abs(kin)) / abs(kin) * 100.0 if same_sign else -100.0 - abs(
            meas / kin) * 100.0
        rel = f"yaw rate {abs(pct):.0f} % {'below' if pct < 0 else 'above'} kinematic"
        if not same_sign:
            rel = f"yaw rate {meas:+.3f} rad/s against kinematic {kin:+.3f} rad/s"
    else:
        rel = f"yaw rate {meas:+.3f} rad/s with no kinematic yaw rate"
    g_use = abs(ay) / GRAVITY if _fin(ay) else math.nan
    at = f" at {g_use:.2f} g" if _fin(g_use) else ""
    return Verdict("lateral_slip", sub, f"{sub}{grip}: {rel}{at}")


def _z(v: float) -> float:
    return v if math.isfinite(v) else 0.0


def _nanmean(*vals: float) -> float:
    good = [v for v in vals if math.isfinite(v)]
    return sum(good) / len(good) if good else math.nan
