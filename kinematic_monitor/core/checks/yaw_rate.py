"""Yaw rate: the measured yaw rate (IMU, else the localisation twist) against the kinematic one.

Residual [rad/s]: ψ̇_measured − ψ̇_kinematic, ψ̇_kinematic = v·cos β·tan δ / L (Rajamani 2012)
with δ − K·a_y (``vehicle.understeer_gradient``). Each sample's noise follows from the
configured sensor noise to first order; the allowance (a dead band for the model's own error)
is relative (``MODEL_TOLERANCE``), absolute (``YAW_RATE_TOLERANCE``), the vehicle's yaw-lag
transient (``MotionState.lag_allow``) and an understeer uncertainty (``UNDERSTEER_TOLERANCE``).
A CUSUM on standardised block means raises the alarm; a high yaw-rate residual points to
lateral slip, a calibration error or the localisation (``core/triage.py``).
"""

from __future__ import annotations

import math

from kinematic_monitor.core.checks.base import (
    MODEL_TOLERANCE,
    YAW_RATE_TOLERANCE,
    BlockCheck,
    CheckContext,
    CheckInfo,
)
from kinematic_monitor.core.samples import ImuSample, LocalizationSample

#: linear-range understeer gradient [rad/(m/s²)] tolerated beyond vehicle.understeer_gradient
#: (≈ 0.84 deg/g, the uncertainty of a calibrated gradient; common practice, no source)
UNDERSTEER_TOLERANCE = 0.0015
LATERAL_KINDS = ("lateral_slip", "calibration_bias", "localization_fault")


def yaw_rate_sigma(v: float, delta: float, wheelbase: float, meas_std: float,
                   steer_std: float, speed_std: float, kin_rate: float, rel_std: float
                   ) -> float:
    """Standard deviation [rad/s] of one yaw-rate residual sample (first-order propagation).

    σ² = σ_meas² + (v/(L·cos²δ))²·σ_δ² + (ψ̇/v)²·σ_v² + (rel·ψ̇)²; the last term allows for
    model error of the kinematic prediction (``rel_std``, common practice, no source).
    """
    c = math.cos(delta)
    d_delta = abs(v) / (wheelbase * c * c)
    d_v = abs(kin_rate) / max(abs(v), 0.1)
    return math.sqrt(meas_std**2 + (d_delta * steer_std) ** 2 + (d_v * speed_std) ** 2
                     + (rel_std * kin_rate) ** 2)


class YawRateCheck(BlockCheck):
    """See the module docstring. ``allowance``: the latest sample's dead band [rad/s]."""

    info = CheckInfo("yaw_rate", "yaw rate", unit="rad/s", peak_kinds=LATERAL_KINDS)

    def __init__(self, ctx: CheckContext) -> None:
        super().__init__(ctx, {"joint_states"} | ({"imu"} if ctx.state.imu_enabled else set()))
        # wheel-speed noise as CG speed [m/s] for the mean of the two rear wheels
        self.speed_std = (self.noise.wheel_speed_std * self.state.p.effective_wheel_radius
                          / math.sqrt(2.0))
        self.allowance = 0.0

    def on_imu(self, s: ImuSample) -> None:
        """Residual of an IMU yaw rate (after ``MotionState.apply_imu``)."""
        if self.state.have_chassis():
            self._add(s.yaw_rate, self.noise.imu_yaw_rate_std)

    def on_loc(self, s: LocalizationSample) -> None:
        """Residual of the localisation twist's yaw rate, when no IMU is fresh."""
        st = self.state
        if math.isfinite(s.yaw_rate) and st.have_chassis() and not st.imu_fresh():
            n = self.noise
            sig = n.localization_velocity_std / max(st.p.track_width, 1.0)
            self._add(s.yaw_rate, max(sig, n.imu_yaw_rate_std))

    def _add(self, meas: float, meas_std: float) -> None:
        st = self.state
        kin = st.kinematic_rate()
        st.kin_rate = kin
        st.meas_rate = meas
        speed, wheelbase = st.speed, st.p.wheelbase
        noise = yaw_rate_sigma(speed, st.delta, wheelbase, meas_std,
                               self.noise.steering_angle_std, self.speed_std, kin, 0.0)
        ay = abs(st.ay) if math.isfinite(st.ay) else abs(meas * speed)
        allow = (MODEL_TOLERANCE * abs(kin) + YAW_RATE_TOLERANCE + st.lag_allow
                 + abs(speed) / wheelbase * UNDERSTEER_TOLERANCE * ay)
        self.allowance = allow
        self.block.add(meas - kin, noise**2, allow, st.moving())

    def decide(self, t: float, n_eff_cap: int, active: bool) -> None:
        """The block decision, then the latest kinematic and measured yaw rates."""
        super().decide(t, n_eff_cap, active)
        st = self.state
        if st.have_chassis():
            self.figures.update({"yaw_rate_kinematic [rad/s]": st.kin_rate,
                                 "yaw_rate_measured [rad/s]": st.meas_rate,
                                 "yaw_rate_residual [rad/s]": st.meas_rate - st.kin_rate})

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest yaw-rate residual [rad/s] of a lateral, calibration or localisation event."""
        st = self.state
        if kind in LATERAL_KINDS and math.isfinite(st.meas_rate) and math.isfinite(
                st.kin_rate):
            return [("yaw_rate_residual_rad_s", st.meas_rate - st.kin_rate)]
        return []
