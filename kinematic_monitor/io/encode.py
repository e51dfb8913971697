"""The one CDR encoder: ROS 2 messages from plain values, as serialized bytes.

Encoding (OMG XCDR version 1, little endian, as ROS 2 writes it): the 4-byte encapsulation
header ``00 01 00 00``, then the body, each primitive aligned to its own size counted from
the end of that header; a string is a uint32 length (including the terminating NUL) and
its UTF-8 bytes; a sequence is a uint32 element count and the elements (no padding after
the count of an empty sequence). :class:`CdrWriter` is the small writer; one function per
message type builds that message from plain values (units and frames of the ROS message
definitions). Input types: those the simulator records (JointState, Odometry,
PoseWithCovarianceStamped, Imu, NavSatFix); output types: those the node publishes
(DiagnosticArray, DiagnosticStatus; its prediction is an Odometry). To add a message type,
add one function here and a byte-for-byte test against rosbags' serialiser
(test/io/test_encode.py).

Stamps are given as (sec, nanosec) as in builtin_interfaces/msg/Time; :func:`split_stamp`
turns seconds into that pair.
"""

from __future__ import annotations

import functools
import math
import struct
from collections.abc import Iterable, Sequence

__all__ = [
    "CdrWriter",
    "StatusFields",
    "split_stamp",
    "joint_state",
    "odometry",
    "pose_with_covariance_stamped",
    "imu",
    "navsatfix",
    "diagnostic_status",
    "diagnostic_array",
]

_ENCAPSULATION_LE = b"\x00\x01\x00\x00"
_NS = 1_000_000_000

#: compiled body layouts by struct format (a topic's layout repeats message after message)
_compiled = functools.lru_cache(maxsize=256)(struct.Struct)

#: one DiagnosticStatus: (level (REP 107, 0..3), name, message, hardware_id, key-values)
StatusFields = tuple[int, str, str, str, Sequence[tuple[str, str]]]


def split_stamp(seconds: float) -> tuple[int, int]:
    """(sec, nanosec) of a time [s], rounded to the nanosecond; (0, 0) if non-finite or < 0."""
    if not math.isfinite(seconds) or seconds < 0.0:
        return 0, 0
    return divmod(int(round(seconds * 1e9)), _NS)


class CdrWriter:
    """Collects one message body as a ``struct`` format and its values (little endian)."""

    __slots__ = ("_fmt", "_args", "_pos")

    def __init__(self) -> None:
        self._fmt: list[str] = ["<"]
        self._args: list[object] = []
        self._pos = 0  # body offset [bytes], the alignment origin

    def _put(self, code: str, size: int, values: Sequence[object]) -> None:
        pad = -self._pos % size
        if pad:
            self._fmt.append(f"{pad}x")
        self._fmt.append(f"{len(values)}{code}")
        self._args.extend(values)
        self._pos += pad + size * len(values)

    def int8(self, value: int) -> None:
        """One int8."""
        self._put("b", 1, (value,))

    def uint8(self, value: int) -> None:
        """One uint8 (also ``byte`` / ``octet``)."""
        self._put("B", 1, (value,))

    def uint16(self, value: int) -> None:
        """One uint16."""
        self._put("H", 2, (value,))

    def int32(self, value: int) -> None:
        """One int32."""
        self._put("i", 4, (value,))

    def uint32(self, value: int) -> None:
        """One uint32."""
        self._put("I", 4, (value,))

    def float64s(self, values: Sequence[float]) -> None:
        """A fixed-size run of float64 (an array field or consecutive float64 fields)."""
        if values:
            self._put("d", 8, values)

    def float64_sequence(self, values: Sequence[float]) -> None:
        """A sequence<float64>: count, then the values."""
        self.uint32(len(values))
        self.float64s(values)

    def string(self, text: str) -> None:
        """A string: length including the NUL, the UTF-8 bytes, the NUL."""
        data = text.encode("utf-8") + b"\0"
        self.uint32(len(data))
        self._fmt.append(f"{len(data)}s")
        self._args.append(data)
        self._pos += len(data)

    def string_sequence(self, texts: Sequence[str]) -> None:
        """A sequence<string>."""
        self.uint32(len(texts))
        for text in texts:
            self.string(text)

    def header(self, sec: int, nanosec: int, frame_id: str) -> None:
        """std_msgs/msg/Header: stamp (int32 sec, uint32 nanosec) and frame_id."""
        self._put("i", 4, (sec,))
        self._put("I", 4, (nanosec,))
        self.string(frame_id)

    def to_bytes(self) -> bytes:
        """The serialized message: encapsulation header and body."""
        return _ENCAPSULATION_LE + _compiled("".join(self._fmt)).pack(*self._args)


# ---- input types ----------------------------------------------------------------------------


def joint_state(sec: int, nanosec: int, frame_id: str, names: Sequence[str],
                positions: Sequence[float], velocities: Sequence[float],
                efforts: Sequence[float] = ()) -> bytes:
    """sensor_msgs/msg/JointState: positions [rad or m], velocities [rad/s or m/s]."""
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.string_sequence(names)
    w.float64_sequence(positions)
    w.float64_sequence(velocities)
    w.float64_sequence(efforts)
    return w.to_bytes()


def odometry(sec: int, nanosec: int, frame_id: str, child_frame_id: str,
             position: Sequence[float], orientation: Sequence[float],
             pose_covariance: Sequence[float], linear: Sequence[float],
             angular: Sequence[float], twist_covariance: Sequence[float]) -> bytes:
    """nav_msgs/msg/Odometry: pose in ``frame_id`` [m], quaternion (x, y, z, w), twist in
    ``child_frame_id`` [m/s, rad/s], 6x6 row-major covariances."""
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.string(child_frame_id)
    w.float64s((*position, *orientation, *pose_covariance, *linear, *angular,
                *twist_covariance))
    return w.to_bytes()


def pose_with_covariance_stamped(sec: int, nanosec: int, frame_id: str,
                                 position: Sequence[float], orientation: Sequence[float],
                                 pose_covariance: Sequence[float]) -> bytes:
    """geometry_msgs/msg/PoseWithCovarianceStamped: pose in ``frame_id``, 6x6 covariance."""
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.float64s((*position, *orientation, *pose_covariance))
    return w.to_bytes()


def imu(sec: int, nanosec: int, frame_id: str, orientation: Sequence[float],
        orientation_covariance: Sequence[float], angular_velocity: Sequence[float],
        angular_velocity_covariance: Sequence[float], linear_acceleration: Sequence[float],
        linear_acceleration_covariance: Sequence[float]) -> bytes:
    """sensor_msgs/msg/Imu (body frame; rad/s, m/s²; 3x3 covariances)."""
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.float64s((*orientation, *orientation_covariance, *angular_velocity,
                *angular_velocity_covariance, *linear_acceleration,
                *linear_acceleration_covariance))
    return w.to_bytes()


def navsatfix(sec: int, nanosec: int, frame_id: str, status: int, service: int,
              latitude: float, longitude: float, altitude: float,
              position_covariance: Sequence[float], position_covariance_type: int) -> bytes:
    """sensor_msgs/msg/NavSatFix: WGS84 latitude, longitude [deg], altitude [m]."""
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.int8(status)
    w.uint16(service)
    w.float64s((latitude, longitude, altitude, *position_covariance))
    w.uint8(position_covariance_type)
    return w.to_bytes()


# ---- output types ---------------------------------------------------------------------------


def _status(w: CdrWriter, status: StatusFields) -> None:
    level, name, message, hardware_id, values = status
    w.uint8(level)
    w.string(name)
    w.string(message)
    w.string(hardware_id)
    w.uint32(len(values))
    for key, value in values:
        w.string(key)
        w.string(value)


def diagnostic_status(level: int, name: str, message: str, hardware_id: str,
                      values: Sequence[tuple[str, str]]) -> bytes:
    """diagnostic_msgs/msg/DiagnosticStatus (level: REP 107, 0 OK .. 3 STALE)."""
    w = CdrWriter()
    _status(w, (level, name, message, hardware_id, values))
    return w.to_bytes()


def diagnostic_array(sec: int, nanosec: int, frame_id: str,
                     statuses: Iterable[StatusFields]) -> bytes:
    """diagnostic_msgs/msg/DiagnosticArray: a header and one DiagnosticStatus each."""
    items = list(statuses)
    w = CdrWriter()
    w.header(sec, nanosec, frame_id)
    w.uint32(len(items))
    for status in items:
        _status(w, status)
    return w.to_bytes()
