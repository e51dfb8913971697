"""Fused CDR decode + conversion: message bytes straight to a sample, for the hot paths.

Used by the bag reader (``bag.BagSource.iter_samples``) and by the live node's raw
subscriptions. Each converter takes the serialized CDR bytes of one message and returns
the same sample or :class:`~kinematic_monitor.io.convert.Rejected` as decoding with
:mod:`kinematic_monitor.io.cdr` and converting with :mod:`kinematic_monitor.io.convert` would,
and raises :class:`~kinematic_monitor.io.cdr.CdrError` for the same malformed buffers.

How: only the fields the samples use are unpacked (``struct`` layouts with pad bytes, so
the length checks stay those of the full message); the usual case (valid stamp, all used
values finite, usable quaternion, world frame) is handled inline; anything else is handed
to the ``convert`` function with the decoded values, so every rejection reason and detail
comes from ``convert`` itself. Pure (no ROS import). Units and frames: REP 103 / 105, as
in ``convert``.
"""

from __future__ import annotations

import dataclasses
import math
import struct
from collections.abc import Callable

from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample, Sample
from kinematic_monitor.io import cdr
from kinematic_monitor.io.convert import (
    JointMap,
    Rejected,
    chassis_from_joint_state,
    gnss_from_fields,
    imu_from_fields,
    localization_from_odometry,
    localization_from_pose,
    stamp_seconds,
)

__all__ = [
    "Converter",
    "odometry_sample",
    "pose_sample",
    "imu_sample",
    "navsatfix_sample",
    "joint_state_converter",
    "converter_for",
    "FUSED_TYPES",
]

#: bytes in -> sample or Rejected out (CdrError on malformed bytes)
Converter = Callable[[bytes], Sample | Rejected]

_isfinite = math.isfinite
_atan2 = math.atan2
_MIN_QUAT_NORM2 = 1e-12  # as convert: below this a quaternion has no orientation
_NS = 1_000_000_000
_LOW = (struct.error, IndexError, UnicodeDecodeError, ValueError, TypeError)

# (x, y, yaw) block of a 6x6 row-major covariance: rows/cols 0, 1, 5
_COV3 = (0, 1, 5, 6, 7, 11, 30, 31, 35)


def _picker(order: str, total: int, keep: list[int]) -> struct.Struct:
    """Struct reading doubles ``keep`` (ascending) out of ``total`` consecutive doubles.

    Unused doubles are pad bytes, so the struct's size (the length check) is the full block.
    """
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
_ODOM_KEEP = [0, 1, 3, 4, 5, 6, *(7 + i for i in _COV3), 43, 44, 48, *(49 + i for i in _COV3)]
# geometry_msgs/msg/PoseWithCovarianceStamped after the header: 7 + 36 = 43 doubles
_POSE_KEEP = [0, 1, 3, 4, 5, 6, *(7 + i for i in _COV3)]
# sensor_msgs/msg/Imu after the header: quaternion 4, cov 9, gyro 3, cov 9, acc 3, cov 9;
# used: quaternion, orientation cov[0], gyro z, gyro cov[0], acc x y, acc cov[0]
_IMU_KEEP = [0, 1, 2, 3, 4, 15, 16, 25, 26, 28]


class _Layout:
    __slots__ = ("head", "u32", "odom", "pose", "imu", "order")

    def __init__(self, order: str) -> None:
        self.order = order
        self.head = struct.Struct(order + "iII")  # stamp sec, nanosec, frame_id length
        self.u32 = struct.Struct(order + "I")
        self.odom = _picker(order, 85, _ODOM_KEEP)
        self.pose = _picker(order, 43, _POSE_KEEP)
        self.imu = _picker(order, 37, _IMU_KEEP)


_LE = _Layout("<")
_BE = _Layout(">")


def _layout(buf: bytes) -> _Layout:
    """Byte order from the encapsulation header (same rules and messages as cdr)."""
    if len(buf) < 4:
        raise cdr.CdrError(f"buffer of {len(buf)} bytes is shorter than the CDR header")
    kind = buf[1]
    if buf[0] != 0 or kind > 1:
        raise cdr.CdrError(f"unsupported CDR encapsulation {bytes(buf[:2]).hex()}")
    return _LE if kind == 1 else _BE


# frame_id bytes -> (decoded frame_id, frame as stored in samples, accepted as a
# localisation frame): a topic's frame repeats message after message
_FRAMES: dict[bytes, tuple[str, str, bool]] = {}
_FRAMES_MAX = 32


def _frame(raw: bytes) -> tuple[str, str, bool]:
    hit = _FRAMES.get(raw)
    if hit is not None:
        return hit
    text = raw.decode()  # UnicodeDecodeError -> CdrError by the caller, as in cdr
    probe = localization_from_pose(1.0, text, (0.0, 0.0), (0.0, 0.0, 0.0, 1.0), (0.0,) * 36)
    result = (text, text[1:] if text.startswith("/") else text, not isinstance(probe, Rejected))
    if len(_FRAMES) >= _FRAMES_MAX:
        _FRAMES.clear()
    _FRAMES[raw] = result
    return result


# ---- sample construction --------------------------------------------------------------------
# A frozen dataclass's __init__ sets each field through object.__setattr__; setting the slots
# directly makes the same object (equal, same fields) in a third of the time. The field lists
# are checked against the classes here, so a field added to a sample class fails at import.
_new = object.__new__


def _setters(cls: type, names: tuple[str, ...]) -> tuple[Callable[[object, object], None], ...]:
    got = tuple(f.name for f in dataclasses.fields(cls))
    if got != names or hasattr(cls, "__post_init__"):
        raise ImportError(f"fastpath: {cls.__name__} fields are {got}, expected {names}")
    return tuple(cls.__dict__[n].__set__ for n in names)


(_c_stamp, _c_sl, _c_sr, _c_steer, _c_fl, _c_fr, _c_rl, _c_rr, _c_speed) = _setters(
    ChassisSample, ("stamp", "steer_left", "steer_right", "steer", "wheel_front_left",
                    "wheel_front_right", "wheel_rear_left", "wheel_rear_right", "speed"))
(_l_stamp, _l_x, _l_y, _l_yaw, _l_vx, _l_vy, _l_rate, _l_frame, _l_pcov, _l_tcov) = _setters(
    LocalizationSample, ("stamp", "x", "y", "yaw", "vx", "vy", "yaw_rate", "frame_id",
                         "pose_cov", "twist_cov"))
(_i_stamp, _i_rate, _i_ax, _i_ay, _i_yaw) = _setters(
    ImuSample, ("stamp", "yaw_rate", "ax", "ay", "yaw"))
_NAN = math.nan


def _chassis(stamp: float, sl: float, sr: float, fl: float, fr: float, rl: float, rr: float
             ) -> ChassisSample:
    """ChassisSample(stamp, steer_left=sl, steer_right=sr, wheel_*=...), other fields NaN."""
    o = _new(ChassisSample)
    _c_stamp(o, stamp)
    _c_sl(o, sl)
    _c_sr(o, sr)
    _c_steer(o, _NAN)
    _c_fl(o, fl)
    _c_fr(o, fr)
    _c_rl(o, rl)
    _c_rr(o, rr)
    _c_speed(o, _NAN)
    return o


def _localization(stamp: float, x: float, y: float, yaw: float, vx: float, vy: float,
                  rate: float, frame: str, pcov: tuple[float, ...], tcov: tuple[float, ...]
                  ) -> LocalizationSample:
    """LocalizationSample with every field given, in declaration order."""
    o = _new(LocalizationSample)
    _l_stamp(o, stamp)
    _l_x(o, x)
    _l_y(o, y)
    _l_yaw(o, yaw)
    _l_vx(o, vx)
    _l_vy(o, vy)
    _l_rate(o, rate)
    _l_frame(o, frame)
    _l_pcov(o, pcov)
    _l_tcov(o, tcov)
    return o


def _imu_make(stamp: float, rate: float, ax: float, ay: float, yaw: float) -> ImuSample:
    """ImuSample with every field given, in declaration order."""
    o = _new(ImuSample)
    _i_stamp(o, stamp)
    _i_rate(o, rate)
    _i_ax(o, ax)
    _i_ay(o, ay)
    _i_yaw(o, yaw)
    return o


def _malformed(what: str, exc: Exception) -> cdr.CdrError:
    return cdr.CdrError(f"malformed {what}: {exc}")


# ---- nav_msgs/msg/Odometry -----------------------------------------------------------------


def _odometry(buf: bytes) -> Sample | Rejected:
    lay = _layout(buf)
    sec, nanosec, length = lay.head.unpack_from(buf, 4)
    end = 16 + length
    size = len(buf)
    if end > size:
        raise cdr.CdrError(f"frame_id length {length} runs past the buffer")
    raw_frame = buf[16 : end - 1] if length else b""
    # child_frame_id: decoded only to keep cdr's check of its bytes
    pos = end + (-(end - 4) % 4)
    (clen,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    cend = pos + clen
    if cend > size:
        raise cdr.CdrError(f"string length {clen} at offset {pos - 4} runs past the buffer")
    if clen:
        buf[pos : cend - 1].decode()
    else:
        cend = pos
    v = lay.odom.unpack_from(buf, cend + (-(cend - 4) % 8))
    frame_id, stored, world = _frame(raw_frame)
    (px, py, qx, qy, qz, qw,
     c0, c1, c2, c3, c4, c5, c6, c7, c8,
     vx, vy, wz,
     t0, t1, t2, t3, t4, t5, t6, t7, t8) = v  # fmt: skip
    n2 = qx * qx + qy * qy + qz * qz + qw * qw
    if (
        world
        and sec >= 0
        and nanosec < _NS
        and (sec or nanosec)
        and _isfinite(px + py + n2 + vx + vy + wz + c0 + c1 + c2 + c3 + c4 + c5 + c6 + c7 + c8
                      + t0 + t1 + t2 + t3 + t4 + t5 + t6 + t7 + t8)
        and n2 >= _MIN_QUAT_NORM2
    ):
        return _localization(
            sec + nanosec * 1e-9, px, py,
            _atan2(2.0 * (qw * qz + qx * qy), qw * qw + qx * qx - qy * qy - qz * qz),
            vx, vy, wz, stored, v[6:15], v[18:27],
        )  # fmt: skip
    # anything unusual: convert decides (same checks, same reasons)
    pose_cov = [0.0] * 36
    twist_cov = [0.0] * 36
    for k, i in enumerate(_COV3):
        pose_cov[i] = v[6 + k]
        twist_cov[i] = v[18 + k]
    return localization_from_odometry(
        stamp_seconds(sec, nanosec), frame_id, (px, py, 0.0), (qx, qy, qz, qw), pose_cov,
        (vx, vy, 0.0), (0.0, 0.0, wz), twist_cov)


def odometry_sample(buf: bytes) -> Sample | Rejected:
    """nav_msgs/msg/Odometry CDR bytes -> LocalizationSample (pose in frame_id, body twist)."""
    if type(buf) is not bytes:
        buf = bytes(buf)
    try:
        return _odometry(buf)
    except cdr.CdrError:
        raise
    except _LOW as exc:
        raise _malformed("nav_msgs/msg/Odometry", exc) from None


# ---- geometry_msgs/msg/PoseWithCovarianceStamped -------------------------------------------


def _pose(buf: bytes) -> Sample | Rejected:
    lay = _layout(buf)
    sec, nanosec, length = lay.head.unpack_from(buf, 4)
    end = 16 + length
    if end > len(buf):
        raise cdr.CdrError(f"frame_id length {length} runs past the buffer")
    raw_frame = buf[16 : end - 1] if length else b""
    v = lay.pose.unpack_from(buf, end + (-(end - 4) % 8))
    frame_id, stored, world = _frame(raw_frame)
    px, py, qx, qy, qz, qw, c0, c1, c2, c3, c4, c5, c6, c7, c8 = v
    n2 = qx * qx + qy * qy + qz * qz + qw * qw
    if (
        world
        and sec >= 0
        and nanosec < _NS
        and (sec or nanosec)
        and _isfinite(px + py + n2 + c0 + c1 + c2 + c3 + c4 + c5 + c6 + c7 + c8)
        and n2 >= _MIN_QUAT_NORM2
    ):
        return _localization(
            sec + nanosec * 1e-9, px, py,
            _atan2(2.0 * (qw * qz + qx * qy), qw * qw + qx * qx - qy * qy - qz * qz),
            _NAN, _NAN, _NAN, stored, v[6:15], (),
        )  # fmt: skip
    pose_cov = [0.0] * 36
    for k, i in enumerate(_COV3):
        pose_cov[i] = v[6 + k]
    return localization_from_pose(
        stamp_seconds(sec, nanosec), frame_id, (px, py, 0.0), (qx, qy, qz, qw), pose_cov)


def pose_sample(buf: bytes) -> Sample | Rejected:
    """geometry_msgs/msg/PoseWithCovarianceStamped CDR bytes -> LocalizationSample."""
    if type(buf) is not bytes:
        buf = bytes(buf)
    try:
        return _pose(buf)
    except cdr.CdrError:
        raise
    except _LOW as exc:
        raise _malformed("geometry_msgs/msg/PoseWithCovarianceStamped", exc) from None


# ---- sensor_msgs/msg/Imu -------------------------------------------------------------------


def _imu(buf: bytes) -> Sample | Rejected:
    lay = _layout(buf)
    sec, nanosec, length = lay.head.unpack_from(buf, 4)
    end = 16 + length
    if end > len(buf):
        raise cdr.CdrError(f"frame_id length {length} runs past the buffer")
    if length:
        buf[16 : end - 1].decode()  # cdr decodes the frame_id: keep its check
    qx, qy, qz, qw, ocov0, wz, wcov0, ax, ay, acov0 = lay.imu.unpack_from(
        buf, end + (-(end - 4) % 8))
    if (
        sec >= 0
        and nanosec < _NS
        and (sec or nanosec)
        and wcov0 != -1.0
        and acov0 != -1.0
        and ocov0 != -1.0
        and (qx or qy or qz or qw)
    ):
        n2 = qx * qx + qy * qy + qz * qz + qw * qw
        if _isfinite(wz + ax + ay + n2) and n2 >= _MIN_QUAT_NORM2:
            yaw = _atan2(2.0 * (qw * qz + qx * qy), qw * qw + qx * qx - qy * qy - qz * qz)
            return _imu_make(sec + nanosec * 1e-9, wz, ax, ay, yaw)
    # no orientation, absent quantities or anything unusual: convert decides
    return imu_from_fields(
        stamp_seconds(sec, nanosec), (qx, qy, qz, qw), (ocov0,), (0.0, 0.0, wz), (wcov0,),
        (ax, ay, 0.0), (acov0,))


def imu_sample(buf: bytes) -> Sample | Rejected:
    """sensor_msgs/msg/Imu CDR bytes -> ImuSample (body yaw rate, ax, ay, yaw or NaN)."""
    if type(buf) is not bytes:
        buf = bytes(buf)
    try:
        return _imu(buf)
    except cdr.CdrError:
        raise
    except _LOW as exc:
        raise _malformed("sensor_msgs/msg/Imu", exc) from None


# ---- sensor_msgs/msg/NavSatFix (10 Hz at most: decode + convert as they are) -------------


def navsatfix_sample(buf: bytes) -> Sample | Rejected:
    """sensor_msgs/msg/NavSatFix CDR bytes -> GnssSample."""
    f = cdr.decode_navsatfix(buf)
    return gnss_from_fields(
        stamp_seconds(f.sec, f.nanosec), f.status, f.latitude, f.longitude, f.altitude)


# ---- sensor_msgs/msg/JointState ------------------------------------------------------------


def joint_state_converter(jmap: JointMap, max_steer: float = math.pi / 2) -> Converter:
    """Converter of sensor_msgs/msg/JointState CDR bytes -> ChassisSample.

    Behaves as ``cdr.decode_joint_state`` + ``convert.chassis_from_joint_state(..., jmap,
    max_steer)`` (road-wheel angles [rad] after ``jmap.steering_ratio``, wheel speeds
    [rad/s]). Each distinct name block
    (bytes) is decoded and resolved against ``jmap`` once.
    """
    # names-block bytes -> (names, indices or Rejected); drivers repeat the same block
    blocks: dict[bytes, tuple[tuple[str, ...], tuple[int, ...] | Rejected]] = {}
    doubles: dict[tuple[str, int], struct.Struct] = {}
    ns = len(jmap.steering)
    full = ns == 2 and len(jmap.front) == 2 and len(jmap.rear) == 2
    # steering-wheel joints: convert divides finite positions by the map's ratio before
    # the range check (a JointMap without the attribute reports road-wheel angles)
    ratio = float(getattr(jmap, "steering_ratio", 1.0))

    def seq(buf: bytes, pos: int, lay: _Layout) -> tuple[tuple[float, ...], int]:
        pos += -(pos - 4) % 4
        (count,) = lay.u32.unpack_from(buf, pos)
        pos += 4
        if count == 0:
            return (), pos
        pos += -(pos - 4) % 8
        end = pos + 8 * count
        if end > len(buf):
            raise cdr.CdrError(f"float64 sequence of {count} at offset {pos} runs past "
                               "the buffer")
        key = (lay.order, count)
        st = doubles.get(key)
        if st is None:
            if len(doubles) >= 64:
                doubles.clear()
            st = doubles[key] = struct.Struct(f"{lay.order}{count}d")
        return st.unpack_from(buf, pos), end

    def names_at(buf: bytes, pos: int, lay: _Layout
                 ) -> tuple[tuple[str, ...], tuple[int, ...] | Rejected, int]:
        pos += -(pos - 4) % 4
        for block, (names, idx) in blocks.items():
            if buf.startswith(block, pos):
                return names, idx, pos + len(block)
        got, end = cdr._names(buf, pos, lay is _LE and cdr._LE or cdr._BE)
        resolved = jmap.resolve(got)
        if len(blocks) >= 8:
            blocks.clear()
        blocks[bytes(buf[pos:end])] = (got, resolved)
        return got, resolved, end

    def decode(buf: bytes) -> Sample | Rejected:
        lay = _layout(buf)
        sec, nanosec, length = lay.head.unpack_from(buf, 4)
        end = 16 + length
        if end > len(buf):
            raise cdr.CdrError(f"frame_id length {length} runs past the buffer")
        if length:
            buf[16 : end - 1].decode()  # cdr decodes the frame_id: keep its check
        names, idx, pos = names_at(buf, end, lay)
        positions, pos = seq(buf, pos, lay)
        velocities, pos = seq(buf, pos, lay)
        pos += -(pos - 4) % 4  # efforts: only the count is checked, as in cdr
        (count,) = lay.u32.unpack_from(buf, pos)
        if count and pos + 4 + (-(pos) % 8) + 8 * count > len(buf):
            raise cdr.CdrError(f"effort sequence of {count} runs past the buffer")
        n = len(names)
        if (
            full
            and sec >= 0
            and nanosec < _NS
            and (sec or nanosec)
            and len(positions) == n
            and len(velocities) == n
            and type(idx) is tuple
        ):
            sl, sr = positions[idx[0]], positions[idx[1]]
            fl, fr = velocities[idx[2]], velocities[idx[3]]
            rl, rr = velocities[idx[4]], velocities[idx[5]]
            if _isfinite(sl + sr + fl + fr + rl + rr):
                if ratio != 1.0:
                    sl, sr = sl / ratio, sr / ratio
                if abs(sl) <= max_steer and abs(sr) <= max_steer:
                    return _chassis(sec + nanosec * 1e-9, sl, sr, fl, fr, rl, rr)
        return chassis_from_joint_state(
            stamp_seconds(sec, nanosec), names, positions, velocities, jmap, max_steer)

    def joint_state_sample(buf: bytes) -> Sample | Rejected:
        if type(buf) is not bytes:
            buf = bytes(buf)
        try:
            return decode(buf)
        except cdr.CdrError:
            raise
        except _LOW as exc:
            raise _malformed("sensor_msgs/msg/JointState", exc) from None

    return joint_state_sample


#: message types with a fused converter
FUSED_TYPES = (
    "sensor_msgs/msg/JointState",
    "nav_msgs/msg/Odometry",
    "geometry_msgs/msg/PoseWithCovarianceStamped",
    "sensor_msgs/msg/Imu",
    "sensor_msgs/msg/NavSatFix",
)


def converter_for(
    type_name: str, jmap: JointMap | None = None, max_steer: float = math.pi / 2
) -> Converter:
    """The fused converter for a ROS 2 message type (``pkg/msg/Name``).

    JointState needs ``jmap`` (and ``max_steer`` [rad]); ValueError naming the type for a
    type without a fused converter or a JointState without a joint map.
    """
    if type_name == "sensor_msgs/msg/JointState":
        if jmap is None:
            raise ValueError("sensor_msgs/msg/JointState needs a JointMap")
        return joint_state_converter(jmap, max_steer)
    fixed: dict[str, Converter] = {
        "nav_msgs/msg/Odometry": odometry_sample,
        "geometry_msgs/msg/PoseWithCovarianceStamped": pose_sample,
        "sensor_msgs/msg/Imu": imu_sample,
        "sensor_msgs/msg/NavSatFix": navsatfix_sample,
    }
    if type_name not in fixed:
        raise ValueError(f"no fused converter for message type {type_name!r}; "
                         f"available: {', '.join(FUSED_TYPES)}")
    return fixed[type_name]
