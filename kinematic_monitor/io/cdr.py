"""Reading CDR-encoded ROS 2 messages: byte order, alignment, strings, sequences, layouts.

Encoding rules (OMG XCDR version 1 as used by ROS 2): a 4-byte encapsulation header whose
second byte is 1 for little endian and 0 for big endian, then the message body, where each
primitive is aligned to its own size counted from the end of that 4-byte header; strings
are a uint32 length (including the terminating NUL) followed by the bytes; sequences are a
uint32 element count followed by the elements.

:class:`Layout` holds, per byte order, the precompiled ``struct`` layouts of the fixed
blocks the decoders (:mod:`kinematic_monitor.io.decode`) read: only the used values are
unpacked, the others are pad bytes, so each struct's size (its length check) is that of
the whole block. Every reader raises :class:`CdrError` on a malformed buffer; other
low-level errors (``struct.error``, ``UnicodeDecodeError`` ...) are turned into one by the
decoders. Pure (no ROS import).
"""

from __future__ import annotations

import struct

__all__ = [
    "CdrError",
    "Layout",
    "LE",
    "BE",
    "BODY",
    "COV3",
    "layout_of",
    "read_names",
    "read_doubles",
]

BODY = 4  # alignment origin: end of the encapsulation header

#: (x, y, yaw) block of a 6x6 row-major covariance: rows/cols 0, 1, 5
COV3 = (0, 1, 5, 6, 7, 11, 30, 31, 35)


class CdrError(ValueError):
    """A CDR buffer is truncated, has an unknown encapsulation or bogus lengths."""


def _picker(order: str, total: int, keep: list[int]) -> struct.Struct:
    """Struct reading doubles ``keep`` (ascending) out of ``total`` consecutive doubles."""
    fmt, at = order, 0
    for i in keep:
        if i > at:
            fmt += f"{8 * (i - at)}x"
        fmt += "d"
        at = i + 1
    if total > at:
        fmt += f"{8 * (total - at)}x"
    return struct.Struct(fmt)


# nav_msgs/msg/Odometry after the child frame: pose.pose (7), pose.covariance (36),
# twist.twist (6), twist.covariance (36) = 85 doubles; used: position x y, quaternion,
# pose cov (x, y, yaw) block, linear x y, angular z, twist cov (vx, vy, wz) block
_ODOM_KEEP = [0, 1, 3, 4, 5, 6, *(7 + i for i in COV3), 43, 44, 48, *(49 + i for i in COV3)]
# geometry_msgs/msg/PoseWithCovarianceStamped after the header: 7 + 36 = 43 doubles
_POSE_KEEP = [0, 1, 3, 4, 5, 6, *(7 + i for i in COV3)]
# sensor_msgs/msg/Imu after the header: quaternion 4, cov 9, gyro 3, cov 9, acc 3, cov 9;
# used: quaternion, orientation cov[0], gyro z, gyro cov[0], acc x y, acc cov[0]
_IMU_KEEP = [0, 1, 2, 3, 4, 15, 16, 25, 26, 28]


class Layout:
    """Precompiled structs for one byte order (``order``: '<' or '>')."""

    __slots__ = ("order", "head", "u32", "i8", "u16", "u8", "odom", "pose", "imu", "navsat",
                 "_doubles")

    def __init__(self, order: str) -> None:
        self.order = order
        self.head = struct.Struct(order + "iII")  # stamp sec, nanosec, frame_id length
        self.u32 = struct.Struct(order + "I")
        self.i8 = struct.Struct(order + "b")
        self.u16 = struct.Struct(order + "H")
        self.u8 = struct.Struct(order + "B")
        self.odom = _picker(order, 85, _ODOM_KEEP)
        self.pose = _picker(order, 43, _POSE_KEEP)
        self.imu = _picker(order, 37, _IMU_KEEP)
        self.navsat = struct.Struct(order + "12d")  # lat, lon, alt, covariance 9
        # float64-sequence layouts by count (JointState counts repeat)
        self._doubles: dict[int, struct.Struct] = {}

    def doubles(self, count: int) -> struct.Struct:
        """Struct of ``count`` consecutive float64 (cached)."""
        st = self._doubles.get(count)
        if st is None:
            if len(self._doubles) >= 64:
                self._doubles.clear()
            st = self._doubles[count] = struct.Struct(f"{self.order}{count}d")
        return st


LE = Layout("<")
BE = Layout(">")


def layout_of(buf: bytes) -> Layout:
    """Byte order from the encapsulation header; CdrError if short or unknown."""
    if len(buf) < 4:
        raise CdrError(f"buffer of {len(buf)} bytes is shorter than the CDR header")
    kind = buf[1]
    if buf[0] != 0 or kind > 1:
        raise CdrError(f"unsupported CDR encapsulation {bytes(buf[:2]).hex()}")
    return LE if kind == 1 else BE


# A names block (count, then length-prefixed strings) is self-delimiting, so bytes equal
# to an already parsed block parse to the same names; JointState names repeat verbatim
# message after message, so each distinct block is decoded once.
_NAME_BLOCKS: list[tuple[Layout, bytes, tuple[str, ...]]] = []
_NAME_BLOCKS_MAX = 8


def read_names(buf: bytes, pos: int, lay: Layout) -> tuple[tuple[str, ...], int]:
    """A sequence<string> at ``pos`` (aligned here): (names, end position)."""
    pos += -(pos - BODY) % 4
    for known_lay, block, names_known in _NAME_BLOCKS:
        if known_lay is lay and buf.startswith(block, pos):
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
        pos += -(pos - BODY) % 4
        (length,) = u32(buf, pos)
        pos += 4
        end = pos + length
        if end > end_buf:
            raise CdrError(f"joint name length {length} at offset {pos - 4} runs past the buffer")
        names.append(buf[pos : end - 1].decode() if length else "")
        pos = end
    result = tuple(names)
    if len(_NAME_BLOCKS) >= _NAME_BLOCKS_MAX:
        _NAME_BLOCKS.pop()
    _NAME_BLOCKS.insert(0, (lay, bytes(buf[start:pos]), result))
    return result, pos


def read_doubles(buf: bytes, pos: int, lay: Layout) -> tuple[tuple[float, ...], int]:
    """A sequence<float64> at ``pos`` (aligned here): (values, end position)."""
    pos += -(pos - BODY) % 4
    (count,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    if count == 0:
        return (), pos
    pos += -(pos - BODY) % 8
    end = pos + 8 * count
    if end > len(buf):
        raise CdrError(f"float64 sequence of {count} at offset {pos} runs past the buffer")
    values: tuple[float, ...] = lay.doubles(count).unpack_from(buf, pos)
    return values, end
