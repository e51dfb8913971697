"""Typed, time-stamped samples: the only thing the core consumes.

Adapters (the rclpy node, the bag reader, the simulator) convert messages into these.
Times are header stamps in seconds [s]; all quantities follow REP 103 (SI units,
radians, body x forward, y left, z up, counter-clockwise positive). A field that a
source does not provide is ``math.nan``; adapters never pass NaN for a field they claim
to provide (see ``is_finite`` helpers and the rejection counters in the monitor).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field


@dataclass(frozen=True, slots=True)
class ChassisSample:
    """Steering and wheel speeds at one instant (from JointState or equivalents).

    steer_left / steer_right: road-wheel angles [rad], left turn positive.
    wheel_*: wheel angular speeds [rad/s], positive rolling forward.
    ``steer`` may be given directly as a bicycle-equivalent angle [rad] instead
    of the left/right pair (then both pair fields are NaN).
    ``speed`` [m/s] at the centre of gravity may be given directly (e.g. from a
    TwistStamped) instead of the wheel speeds.
    """

    stamp: float
    steer_left: float = math.nan
    steer_right: float = math.nan
    steer: float = math.nan
    wheel_front_left: float = math.nan
    wheel_front_right: float = math.nan
    wheel_rear_left: float = math.nan
    wheel_rear_right: float = math.nan
    speed: float = math.nan


@dataclass(frozen=True, slots=True)
class LocalizationSample:
    """Localisation output (nav_msgs/Odometry or PoseWithCovarianceStamped).

    x, y [m] and yaw [rad] in ``frame_id`` (``map`` or ``odom``, REP 105);
    vx, vy [m/s] and yaw_rate [rad/s] in the body (child) frame, NaN when absent.
    pose_cov: 3x3 covariance of (x, y, yaw) flattened row-major [m², m·rad, rad²].
    twist_cov: 3x3 covariance of (vx, vy, yaw_rate), row-major, or empty.
    """

    stamp: float
    x: float
    y: float
    yaw: float
    vx: float = math.nan
    vy: float = math.nan
    yaw_rate: float = math.nan
    frame_id: str = "map"
    pose_cov: tuple[float, ...] = field(default=())
    twist_cov: tuple[float, ...] = field(default=())


@dataclass(frozen=True, slots=True)
class ImuSample:
    """IMU reading in the body frame: yaw_rate [rad/s], ax, ay [m/s²], yaw [rad] or NaN."""

    stamp: float
    yaw_rate: float
    ax: float = math.nan
    ay: float = math.nan
    yaw: float = math.nan


@dataclass(frozen=True, slots=True)
class GnssSample:
    """GNSS fix: latitude, longitude [deg, WGS84], altitude [m]."""

    stamp: float
    latitude: float
    longitude: float
    altitude: float = math.nan


Sample = ChassisSample | LocalizationSample | ImuSample | GnssSample


def is_finite(*values: float) -> bool:
    """True when every value is a finite float."""
    return all(math.isfinite(v) for v in values)
