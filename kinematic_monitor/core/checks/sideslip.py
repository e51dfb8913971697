"""Sideslip: the measured body sideslip at the CG against the kinematic one.

Residual [rad]: atan2(vy_cg, vx) − β_kinematic, β_kinematic = atan(l_r·tan δ / L)
(Rajamani 2012), from the localisation twist moved to the CG (``inputs.localization.
reference_x``). Allowance: relative (``MODEL_TOLERANCE``), absolute (``SIDESLIP_TOLERANCE``)
and proportional to the lateral acceleration (``SIDESLIP_GRADIENT_TOLERANCE``: the linear
tyre range's sideslip change). A CUSUM on standardised block means raises the alarm.
"""

from __future__ import annotations

import math

from kinematic_monitor.core import model
from kinematic_monitor.core.checks.base import MODEL_TOLERANCE, BlockCheck, CheckContext, CheckInfo
from kinematic_monitor.core.checks.yaw_rate import LATERAL_KINDS

#: absolute sideslip error allowed to the kinematic prediction [rad] (common practice,
#: no source)
SIDESLIP_TOLERANCE = 0.01
#: linear-range sideslip change per lateral acceleration tolerated [rad/(m/s²)] (common
#: practice, no source)
SIDESLIP_GRADIENT_TOLERANCE = 0.015


class SideslipCheck(BlockCheck):
    """See the module docstring. ``allowance``: the latest sample's dead band [rad]."""

    info = CheckInfo("sideslip", "sideslip", unit="rad", peak_kinds=LATERAL_KINDS)

    def __init__(self, ctx: CheckContext) -> None:
        super().__init__(ctx, ("joint_states", "localization"))
        self.allowance = 0.0

    def on_velocity(self, vx: float, vy_cg: float, rate: float, moving: bool) -> None:
        """A body velocity at the CG [m/s] (localisation twist) with the yaw rate used."""
        st = self.state
        p = st.p
        beta_m = math.atan2(vy_cg, vx) if vx >= 0 else math.atan2(-vy_cg, -vx)
        beta_k = model.sideslip(st.delta, p)
        n = self.noise
        noise = (n.localization_velocity_std / max(abs(vx), st.min_speed, 0.1)) ** 2 + (
            p.cg_to_rear_axle / p.wheelbase * n.steering_angle_std) ** 2
        ay = abs(st.ay) if math.isfinite(st.ay) else (
            abs(vx * rate) if math.isfinite(rate) else 0.0)
        allow = MODEL_TOLERANCE * abs(beta_k) + SIDESLIP_TOLERANCE + (
            SIDESLIP_GRADIENT_TOLERANCE * ay)
        self.allowance = allow
        self.block.add(beta_m - beta_k, noise, allow, moving)
        f = self.figures
        f["sideslip_measured [rad]"] = beta_m
        f["sideslip_kinematic [rad]"] = beta_k

    def peaks(self, kind: str) -> list[tuple[str, float]]:
        """Largest sideslip residual [rad] of a lateral, calibration or localisation event."""
        if kind in LATERAL_KINDS:
            f = self.figures
            return [("sideslip_residual_rad", f.get("sideslip_measured [rad]", math.nan)
                     - f.get("sideslip_kinematic [rad]", math.nan))]
        return []
