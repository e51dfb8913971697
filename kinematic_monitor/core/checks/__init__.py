"""The checks, one module each, and the set the monitor runs (:func:`build_checks`).

Adding a check: a module here with one :class:`~kinematic_monitor.core.checks.base.Check`
subclass (its residual, test, level, status, figures and peaks) and its test file under
``test/core/checks/``; then one line in :func:`build_checks` and the hook in the monitor that
feeds it the samples it needs (``core/monitor.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from kinematic_monitor.core.checks.base import Check, CusumTest, EventSink, cusum_thresholds
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
from kinematic_monitor.core.motion import INPUTS, MotionState

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig


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


def build_checks(config: MonitorConfig, state: MotionState, book: EventSink, period: float,
                 notes: list[tuple[float, str]], counters: dict[str, int]) -> CheckSet:
    """Every check, configured from ``config`` (decisions every ``period`` [s])."""
    c, n = config.checks, config.noise
    rate = float(c.false_alarm_rate)
    err_rate = rate * (1.0 - float(c.error_confidence))
    k, h_warn, h_error = cusum_thresholds(rate, err_rate, 1.0 / period)
    _, hd_warn, hd_error = cusum_thresholds(rate, err_rate, 1.0 / float(c.drift_horizon))

    def cusum(drift: bool = False) -> CusumTest:
        return CusumTest(k, hd_warn if drift else h_warn, hd_error if drift else h_error,
                         float(c.min_duration), float(c.clear_duration))

    yaw = YawRateCheck(state, cusum(), book, period, n.steering_angle_std, n.wheel_speed_std,
                       n.imu_yaw_rate_std, n.localization_velocity_std)
    side = SideslipCheck(state, cusum(), book, period, n.steering_angle_std,
                         n.localization_velocity_std)
    inputs = tuple(InputCheck(state, book, name) for name in INPUTS
                   if name != "imu" or state.imu_enabled)
    return CheckSet(
        yaw_rate=yaw,
        sideslip=side,
        drift=DriftCheck(state, cusum(drift=True), book, yaw, side, float(c.drift_horizon),
                         n.steering_angle_std, n.imu_yaw_rate_std),
        wheel_slip=WheelSlipCheck(state, book, period, float(c.slip_ratio_warn),
                                  float(c.slip_ratio_error), float(c.min_duration),
                                  float(c.clear_duration)),
        wheel_scale=WheelScaleCheck(state, cusum(), book, period, n.wheel_speed_std,
                                    n.localization_velocity_std),
        loc_jump=LocalizationJumpCheck(state, book, notes, counters, rate, err_rate,
                                       float(c.clear_duration), n.wheel_speed_std,
                                       n.localization_velocity_std, n.imu_yaw_rate_std),
        consistency=FilterConsistencyCheck(state, int(c.nis_window), rate),
        heading=HeadingCheck(state, cusum(), book, period, float(c.heading_time_constant),
                             float(c.heading_tolerance), n.imu_yaw_rate_std),
        grip=GripCheck(state, float(c.friction_assumed), float(c.min_duration),
                       float(c.clear_duration)),
        inputs=inputs,
    )


__all__ = ["Check", "CheckSet", "build_checks"]
