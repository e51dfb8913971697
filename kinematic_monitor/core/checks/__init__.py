"""The checks, one module each, and the set the monitor runs (:func:`build_checks`).

Adding a check: a module here with one :class:`~kinematic_monitor.core.checks.base.Check`
subclass (its residual, test, level, status, figures and peaks) and its test file under
``test/core/checks/``; then one line in :func:`build_checks` and the hook in the monitor that
feeds it the samples it needs (``core/monitor.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

from kinematic_monitor.core.checks.base import Check, CheckContext
from kinematic_monitor.core.checks.consistency import FilterConsistencyCheck
from kinematic_monitor.core.checks.drift import DriftCheck
from kinematic_monitor.core.checks.grip import GripCheck
from kinematic_monitor.core.checks.heading import HeadingCheck
from kinematic_monitor.core.checks.inputs import InputCheck
from kinematic_monitor.core.checks.loc_jump import LocalizationJumpCheck
from kinematic_monitor.core.checks.sideslip import SideslipCheck
from kinematic_monitor.core.checks.wheel_scale import WheelScaleCheck
from kinematic_monitor.core.checks.wheel_slip import WheelSlipCheck
from kinematic_monitor.core.checks.yaw_rate import YawRateCheck
from kinematic_monitor.core.motion import INPUTS


@dataclass
class CheckSet:
    """The monitor's checks by role, and the orders it uses them in."""

    yaw_rate: YawRateCheck
    sideslip: SideslipCheck
    drift: DriftCheck
    wheel_slip: WheelSlipCheck
    wheel_scale: WheelScaleCheck
    loc_jump: LocalizationJumpCheck
    consistency: FilterConsistencyCheck
    heading: HeadingCheck
    grip: GripCheck
    inputs: tuple[InputCheck, ...]

    @property
    def statuses_order(self) -> tuple[Check, ...]:
        """The checks with a status, in ``/diagnostics`` order (inputs last)."""
        return (self.yaw_rate, self.sideslip, self.drift, self.wheel_slip, self.wheel_scale,
                self.loc_jump, self.consistency, self.heading, self.grip, *self.inputs)

    @property
    def block_order(self) -> tuple[YawRateCheck | SideslipCheck | WheelScaleCheck
                                   | HeadingCheck, ...]:
        """The block-mean checks, in decision order."""
        return (self.yaw_rate, self.sideslip, self.wheel_scale, self.heading)

    @property
    def peaks_order(self) -> tuple[Check, ...]:
        """The checks with peak figures, in the order an event lists them."""
        return (self.yaw_rate, self.grip, self.sideslip, self.drift, self.loc_jump,
                self.wheel_slip, *self.inputs)


def build_checks(ctx: CheckContext) -> CheckSet:
    """Every check, built from the shared context (state, event book, configuration)."""
    yaw = YawRateCheck(ctx)
    side = SideslipCheck(ctx)
    return CheckSet(
        yaw_rate=yaw, sideslip=side, drift=DriftCheck(ctx, yaw, side),
        wheel_slip=WheelSlipCheck(ctx), wheel_scale=WheelScaleCheck(ctx),
        loc_jump=LocalizationJumpCheck(ctx), consistency=FilterConsistencyCheck(ctx),
        heading=HeadingCheck(ctx), grip=GripCheck(ctx),
        inputs=tuple(InputCheck(ctx, name) for name in INPUTS
                     if name != "imu" or ctx.state.imu_enabled),
    )


__all__ = ["Check", "CheckContext", "CheckSet", "build_checks"]
