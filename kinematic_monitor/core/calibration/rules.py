"""Which samples count as kinematic driving: the thresholds of the sample selection."""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class SelectionRules:
    """Which samples count as kinematic driving. Defaults: common practice, no source."""

    min_speed: float = 3.0  # [m/s]
    max_lateral_accel: float = 2.0  # [m/s^2] well inside |a_y| <= 0.5 mu g (Polack 2017)
    k_max_lateral_accel: float = 3.0  # [m/s^2] upper end of the understeer fit (linear range)
    max_long_accel: float = 1.0  # [m/s^2]
    max_steer_rate: float = 0.05  # [rad/s] road-wheel angle rate (steady inputs)
    max_yaw_accel: float = 0.1  # [rad/s^2]
    max_wheel_slip: float = 0.03  # [-] rear wheel/ground speed ratio off the drive's median
    max_position_jump: float = 0.3  # [m] pose step not explained by the twist
    max_yaw_jump: float = 0.05  # [rad]
    max_gap: float = 0.2  # [s] largest gap between chassis samples to interpolate over
    smooth_time: float = 0.2  # [s] moving-average window before differentiating
    fit_smooth_time: float = 0.5  # [s] moving-average window of the fitted signals
    min_run: float = 1.0  # [s] shorter usable runs are dropped
    segment_length: float = 5.0  # [s] bootstrap block length
    min_usable: float = 60.0  # [s] least usable driving for a calibration
    min_k_spread: float = 0.5  # [m/s^2] std. dev. of a_y needed to fit K
    standstill_speed: float = 0.05  # [m/s] below it (localisation and wheels) the car stands
    min_imu_usable: float = 30.0  # [s] least IMU data with localisation for the IMU estimates

    def __post_init__(self) -> None:
        for name, value in vars(self).items():
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0.0):
                raise ValueError(f"selection rule {name}={value!r} must be a positive number")
