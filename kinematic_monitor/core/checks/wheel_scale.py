"""Wheel-speed scale: a small slip of both axles alike at steady speed (a rolling-radius error).

Residual [-]: the smaller of the two axles' slip ratios when both have the same sign (a
free-rolling axle slips only through a wrong radius), taken only at steady speed
(|a_x| ≤ ``CALIBRATION_MAX_AX``: driving and braking slip both axles alike, ISO 8855 slip ∝
force). Allowance ``WHEEL_SCALE_TOLERANCE``. A CUSUM on standardised block means raises the
alarm; it points to ``calibration_bias`` (wheel radius), or to wheel spin or lock of both
axles beyond 5 % (``core/triage.py``).
"""

from __future__ import annotations

import math

from kinematic_monitor.core.checks.base import BlockCheck, CheckContext, CheckInfo

#: rolling-radius error tolerated [-] (common practice, no source)
WHEEL_SCALE_TOLERANCE = 0.01
#: above this longitudinal acceleration [m/s²] (≈ 0.1 g) the check pauses: drive and brake
#: slip would look like a wheel-radius error (common practice, no source)
CALIBRATION_MAX_AX = 1.0


class WheelScaleCheck(BlockCheck):
    """See the module docstring."""

    info = CheckInfo("wheel_scale", "wheel speed scale", unit="-")

    def __init__(self, ctx: CheckContext) -> None:
        super().__init__(ctx, ("joint_states", "localization"))

    def on_slips(self, k_front: float, k_rear: float, vx: float, moving: bool) -> None:
        """Axle slip ratios [-] of one localisation sample at forward speed ``vx`` [m/s]."""
        st = self.state
        k_cal = 0.0
        if k_front * k_rear > 0.0:
            k_cal = math.copysign(min(abs(k_front), abs(k_rear)), k_front)
        sw = self.noise.wheel_speed_std * st.p.effective_wheel_radius
        sv = self.noise.localization_velocity_std
        noise = (sw**2 / 2.0 + sv**2) / max(abs(vx), st.min_speed) ** 2
        imu = st.imu
        ax = imu.ax if imu is not None and st.imu_fresh() else math.nan
        steady = not (math.isfinite(ax) and abs(ax) > CALIBRATION_MAX_AX)
        self.block.add(k_cal, noise, WHEEL_SCALE_TOLERANCE, moving and steady)
