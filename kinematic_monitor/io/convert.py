"""The input rules: plain message values -> samples, with counted rejections.

The one home of every check an input message meets (stamps, NaN, quaternions, frames,
covariances, joint names, steering range, GNSS fix) and of the rejection reasons
(:data:`REASONS`). The decoders in :mod:`kinematic_monitor.io.decode` hand anything that
is not the usual case to these functions; the single-value inputs
(:mod:`kinematic_monitor.io.scalar_inputs`) use them too. :class:`JointMap` finds the
configured joints in a JointState name list.

Each function returns a sample or a :class:`Rejected` whose ``reason`` is one of the short
stable strings in :data:`REASONS`, so callers can count rejections per reason. Pure (no
ROS import). Units and frames follow REP 103 and the ROS message definitions: metres,
radians, seconds, body x forward / y left / z up, counter-clockwise positive.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample

__all__ = [
    "REASONS",
    "LOCALIZATION_FRAMES",
    "Rejected",
    "JointMap",
    "stamp_seconds",
    "chassis_from_joint_state",
    "localization_from_odometry",
    "localization_from_pose",
    "imu_from_fields",
    "gnss_from_fields",
    "stored_frame",
    "world_frame",
    "MIN_QUAT_NORM2",
]

#: every rejection reason a converter can give, with its meaning
REASONS: dict[str, str] = {
    "bad_stamp": "header stamp zero, negative or with nanoseconds >= 1e9",
    "nan": "NaN or infinite value in a used field",
    "length_mismatch": "JointState position/velocity length differs from the name count",
    "missing_joint": "a configured joint is not in the JointState name list",
    "duplicate_joint": "a configured joint appears more than once in the name list",
    "steer_out_of_range": "road-wheel angle beyond the physical steering range",
    "bad_quaternion": "orientation quaternion with (almost) zero norm",
    "no_yaw_rate": "Imu angular velocity flagged absent (covariance[0] == -1)",
    "no_fix": "NavSatFix status STATUS_NO_FIX",
    "out_of_range": "latitude or longitude outside [-90, 90] / [-180, 180] degrees",
    "malformed": "message bytes could not be decoded",
    "missing_field": "the configured field path is not in this message (e.g. short sequence)",
    "unexpected_frame": "localisation pose not in a map or odom frame (REP 105)",
}

#: frames a localisation pose may be given in (REP 105 world-fixed frames; a tf prefix such
#: as ``car1/map`` is allowed): a pose in a body frame or an unknown frame is rejected
LOCALIZATION_FRAMES = ("map", "odom")

#: below this squared norm a quaternion has no usable orientation
MIN_QUAT_NORM2 = 1e-12


@dataclass(frozen=True, slots=True)
class Rejected:
    """A message not turned into a sample; ``reason`` is a key of :data:`REASONS`."""

    reason: str
    detail: str = ""


# shared instances for the common reasons (rejections are frequent on bad data)
BAD_STAMP = Rejected("bad_stamp")
NAN_VALUE = Rejected("nan")
STEER_OUT_OF_RANGE = Rejected("steer_out_of_range")
_LENGTH = Rejected("length_mismatch")
_MISSING = Rejected("missing_joint")
_DUPLICATE = Rejected("duplicate_joint")
_QUAT = Rejected("bad_quaternion")
_NO_RATE = Rejected("no_yaw_rate")
_NO_FIX = Rejected("no_fix")
_RANGE = Rejected("out_of_range")

_isfinite = math.isfinite


def stamp_seconds(sec: int, nanosec: int) -> float:
    """Header stamp as seconds [s]; NaN for a zero, negative or malformed stamp."""
    if sec < 0 or not 0 <= nanosec < 1_000_000_000 or (sec == 0 and nanosec == 0):
        return math.nan
    return sec + nanosec * 1e-9


class JointMap:
    """Where the configured steering and wheel joints sit in a JointState name list.

    ``steering_joints`` is (left, right); ``front_wheel_joints`` and
    ``rear_wheel_joints`` are (left, right) or empty when the vehicle does not report
    them. Resolved index tuples are cached per name tuple, so a driver that always
    sends the same names costs one dict lookup per message.

    ``steering_ratio`` [-] is ``vehicle.steering_ratio``: when it is not 1 the steering
    joints report steering-wheel angles and :func:`chassis_from_joint_state` divides their
    positions by it, so samples always hold road-wheel angles (the core never divides).
    """

    __slots__ = ("steering", "front", "rear", "steering_ratio", "_cache")

    _CACHE_MAX = 64

    def __init__(
        self,
        steering_joints: Sequence[str],
        front_wheel_joints: Sequence[str] = (),
        rear_wheel_joints: Sequence[str] = (),
        steering_ratio: float = 1.0,
    ) -> None:
        self.steering = tuple(steering_joints)
        ratio = float(steering_ratio)
        if not (_isfinite(ratio) and ratio > 0.0):
            raise ValueError(f"steering_ratio must be a finite positive number, "
                             f"got {steering_ratio!r}")
        self.steering_ratio = ratio
        self.front = tuple(front_wheel_joints)
        self.rear = tuple(rear_wheel_joints)
        for label, group in (
            ("steering_joints", self.steering),
            ("front_wheel_joints", self.front),
            ("rear_wheel_joints", self.rear),
        ):
            if len(group) not in (0, 2):
                raise ValueError(f"{label} must be [left, right] or [], got {list(group)!r}")
            if any(not isinstance(n, str) or not n for n in group):
                raise ValueError(f"{label} must hold non-empty joint names, got {list(group)!r}")
        if not self.steering and not (self.front or self.rear):
            raise ValueError("steering_joints may be [] only when wheel joints are given "
                             "(steering then comes from another input)")
        every = self.steering + self.front + self.rear
        if len(set(every)) != len(every):
            raise ValueError(f"configured joint names must be distinct, got {list(every)!r}")
        self._cache: dict[tuple[str, ...], tuple[int, ...] | Rejected] = {}

    @property
    def joints(self) -> tuple[str, ...]:
        """All configured joint names: steering, then front, then rear wheels."""
        return self.steering + self.front + self.rear

    def resolve(self, names: Sequence[str]) -> tuple[int, ...] | Rejected:
        """Indices of :attr:`joints` in ``names``, or why they cannot be found."""
        key = names if isinstance(names, tuple) else tuple(names)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        result: tuple[int, ...] | Rejected
        index: dict[str, int] = {}
        dup: set[str] = set()
        for i, name in enumerate(key):
            if name in index:
                dup.add(name)
            index[name] = i
        wanted = self.joints
        missing = [n for n in wanted if n not in index]
        dups = [n for n in wanted if n in dup]
        if missing:
            result = Rejected("missing_joint", ", ".join(missing))
        elif dups:
            result = Rejected("duplicate_joint", ", ".join(dups))
        else:
            result = tuple(index[n] for n in wanted)
        if len(self._cache) >= self._CACHE_MAX:
            self._cache.clear()
        self._cache[key] = result
        return result


def chassis_from_joint_state(
    stamp: float,
    names: Sequence[str],
    positions: Sequence[float],
    velocities: Sequence[float],
    jmap: JointMap,
    max_steer: float = math.pi / 2,
) -> ChassisSample | Rejected:
    """Steering angles [rad] (joint positions) and wheel speeds [rad/s] (joint velocities).

    Steering positions are divided by ``jmap.steering_ratio`` (steering-wheel to road-wheel
    angle; 1 = the joints are road wheels). ``max_steer`` [rad] is the largest physically
    possible road-wheel angle; larger magnitudes (after the division) are rejected.
    Velocities may be empty when no wheel joints are configured; positions may be empty
    when no steering joints are (steering from another input).
    """
    if not (stamp > 0.0 and _isfinite(stamp)):
        return BAD_STAMP
    n = len(names)
    ns = len(jmap.steering)
    if ns and len(positions) != n:
        return _LENGTH
    idx = jmap.resolve(names)
    if isinstance(idx, Rejected):
        return idx
    if ns:
        sl = positions[idx[0]]
        sr = positions[idx[1]]
        if not (_isfinite(sl) and _isfinite(sr)):
            return NAN_VALUE
        if jmap.steering_ratio != 1.0:
            sl, sr = sl / jmap.steering_ratio, sr / jmap.steering_ratio
        if abs(sl) > max_steer or abs(sr) > max_steer:
            return STEER_OUT_OF_RANGE
    else:
        sl = sr = math.nan
    if len(idx) == ns:
        return ChassisSample(stamp, steer_left=sl, steer_right=sr)
    if len(velocities) != n:
        return _LENGTH
    w = [velocities[i] for i in idx[ns:]]
    for v in w:
        if not _isfinite(v):
            return NAN_VALUE
    nan = math.nan
    if len(w) == 4:
        fl, fr, rl, rr = w
    elif jmap.front:
        fl, fr, rl, rr = w[0], w[1], nan, nan
    else:
        fl, fr, rl, rr = nan, nan, w[0], w[1]
    return ChassisSample(
        stamp,
        steer_left=sl,
        steer_right=sr,
        wheel_front_left=fl,
        wheel_front_right=fr,
        wheel_rear_left=rl,
        wheel_rear_right=rr,
    )


def _yaw(q: Sequence[float]) -> float | Rejected:
    """Yaw [rad] of quaternion (x, y, z, w), normalising it; Rejected if unusable."""
    x, y, z, w = q
    n2 = x * x + y * y + z * z + w * w
    if not _isfinite(n2):
        return NAN_VALUE
    if n2 < MIN_QUAT_NORM2:
        return _QUAT
    # ZYX yaw; both atan2 arguments scale with the squared norm, so the normalised
    # quaternion gives the same angle (as transforms3d.euler.quat2euler, axes 'rzyx')
    return math.atan2(2.0 * (w * z + x * y), w * w + x * x - y * y - z * z)


def _cov3(cov36: Sequence[float]) -> tuple[float, ...] | Rejected:
    """(x, y, yaw) block [rows/cols 0, 1, 5] of a 6x6 row-major covariance."""
    if len(cov36) != 36:
        return Rejected("length_mismatch", f"covariance of {len(cov36)} values, expected 36")
    c = (
        cov36[0], cov36[1], cov36[5],
        cov36[6], cov36[7], cov36[11],
        cov36[30], cov36[31], cov36[35],
    )  # fmt: skip
    for v in c:
        if not _isfinite(v):
            return Rejected("nan", "covariance")
    return c


def stored_frame(frame_id: str) -> str:
    """The frame id as samples hold it: without a leading '/' (ROS 1 style)."""
    return frame_id[1:] if frame_id.startswith("/") else frame_id


def world_frame(frame: str) -> bool:
    """True for a REP 105 world-fixed frame (``map``, ``odom``, optionally tf-prefixed)."""
    return frame.rsplit("/", 1)[-1] in LOCALIZATION_FRAMES


def localization_from_pose(
    stamp: float,
    frame_id: str,
    position: Sequence[float],
    orientation: Sequence[float],
    pose_covariance: Sequence[float],
) -> LocalizationSample | Rejected:
    """Pose (x, y [m], yaw [rad]) in ``frame_id`` from a PoseWithCovariance's fields.

    ``orientation`` is (x, y, z, w), normalised here; ``pose_covariance`` is the 6x6
    row-major covariance of (x, y, z, roll, pitch, yaw).
    """
    if not (stamp > 0.0 and _isfinite(stamp)):
        return BAD_STAMP
    px, py = position[0], position[1]
    if not (_isfinite(px) and _isfinite(py)):
        return NAN_VALUE
    yaw = _yaw(orientation)
    if isinstance(yaw, Rejected):
        return yaw
    cov = _cov3(pose_covariance)
    if isinstance(cov, Rejected):
        return cov
    frame = stored_frame(frame_id)
    if not world_frame(frame):
        return Rejected("unexpected_frame", repr(frame_id)[:80])
    return LocalizationSample(stamp, px, py, yaw, frame_id=frame, pose_cov=cov)


def localization_from_odometry(
    stamp: float,
    frame_id: str,
    position: Sequence[float],
    orientation: Sequence[float],
    pose_covariance: Sequence[float],
    linear: Sequence[float],
    angular: Sequence[float],
    twist_covariance: Sequence[float],
) -> LocalizationSample | Rejected:
    """Pose in ``frame_id`` plus body-frame twist (vx, vy [m/s], yaw rate [rad/s]).

    Fields as in nav_msgs/msg/Odometry: twist in the child frame, covariances 6x6
    row-major over (x, y, z, roll, pitch, yaw) and (vx, vy, vz, wx, wy, wz).
    """
    pose = localization_from_pose(stamp, frame_id, position, orientation, pose_covariance)
    if isinstance(pose, Rejected):
        return pose
    vx, vy, wz = linear[0], linear[1], angular[2]
    if not (_isfinite(vx) and _isfinite(vy) and _isfinite(wz)):
        return NAN_VALUE
    tcov = _cov3(twist_covariance)
    if isinstance(tcov, Rejected):
        return tcov
    return LocalizationSample(
        stamp,
        pose.x,
        pose.y,
        pose.yaw,
        vx=vx,
        vy=vy,
        yaw_rate=wz,
        frame_id=pose.frame_id,
        pose_cov=pose.pose_cov,
        twist_cov=tcov,
    )


def imu_from_fields(
    stamp: float,
    orientation: Sequence[float],
    orientation_covariance: Sequence[float],
    angular_velocity: Sequence[float],
    angular_velocity_covariance: Sequence[float],
    linear_acceleration: Sequence[float],
    linear_acceleration_covariance: Sequence[float],
) -> ImuSample | Rejected:
    """Body-frame yaw rate [rad/s], ax, ay [m/s²] and yaw [rad] from Imu fields.

    Per the sensor_msgs/msg/Imu definition, covariance element 0 set to -1 means the
    quantity is not provided: then yaw (orientation) or ax/ay (acceleration) are NaN,
    and a missing angular velocity rejects the message ('no_yaw_rate'). An all-zero
    orientation quaternion is also read as "no orientation" (common practice, no source).
    """
    if not (stamp > 0.0 and _isfinite(stamp)):
        return BAD_STAMP
    if len(angular_velocity_covariance) and angular_velocity_covariance[0] == -1.0:
        return _NO_RATE
    wz = angular_velocity[2]
    if not _isfinite(wz):
        return NAN_VALUE
    if len(linear_acceleration_covariance) and linear_acceleration_covariance[0] == -1.0:
        ax = ay = math.nan
    else:
        ax, ay = linear_acceleration[0], linear_acceleration[1]
        if not (_isfinite(ax) and _isfinite(ay)):
            return NAN_VALUE
    yaw = math.nan
    absent = len(orientation_covariance) > 0 and orientation_covariance[0] == -1.0
    if not absent and any(orientation):
        got = _yaw(orientation)
        if isinstance(got, Rejected):
            return got
        yaw = got
    return ImuSample(stamp, wz, ax, ay, yaw)


# sensor_msgs/msg/NavSatStatus.STATUS_NO_FIX
_STATUS_NO_FIX = -1


def gnss_from_fields(
    stamp: float,
    status: int,
    latitude: float,
    longitude: float,
    altitude: float,
) -> GnssSample | Rejected:
    """WGS84 fix: latitude, longitude [deg], altitude [m] (NaN allowed for altitude)."""
    if not (stamp > 0.0 and _isfinite(stamp)):
        return BAD_STAMP
    if status == _STATUS_NO_FIX:
        return _NO_FIX
    if not (_isfinite(latitude) and _isfinite(longitude)):
        return NAN_VALUE
    if not (-90.0 <= latitude <= 90.0 and -180.0 <= longitude <= 180.0):
        return _RANGE
    if math.isinf(altitude):
        return NAN_VALUE
    return GnssSample(stamp, latitude, longitude, altitude)
