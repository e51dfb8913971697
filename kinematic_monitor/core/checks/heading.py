"""Localisation heading: the localisation yaw against the IMU-integrated heading.

e = wrap(yaw_loc − ∫ψ̇_IMU − offset); the offset follows e with time constant
``checks.heading_time_constant`` τ [s] (it absorbs a constant offset and a slow gyro bias:
a bias b leaves b·τ, covered by ``checks.heading_tolerance`` [rad]). A ramp (heading drift of
the localisation) keeps e growing; a step is absorbed after a few τ. Tyre slip does not show
here: both sensors see the same rotation of the body. A CUSUM on standardised block means
raises the alarm; it points to ``localization_fault``.
"""

from __future__ import annotations

import math

from kinematic_monitor.core.checks.base import BlockCheck, CheckContext, CheckInfo
from kinematic_monitor.core.checks.drift import IMU_DT
from kinematic_monitor.core.geometry import angle_diff
from kinematic_monitor.core.samples import ImuSample

#: localisation updates before the offset counts as settled
SETTLE_UPDATES = 10


class HeadingCheck(BlockCheck):
    """See the module docstring."""

    info = CheckInfo("heading", "localization heading", unit="rad")

    def __init__(self, ctx: CheckContext) -> None:
        super().__init__(ctx, ("localization", "imu"))
        self.tau = max(ctx.config.checks.heading_time_constant, 0.1)
        self._heading = 0.0  # IMU-integrated heading [rad]
        self._heading_t = math.nan
        self._offset = math.nan
        self._prev_t = math.nan
        self._n = 0

    def on_imu(self, s: ImuSample) -> None:
        """Integrate the gyro; a gap longer than timeouts.imu loses the heading."""
        stamp = s.stamp
        ht = self._heading_t
        if math.isfinite(ht):
            if 0.0 < stamp - ht <= self.state.timeout("imu"):
                self._heading += s.yaw_rate * (stamp - ht)
            elif stamp > ht:
                self._offset = math.nan  # gap: the integrated heading is lost
        self._heading_t = stamp

    def on_loc(self, stamp: float, yaw: float, sy: float) -> None:
        """A localisation yaw [rad] with its std [rad]."""
        st = self.state
        if not st.imu_fresh() or not (math.isfinite(yaw) and math.isfinite(self._heading_t)) \
                or stamp - self._heading_t > st.timeout("imu"):
            self._offset = math.nan
            return
        # IMU heading extrapolated to the localisation stamp with the latest rate
        head = self._heading + st.yaw_rate_imu * (stamp - self._heading_t)
        diff = yaw - head
        if not math.isfinite(self._offset):
            self._offset = diff
            self._prev_t = stamp
            self._n = 1
            return
        e = angle_diff(diff, self._offset)
        dt = max(stamp - self._prev_t, 0.0)
        self._prev_t = stamp
        self._n += 1
        # running mean at first, then an exponential average with time constant τ
        n_ema = max(2.0 * self.tau / max(dt, 1e-3), 1.0)
        gain = max(min(dt / self.tau, 1.0), 1.0 / self._n)
        self._offset += gain * e
        self.figures.update({"heading_error [rad]": e})
        if self._n < SETTLE_UPDATES:
            return
        # e = noise of this yaw minus the offset's own error (averaged over ~n samples);
        # the integrated IMU noise grows as σ·sqrt(dt_imu·τ)
        n_off = min(float(self._n), n_ema)
        noise = sy**2 * (1.0 + 1.0 / n_off) + (self.noise.imu_yaw_rate_std**2) * IMU_DT * self.tau
        self.block.add(e, noise, self.ctx.config.checks.heading_tolerance, st.moving())
