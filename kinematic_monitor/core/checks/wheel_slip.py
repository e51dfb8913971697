"""Wheel slip: each axle's longitudinal slip ratio against thresholds.

Slip ratio κ = (Ω·R_e − V_x) / V_x (ISO 8855 / Pacejka sign: positive when driving, −1 for a
locked wheel), the wheel-centre ground speed V_x from the localisation twist at the CG, the
yaw rate and the geometry (front wheels along their own road-wheel angles), the denominator
guarded at ``checks.min_speed``. The block mean of the worse axle is compared with
``checks.slip_ratio_warn`` / ``checks.slip_ratio_error``; the alarm points to
``longitudinal_slip`` (wheel spin or lock).
"""

from __future__ import annotations

import math

from kinematic_monitor.core.checks.base import (
    CheckContext,
    CheckInfo,
    ThresholdCheck,
    ThresholdTest,
)

#: event kinds that keep this check's slip ratios as peak figures
PEAK_KINDS = ("longitudinal_slip", "calibration_bias")


def slip_ratio(wheel_speed: float, ground_speed: float, min_speed: float) -> float:
    """Longitudinal slip ratio κ = (Ω·R_e − V_x) / max(|V_x|, min_speed) [-].

    ``wheel_speed`` = Ω·R_e [m/s], ``ground_speed`` = V_x [m/s] along the wheel heading.
    ISO 8855 / Pacejka sign convention: positive when driving (spin), −1 for a locked
    wheel at speed. The guard ``min_speed`` [m/s] keeps the ratio finite at standstill.
    """
    if not min_speed > 0.0:
        raise ValueError(f"min_speed must be positive, got {min_speed}")
    return (wheel_speed - ground_speed) / max(abs(ground_speed), min_speed)


class WheelSlipCheck(ThresholdCheck):
    """See the module docstring."""

    info = CheckInfo("slip_ratio", "wheel slip", peak_kinds=PEAK_KINDS)

    def __init__(self, ctx: CheckContext) -> None:
        c = ctx.config.checks
        super().__init__(ctx, ThresholdTest(c.slip_ratio_warn, c.slip_ratio_error,
                                            c.min_duration, c.clear_duration),
                         ("joint_states", "localization"))
        self.period = ctx.period
        self._front: list[float] = []
        self._rear: list[float] = []

    def on_velocity(self, vx: float, vy: float, rate: float, moving: bool
                    ) -> tuple[float, float] | None:
        """Axle slip ratios (front, rear) [-] for a CG body velocity [m/s] and yaw rate
        [rad/s]; None when not moving or without four wheel speeds. Marks the state's rear
        wheels as slipping beyond checks.slip_ratio_warn (the kinematic speed then comes
        from the localisation)."""
        st = self.state
        if st.wheels is None or not moving:
            st.rear_slipping = False
            return None
        p = st.p
        r_e = p.effective_wheel_radius
        w = 0.5 * p.track_width
        rate = rate if math.isfinite(rate) else 0.0
        fl, fr, rl, rr = st.wheels
        dl, dr = st.steer_pair
        if not (math.isfinite(dl) and math.isfinite(dr)):
            dl = dr = st.delta
        lf = p.cg_to_front_axle
        g_fl = (vx - w * rate) * math.cos(dl) + (vy + lf * rate) * math.sin(dl)
        g_fr = (vx + w * rate) * math.cos(dr) + (vy + lf * rate) * math.sin(dr)
        g_front = 0.5 * (g_fl + g_fr)
        k_front = slip_ratio(0.5 * r_e * (fl + fr), g_front, st.min_speed)
        k_rear = slip_ratio(0.5 * r_e * (rl + rr), vx, st.min_speed)
        st.rear_slipping = abs(k_rear) >= self.test.warn
        self._front.append(k_front)
        self._rear.append(k_rear)
        return k_front, k_rear

    def decide(self, t: float, active: bool) -> None:
        """Decision at grid time ``t`` [s]: the worse axle's mean slip ratio of the block."""
        fr, rr = self._front, self._rear
        if fr and rr and active:
            kf, kr = sum(fr) / len(fr), sum(rr) / len(rr)
            worst = kf if abs(kf) >= abs(kr) else kr
            self.figures.update({"slip_ratio_front [-]": kf, "slip_ratio_rear [-]": kr})
            self.book.handle(self.name, self.test.update(worst, t, span=self.period), t)
        elif not active and self.test.level:
            self.book.handle(self.name, self.test.update(0.0, t), t)
        self._front = []
        self._rear = []

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest front and rear slip ratios [-] of a wheel-slip or calibration event."""
        if kind in PEAK_KINDS:
            f = self.figures
            return [("slip_ratio_front", f.get("slip_ratio_front [-]", math.nan)),
                    ("slip_ratio_rear", f.get("slip_ratio_rear [-]", math.nan))]
        return []
