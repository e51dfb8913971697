"""Reference implementations kept as test oracles (not part of the package).

- full CDR decoders (``decode_*``): every field of the five input message types, read with
  their own ``struct`` layouts, independent of ``kinematic_monitor.io.decode``; checked
  against rosbags' deserialiser in test_oracles.py;
- message-object converters (``*_from_msg``): rclpy or rosbags message objects -> samples
  through the rules of ``kinematic_monitor.io.convert``.

Together (decode, then the rules on the decoded fields) they give what the one decoder per
type must give for any bytes.
"""

from __future__ import annotations

import functools
import math
import struct
from collections.abc import Callable
from typing import Any, NamedTuple, TypeVar

from kinematic_monitor.core.samples import (
    ChassisSample,
    GnssSample,
    ImuSample,
    LocalizationSample,
)
from kinematic_monitor.io import convert
from kinematic_monitor.io.cdr import CdrError  # the error type the package raises
from kinematic_monitor.io.convert import JointMap, Rejected, stamp_seconds

__all__ = [
    "CdrError",
    "chassis_from_msg",
    "localization_from_odometry_msg",
    "localization_from_pose_msg",
    "imu_from_msg",
    "gnss_from_msg",
    "JointStateFields",
    "OdometryFields",
    "PoseFields",
    "ImuFields",
    "NavSatFixFields",
    "decode_joint_state",
    "decode_odometry",
    "decode_pose_with_covariance_stamped",
    "decode_imu",
    "decode_navsatfix",
    "DECODERS",
]

Buffer = bytes | memoryview
_T = TypeVar("_T")
_BODY = 4  # alignment origin: end of the encapsulation header




class _Layout:
    """Precompiled structs for one byte order."""

    __slots__ = ("head", "u32", "f64", "odom", "pose", "imu", "navsat", "i8", "u16", "u8")

    def __init__(self, order: str) -> None:
        self.head = struct.Struct(order + "iII")  # stamp sec, nanosec, frame_id length
        self.u32 = struct.Struct(order + "I")
        self.f64 = struct.Struct(order + "d")
        self.odom = struct.Struct(order + "85d")  # pose 7, cov 36, twist 6, cov 36
        self.pose = struct.Struct(order + "43d")  # pose 7, cov 36
        self.imu = struct.Struct(order + "37d")  # quat 4, cov 9, gyro 3, cov 9, acc 3, cov 9
        self.navsat = struct.Struct(order + "12d")  # lat, lon, alt, cov 9
        self.i8 = struct.Struct(order + "b")
        self.u16 = struct.Struct(order + "H")
        self.u8 = struct.Struct(order + "B")


_LE = _Layout("<")
_BE = _Layout(">")


class JointStateFields(NamedTuple):
    """Used fields of sensor_msgs/msg/JointState (positions [rad], velocities [rad/s])."""

    sec: int
    nanosec: int
    frame_id: str
    names: tuple[str, ...]
    positions: tuple[float, ...]
    velocities: tuple[float, ...]


class OdometryFields(NamedTuple):
    """Used fields of nav_msgs/msg/Odometry (pose in frame_id, twist in child frame)."""

    sec: int
    nanosec: int
    frame_id: str
    child_frame_id: str
    position: tuple[float, float, float]
    orientation: tuple[float, float, float, float]  # x, y, z, w
    pose_covariance: tuple[float, ...]  # 36, row-major (x, y, z, roll, pitch, yaw)
    linear: tuple[float, float, float]
    angular: tuple[float, float, float]
    twist_covariance: tuple[float, ...]  # 36, row-major


class PoseFields(NamedTuple):
    """Used fields of geometry_msgs/msg/PoseWithCovarianceStamped."""

    sec: int
    nanosec: int
    frame_id: str
    position: tuple[float, float, float]
    orientation: tuple[float, float, float, float]
    pose_covariance: tuple[float, ...]


class ImuFields(NamedTuple):
    """Used fields of sensor_msgs/msg/Imu (body frame; rad/s, m/s²)."""

    sec: int
    nanosec: int
    frame_id: str
    orientation: tuple[float, float, float, float]
    orientation_covariance: tuple[float, ...]
    angular_velocity: tuple[float, float, float]
    angular_velocity_covariance: tuple[float, ...]
    linear_acceleration: tuple[float, float, float]
    linear_acceleration_covariance: tuple[float, ...]


class NavSatFixFields(NamedTuple):
    """Used fields of sensor_msgs/msg/NavSatFix (degrees, metres)."""

    sec: int
    nanosec: int
    frame_id: str
    status: int
    service: int
    latitude: float
    longitude: float
    altitude: float
    position_covariance: tuple[float, ...]
    position_covariance_type: int


def _layout(buf: Buffer) -> _Layout:
    if len(buf) < 4:
        raise CdrError(f"buffer of {len(buf)} bytes is shorter than the CDR header")
    kind = buf[1]
    if buf[0] != 0 or kind > 1:
        raise CdrError(f"unsupported CDR encapsulation {bytes(buf[:2]).hex()}")
    return _LE if kind == 1 else _BE


def _align(pos: int, size: int) -> int:
    return pos + (-(pos - _BODY) % size)


def _string(buf: Buffer, pos: int, lay: _Layout) -> tuple[str, int]:
    """Read a CDR string at ``pos`` (aligned here); returns (text, end position)."""
    pos = _align(pos, 4)
    (length,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    end = pos + length
    if end > len(buf):
        raise CdrError(f"string length {length} at offset {pos - 4} runs past the buffer")
    if length == 0:
        return "", pos
    return bytes(buf[pos : end - 1]).decode(), end


def _header(buf: Buffer, lay: _Layout) -> tuple[int, int, str, int]:
    """Header stamp and frame_id; returns (sec, nanosec, frame_id, end position)."""
    sec, nanosec, length = lay.head.unpack_from(buf, _BODY)
    end = 16 + length
    if end > len(buf):
        raise CdrError(f"frame_id length {length} runs past the buffer")
    return sec, nanosec, (bytes(buf[16 : end - 1]).decode() if length else ""), end


def _guard(what: str) -> Callable[[Callable[[Buffer], _T]], Callable[[Buffer], _T]]:
    """Turn every low-level decoding error of ``what`` into a CdrError."""

    def wrap(func: Callable[[Buffer], _T]) -> Callable[[Buffer], _T]:
        @functools.wraps(func)
        def decode(buf: Buffer) -> _T:
            try:
                return func(buf)
            except CdrError:
                raise
            except (struct.error, IndexError, UnicodeDecodeError, ValueError, TypeError) as exc:
                raise CdrError(f"malformed {what}: {exc}") from None

        return decode

    return wrap


# A names block (count, then length-prefixed strings) is self-delimiting, so bytes equal
# to an already parsed block parse to the same names; JointState names repeat verbatim
# message after message, so each distinct block is decoded once.
_NAME_BLOCKS: list[tuple[_Layout, bytes, tuple[str, ...]]] = []
_NAME_BLOCKS_MAX = 8


def _names(buf: Buffer, pos: int, lay: _Layout) -> tuple[tuple[str, ...], int]:
    pos = _align(pos, 4)
    for known_lay, block, names_known in _NAME_BLOCKS:
        if known_lay is lay and buf[pos : pos + len(block)] == block:
            return names_known, pos + len(block)
    start = pos
    (count,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    end_buf = len(buf)
    if count * 4 > end_buf - pos:
        raise CdrError(f"name count {count} cannot fit in the buffer")
    names: list[str] = []
    u32 = lay.u32.unpack_from
    for _ in range(count):
        pos = _align(pos, 4)
        (length,) = u32(buf, pos)
        pos += 4
        end = pos + length
        if end > end_buf:
            raise CdrError(f"joint name length {length} at offset {pos - 4} runs past the buffer")
        names.append(bytes(buf[pos : end - 1]).decode() if length else "")
        pos = end
    result = tuple(names)
    if len(_NAME_BLOCKS) >= _NAME_BLOCKS_MAX:
        _NAME_BLOCKS.pop()
    _NAME_BLOCKS.insert(0, (lay, bytes(buf[start:pos]), result))
    return result, pos


#: compiled float64-sequence layouts by (layout, count); JointState counts repeat
_DOUBLES: dict[tuple[_Layout, int], struct.Struct] = {}
_DOUBLES_MAX = 64


def _doubles(buf: Buffer, pos: int, lay: _Layout) -> tuple[tuple[float, ...], int]:
    pos = _align(pos, 4)
    (count,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    if count == 0:
        return (), pos
    pos = _align(pos, 8)
    end = pos + 8 * count
    if end > len(buf):
        raise CdrError(f"float64 sequence of {count} at offset {pos} runs past the buffer")
    layout = _DOUBLES.get((lay, count))
    if layout is None:
        if len(_DOUBLES) >= _DOUBLES_MAX:
            _DOUBLES.clear()
        layout = _DOUBLES[(lay, count)] = struct.Struct(
            ("<" if lay is _LE else ">") + f"{count}d")
    return layout.unpack_from(buf, pos), end


@_guard("sensor_msgs/msg/JointState")
def decode_joint_state(buf: Buffer) -> JointStateFields:
    """Header, names, positions and velocities of a JointState (efforts are skipped)."""
    lay = _layout(buf)
    sec, nanosec, frame_id, pos = _header(buf, lay)
    names, pos = _names(buf, pos, lay)
    positions, pos = _doubles(buf, pos, lay)
    velocities, pos = _doubles(buf, pos, lay)
    # efforts: validate only the count so a truncated tail is noticed
    pos = _align(pos, 4)
    (count,) = lay.u32.unpack_from(buf, pos)
    if count and _align(pos + 4, 8) + 8 * count > len(buf):
        raise CdrError(f"effort sequence of {count} runs past the buffer")
    return JointStateFields(sec, nanosec, frame_id, names, positions, velocities)


@_guard("nav_msgs/msg/Odometry")
def decode_odometry(buf: Buffer) -> OdometryFields:
    """Header, child frame, pose with covariance and twist with covariance."""
    lay = _layout(buf)
    sec, nanosec, frame_id, pos = _header(buf, lay)
    child, pos = _string(buf, pos, lay)
    v = lay.odom.unpack_from(buf, _align(pos, 8))
    return OdometryFields(
        sec,
        nanosec,
        frame_id,
        child,
        v[0:3],
        v[3:7],
        v[7:43],
        v[43:46],
        v[46:49],
        v[49:85],
    )


@_guard("geometry_msgs/msg/PoseWithCovarianceStamped")
def decode_pose_with_covariance_stamped(buf: Buffer) -> PoseFields:
    """Header and pose with covariance."""
    lay = _layout(buf)
    sec, nanosec, frame_id, pos = _header(buf, lay)
    v = lay.pose.unpack_from(buf, _align(pos, 8))
    return PoseFields(sec, nanosec, frame_id, v[0:3], v[3:7], v[7:43])


@_guard("sensor_msgs/msg/Imu")
def decode_imu(buf: Buffer) -> ImuFields:
    """Header, orientation, angular velocity and linear acceleration with covariances."""
    lay = _layout(buf)
    sec, nanosec, frame_id, pos = _header(buf, lay)
    v = lay.imu.unpack_from(buf, _align(pos, 8))
    return ImuFields(
        sec, nanosec, frame_id, v[0:4], v[4:13], v[13:16], v[16:25], v[25:28], v[28:37]
    )


@_guard("sensor_msgs/msg/NavSatFix")
def decode_navsatfix(buf: Buffer) -> NavSatFixFields:
    """Header, fix status and service, position [deg, deg, m] and its covariance."""
    lay = _layout(buf)
    sec, nanosec, frame_id, pos = _header(buf, lay)
    (status,) = lay.i8.unpack_from(buf, pos)
    pos = _align(pos + 1, 2)
    (service,) = lay.u16.unpack_from(buf, pos)
    pos = _align(pos + 2, 8)
    v = lay.navsat.unpack_from(buf, pos)
    (cov_type,) = lay.u8.unpack_from(buf, pos + 96)
    return NavSatFixFields(
        sec, nanosec, frame_id, status, service, v[0], v[1], v[2], v[3:12], cov_type
    )


#: decoder by ROS 2 message type name
DECODERS = {
    "sensor_msgs/msg/JointState": decode_joint_state,
    "nav_msgs/msg/Odometry": decode_odometry,
    "geometry_msgs/msg/PoseWithCovarianceStamped": decode_pose_with_covariance_stamped,
    "sensor_msgs/msg/Imu": decode_imu,
    "sensor_msgs/msg/NavSatFix": decode_navsatfix,
}


# ---- message objects -> samples (rclpy or rosbags classes share the field names) ----


def _stamp(msg: Any) -> float:
    st = msg.header.stamp
    return stamp_seconds(int(st.sec), int(st.nanosec))


def _xyz(v: Any) -> tuple[float, float, float]:
    return (float(v.x), float(v.y), float(v.z))


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(map(float, values))


def _xyzw(q: Any) -> tuple[float, float, float, float]:
    return (float(q.x), float(q.y), float(q.z), float(q.w))


def chassis_from_msg(
    msg: Any, jmap: JointMap, max_steer: float = math.pi / 2
) -> ChassisSample | Rejected:
    """sensor_msgs/msg/JointState object -> ChassisSample (see chassis_from_joint_state)."""
    return convert.chassis_from_joint_state(
        _stamp(msg),
        tuple(msg.name),
        _floats(msg.position),
        _floats(msg.velocity),
        jmap,
        max_steer,
    )


def localization_from_odometry_msg(msg: Any) -> LocalizationSample | Rejected:
    """nav_msgs/msg/Odometry object -> LocalizationSample."""
    pose, twist = msg.pose, msg.twist
    return convert.localization_from_odometry(
        _stamp(msg),
        str(msg.header.frame_id),
        _xyz(pose.pose.position),
        _xyzw(pose.pose.orientation),
        _floats(pose.covariance),
        _xyz(twist.twist.linear),
        _xyz(twist.twist.angular),
        _floats(twist.covariance),
    )


def localization_from_pose_msg(msg: Any) -> LocalizationSample | Rejected:
    """geometry_msgs/msg/PoseWithCovarianceStamped object -> LocalizationSample."""
    pose = msg.pose
    return convert.localization_from_pose(
        _stamp(msg),
        str(msg.header.frame_id),
        _xyz(pose.pose.position),
        _xyzw(pose.pose.orientation),
        _floats(pose.covariance),
    )


def imu_from_msg(msg: Any) -> ImuSample | Rejected:
    """sensor_msgs/msg/Imu object -> ImuSample."""
    return convert.imu_from_fields(
        _stamp(msg),
        _xyzw(msg.orientation),
        _floats(msg.orientation_covariance),
        _xyz(msg.angular_velocity),
        _floats(msg.angular_velocity_covariance),
        _xyz(msg.linear_acceleration),
        _floats(msg.linear_acceleration_covariance),
    )


def gnss_from_msg(msg: Any) -> GnssSample | Rejected:
    """sensor_msgs/msg/NavSatFix object -> GnssSample."""
    return convert.gnss_from_fields(
        _stamp(msg),
        int(msg.status.status),
        float(msg.latitude),
        float(msg.longitude),
        float(msg.altitude),
    )
