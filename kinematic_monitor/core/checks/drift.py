"""Drift: open-loop kinematic dead reckoning against the localisation over a horizon.

From a localisation pose (the anchor), the kinematic model (``model.step``, exact arcs at the
held steering and speed) dead-reckons the CG; after ``checks.drift_horizon`` it is compared
with the localisation in the anchor's body axes, and the lateral error beyond the yaw-rate and
sideslip allowances, standardised, feeds a CUSUM (one value per horizon). Over the same window
the heading changes of the model, the IMU and the localisation are kept: they tell triage
which source disagrees (``core/triage.py``). A localisation jump re-anchors.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from kinematic_monitor.core import model
from kinematic_monitor.core.checks.base import CheckContext, CheckInfo, CusumCheck, mean_excess_z
from kinematic_monitor.core.checks.sideslip import SIDESLIP_TOLERANCE, SideslipCheck
from kinematic_monitor.core.checks.yaw_rate import LATERAL_KINDS, YawRateCheck
from kinematic_monitor.core.geometry import angle_diff, pose_error
from kinematic_monitor.core.samples import ImuSample

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.core.triage import Evidence

#: assumed IMU sample interval [s] for the growth of integrated gyro noise σ·sqrt(h·dt)
#: (a 100 Hz IMU; common practice, no source)
IMU_DT = 0.01


class DriftCheck(CusumCheck):
    """See the module docstring."""

    info = CheckInfo("drift", "drift", peak_kinds=LATERAL_KINDS)

    def __init__(self, ctx: CheckContext, yaw_rate: YawRateCheck, sideslip: SideslipCheck
                 ) -> None:
        horizon = ctx.config.checks.drift_horizon
        super().__init__(ctx, ("joint_states", "localization"), ctx.cusum(1.0 / horizon))
        self.yaw_rate = yaw_rate
        self.sideslip = sideslip
        self.horizon = horizon
        self._dr: tuple[float, float, float] | None = None  # dead-reckoned CG pose
        self._dr_t = math.nan
        self._anchor_t = math.nan
        self._yaw0 = math.nan
        self._dist = 0.0
        self._n_chassis = 0
        self._dyaw = 0.0
        self._imu_dyaw = math.nan
        self._imu_t = math.nan
        # kinematic, IMU, localisation heading rates over the last window [rad/s], σ of a
        # kinematic comparison and σ of IMU vs localisation
        self.rates = (math.nan,) * 5

    def advance(self, stamp: float) -> None:
        """Dead-reckon to ``stamp`` [s] with the inputs held since the last step (call before
        ``MotionState.apply_chassis`` takes the new ones)."""
        st = self.state
        if self._dr is None or not stamp > self._dr_t or not st.have_chassis():
            return
        dt = stamp - self._dr_t
        x, y, yaw = self._dr
        self._dr = model.step(x, y, yaw, st.speed, st.delta, dt, st.p)
        self._dist += abs(st.speed) * dt
        self._dyaw += angle_diff(self._dr[2], yaw)
        self._dr_t = stamp

    def on_chassis(self, stamp: float) -> None:
        """A complete chassis sample at ``stamp`` [s] (before the state takes it)."""
        self.advance(stamp)
        self._n_chassis += 1

    def on_imu(self, s: ImuSample) -> None:
        """Integrate the IMU heading change over the window."""
        stamp = s.stamp
        if self._dr is not None and math.isfinite(self._imu_t) and stamp > self._anchor_t:
            t0 = max(self._imu_t, self._anchor_t)
            self._imu_dyaw += s.yaw_rate * (stamp - t0)
        self._imu_t = stamp

    def on_loc(self, stamp: float, pose: tuple[float, float, float], sp: float, sy: float,
               jumped: bool) -> None:
        """A localisation CG pose with its std [m, rad]; compare once a horizon has passed."""
        st = self.state
        if self._dr is None or jumped or not st.have_chassis():
            self._anchor(stamp, pose)
            return
        if stamp - self._anchor_t < self.horizon - 1e-6:
            return
        self.advance(stamp)
        assert self._dr is not None
        lon, lat, dyaw = pose_error(self._dr, pose)
        dist = max(self._dist, 1e-6)
        n_eff = max(1, self._n_chassis)
        sd_yaw_pred = self.horizon * abs(st.speed) / st.p.wheelbase * (
            self.noise.steering_angle_std / math.sqrt(n_eff))
        var_lat = 2.0 * sp**2 + (0.5 * dist * sd_yaw_pred) ** 2 + (dist * sy) ** 2
        h = max(stamp - self._anchor_t, 1e-6)
        allow_yaw = self.yaw_rate.allowance * h
        allow_lat = 0.5 * dist * allow_yaw + dist * max(self.sideslip.allowance,
                                                         SIDESLIP_TOLERANCE)
        _, z = mean_excess_z(lat, allow_lat, var_lat, 1)
        loc_dyaw = angle_diff(pose[2], self._yaw0)
        sd_rate = (math.sqrt(2.0 * sy**2 + sd_yaw_pred**2) + allow_yaw) / h
        # heading change: two localisation yaws, and an integrated IMU rate whose white
        # noise grows as σ·sqrt(h·dt_imu)
        sd_meas = math.hypot(math.sqrt(2.0) * sy,
                             self.noise.imu_yaw_rate_std * math.sqrt(IMU_DT * h)) / h
        self.rates = (self._dyaw / h, self._imu_dyaw / h, loc_dyaw / h, sd_rate, sd_meas)
        moving = st.moving() and dist >= st.min_speed * self.horizon * 0.5
        self.figures.update({"drift_lateral [m]": lat, "drift_longitudinal [m]": lon,
                             "drift_heading [rad]": dyaw, "drift_distance [m]": dist,
                             "drift_lateral_per_distance [-]": lat / dist,
                             "drift_heading_per_distance [rad/m]": dyaw / dist})
        if moving:
            self.book.handle(self.name, self.test.update(z, stamp), stamp)
        else:
            self.deactivate(stamp)
        self._anchor(stamp, pose)

    def _anchor(self, stamp: float, pose: tuple[float, float, float]) -> None:
        self._dr = pose
        self._yaw0 = pose[2]
        self._dr_t = stamp
        self._anchor_t = stamp
        self._dist = 0.0
        self._n_chassis = 0
        self._dyaw = 0.0
        self._imu_dyaw = 0.0 if self.state.imu_fresh() else math.nan

    def evidence(self, ev: Evidence) -> None:
        """The window's heading rates and their σ replace the instantaneous yaw rates."""
        if math.isfinite(self.rates[0]) and math.isfinite(self.rates[2]):
            ev.yaw_rate_kin, ev.yaw_rate_imu, ev.yaw_rate_loc, sd, sd_m = self.rates
            ev.yaw_rate_sigma = max(sd, 1e-3)
            ev.meas_sigma = max(sd_m, 1e-3)

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest lateral drift [m] of a lateral, calibration or localisation event."""
        if kind in LATERAL_KINDS:
            return [("drift_lateral_m", self.figures.get("drift_lateral [m]", math.nan))]
        return []
