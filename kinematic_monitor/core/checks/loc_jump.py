"""Localisation jump: each localisation update against two short predictions from the last one.

Prediction (a) is the kinematic model over the interval from the previous pose; (b) is the
measured motion: the previous body velocity and the IMU (or localisation) yaw rate. A slide is
consistent with (b), a jump with neither. The smaller of the two normalised errors
(position and heading, chi-square with 3 degrees of freedom) is compared with the bounds
that give ``checks.false_alarm_rate`` WARN and ``checks.false_alarm_rate·(1 −
checks.error_confidence)`` ERROR alarms per hour at the observed update rate. A jump the
localisation declares (reset topic, or its covariance collapsing) is a note, not a fault
(REP 105: ``map`` may jump).
"""

from __future__ import annotations

import functools
import math

from kinematic_monitor.core import model
from kinematic_monitor.core.checks.base import (
    MODEL_TOLERANCE,
    YAW_RATE_TOLERANCE,
    CheckContext,
    CheckInfo,
    ThresholdCheck,
    ThresholdTest,
)
from kinematic_monitor.core.geometry import pose_error
from kinematic_monitor.core.samples import LocalizationSample
from kinematic_monitor.core.stats import SECONDS_PER_HOUR, chi2_upper

#: bound on unmodelled acceleration for the measured-motion prediction [m/s²] (common
#: practice, no source)
MAX_ACCELERATION = 10.0


@functools.lru_cache(maxsize=64)
def jump_bounds(warn_per_hour: float, error_per_hour: float, rate_hz: int
                ) -> tuple[float, float]:
    """chi-square(3) WARN/ERROR bounds of one update at ``rate_hz`` updates per second."""
    updates = SECONDS_PER_HOUR * rate_hz
    return (chi2_upper(3, 1.0 - warn_per_hour / updates),
            chi2_upper(3, 1.0 - error_per_hour / updates))


class LocalizationJumpCheck(ThresholdCheck):
    """See the module docstring."""

    info = CheckInfo("localization", "localization jump", peak_kinds=("localization_fault",))

    def __init__(self, ctx: CheckContext) -> None:
        clear = ctx.config.checks.clear_duration
        super().__init__(ctx, ThresholdTest(math.inf, math.inf, 0.0, clear), ("localization",))
        self.declared_reset_t = -math.inf

    def status_message(self, level: int, active: bool, summary: str | None,
                       inactive: str) -> str:
        """Meaningful at any speed: 'ok' or the event."""
        return super().status_message(level, True, summary, inactive)

    def declare(self, stamp: float) -> None:
        """The localisation announced a deliberate jump at ``stamp`` [s] (reset topic)."""
        self.declared_reset_t = stamp

    def on_loc(self, s: LocalizationSample, sp: float, sy: float,
               pose: tuple[float, float, float]) -> bool:
        """Test one update (CG pose, its std [m, rad]); True when it jumped."""
        st = self.state
        prev = st.loc_prev
        if prev is None or not st.have_chassis():
            return False
        t0, x0, y0, yaw0, sp0, vx0, vy0 = prev
        dt = max(s.stamp - t0, 0.0)
        if dt > 0.0:
            st.loc_rate_guess = 0.9 * st.loc_rate_guess + 0.1 / max(dt, 1e-3)
        rate = st.kinematic_rate()
        # (a) kinematic prediction from the previous pose
        pred = model.step(x0, y0, yaw0, st.speed, st.delta, dt, st.p)
        lon, lat, dyaw = pose_error(pred, pose)
        sig_v = self.noise.wheel_speed_std * st.p.effective_wheel_radius
        var_p = sp**2 + sp0**2 + (dt * sig_v) ** 2 + (MODEL_TOLERANCE * abs(st.speed)
                                                      * dt) ** 2
        var_y = 2.0 * sy**2 + (dt * (MODEL_TOLERANCE * abs(rate) + YAW_RATE_TOLERANCE)) ** 2
        nis_jump = (lon**2 + lat**2) / var_p + dyaw**2 / var_y
        # (b) prediction from measured motion
        m_rate = st.yaw_rate_imu if st.imu_fresh() else s.yaw_rate
        if math.isfinite(vx0) and math.isfinite(vy0) and math.isfinite(m_rate):
            nis_jump = min(nis_jump, self._measured_motion_nis(
                s, sp, sy, pose, prev, dt, m_rate))
        test = self.test
        test.warn, test.error = jump_bounds(self.ctx.config.checks.false_alarm_rate,
                                            self.ctx.error_rate(),
                                            max(1, round(st.loc_rate_guess)))
        jump_pos = math.hypot(lon, lat)
        f = self.figures
        f["jump_position [m]"] = jump_pos
        f["jump_heading [rad]"] = dyaw
        f["jump_nis [-]"] = nis_jump
        f["jump_nis_warn [-]"] = test.warn
        declared = self.declared_reset_t >= t0 or (sp < 0.5 * sp0)
        jumped = nis_jump >= test.warn
        if jumped and declared:
            counters = self.ctx.counters
            counters["relocalizations"] += 1
            self.ctx.notes.append((s.stamp, f"relocalisation declared: jumped {jump_pos:.2f} m "
                                   "(note, not a fault)"))
            counters["notes"] += 1
            nis_jump = 0.0
        self.book.handle(self.name, test.update(nis_jump, s.stamp), s.stamp,
                         extra={"loc_jump": jump_pos})
        if dt > 0 and not jumped and not math.isfinite(s.yaw_rate):
            st.yaw_rate_loc = dyaw / dt + rate  # pose-only localisation: differenced yaw
        return jumped

    def _measured_motion_nis(self, s: LocalizationSample, sp: float, sy: float,
                             pose: tuple[float, float, float],
                             prev: tuple[float, float, float, float, float, float, float],
                             dt: float, m_rate: float) -> float:
        """Normalised error of the pose against prediction (b) of the module docstring."""
        _, x0, y0, yaw0, sp0, vx0, vy0 = prev
        ym = yaw0 + 0.5 * m_rate * dt
        c, sn = math.cos(ym), math.sin(ym)
        pm = (x0 + (c * vx0 - sn * vy0) * dt, y0 + (sn * vx0 + c * vy0) * dt,
              yaw0 + m_rate * dt)
        lon_m, lat_m, dyaw_m = pose_error(pm, pose)
        a_max = MAX_ACCELERATION
        var_pm = sp**2 + sp0**2 + 2.0 * (dt * self.noise.localization_velocity_std) ** 2 \
            + (0.5 * a_max * dt * dt) ** 2
        var_ym = 2.0 * sy**2 + (dt * self.noise.imu_yaw_rate_std) ** 2 + (
            0.5 * a_max / self.state.p.wheelbase * dt * dt) ** 2
        return (lon_m**2 + lat_m**2) / var_pm + dyaw_m**2 / var_ym

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest position jump [m] of a localisation-fault event."""
        if kind == "localization_fault":
            return [("jump_m", self.figures.get("jump_position [m]", math.nan))]
        return []
