"""Grip in use: the lateral acceleration against the kinematic-consistency envelope.

|a_y| / g is a lower bound on the friction coefficient in use; the kinematic bicycle model is
consistent while |a_y| ≤ 0.5·μ·g (Polack et al., IEEE IV 2017; the 0.5 factor from memory),
μ = ``checks.friction_assumed``. Status only: leaving the envelope is not a fault, it says
the kinematic checks are being asked more than their model can answer.
"""

from __future__ import annotations

import math

from kinematic_monitor.core.checks.base import (
    CheckContext,
    CheckInfo,
    ThresholdCheck,
    ThresholdTest,
)
from kinematic_monitor.core.checks.yaw_rate import LATERAL_KINDS
from kinematic_monitor.core.levels import OK
from kinematic_monitor.core.model import GRAVITY, kinematic_envelope


class GripCheck(ThresholdCheck):
    """See the module docstring."""

    info = CheckInfo("grip", "grip", peak_kinds=LATERAL_KINDS)

    def __init__(self, ctx: CheckContext) -> None:
        c = ctx.config.checks
        super().__init__(ctx, ThresholdTest(kinematic_envelope(c.friction_assumed), math.inf,
                                            c.min_duration, c.clear_duration))

    def lateral_acceleration(self) -> float:
        """|a_y| source: the IMU's, else speed · measured yaw rate [m/s²] (NaN: unknown)."""
        st = self.state
        if math.isfinite(st.ay):
            return st.ay
        if math.isfinite(st.speed) and math.isfinite(st.meas_rate):
            return st.speed * st.meas_rate
        return math.nan

    def decide(self, t: float) -> None:
        """Decision at grid time ``t`` [s]."""
        ay = self.lateral_acceleration()
        if math.isfinite(ay):
            self.figures.update({"lateral_accel [m/s^2]": ay,
                                 "grip_in_use [g]": abs(ay) / GRAVITY,
                                 "kinematic_envelope [m/s^2]": self.test.warn})
            self.test.update(abs(ay), t)

    def status_message(self, level: int, active: bool, summary: str | None,
                       inactive: str) -> str:
        """Inside or outside the envelope (meaningful at any speed)."""
        if level == OK:
            return "within the kinematic envelope"
        return "outside the kinematic-consistency envelope 0.5*mu*g"

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest |a_y| [g] of a lateral, calibration or localisation event."""
        if kind in LATERAL_KINDS:
            ay = self.state.ay
            return [("lateral_accel_g", abs(ay) / GRAVITY if math.isfinite(ay) else math.nan)]
        return []
