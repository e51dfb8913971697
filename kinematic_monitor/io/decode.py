"""The one decoder per message type: CDR bytes -> sample, or a counted rejection.

Used by the bag reader and the live node's raw subscriptions (the hot path of both), and
by the benchmark harness. Each decoder takes the serialized CDR bytes of one message and
returns a sample or a :class:`~kinematic_monitor.io.convert.Rejected` (never raises):
bytes that cannot be decoded give reason ``malformed`` with what was wrong in ``detail``.

How: only the fields the samples use are unpacked (layouts in :mod:`.cdr`); the usual
case (valid stamp, every used value finite, usable quaternion, world frame, joints found,
steering in range) is accepted inline; anything else is handed with the decoded values to
the rules in :mod:`kinematic_monitor.io.convert`, the one home of every check and rejection
reason. The inline test accepts nothing those rules would reject (test/io/test_decode.py
checks both against reference decoders). Pure (no ROS import). Units and frames: REP 103 /
105, as in ``convert``.
"""

from __future__ import annotations

import dataclasses
import math
import struct
from collections.abc import Callable

from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample, Sample
from kinematic_monitor.io import convert
from kinematic_monitor.io.cdr import (
    BODY,
    COV3,
    CdrError,
    Layout,
    layout_of,
    read_doubles,
    read_names,
)
from kinematic_monitor.io.convert import JointMap, Rejected, stamp_seconds

__all__ = [
    "Decoder",
    "JOINT_STATE",
    "ODOMETRY",
    "POSE_WITH_COVARIANCE",
    "IMU",
    "NAVSATFIX",
    "DECODED_TYPES",
    "odometry",
    "pose_with_covariance_stamped",
    "imu",
    "navsatfix",
    "joint_state_decoder",
    "decoder_for",
]

#: bytes in -> sample or Rejected out
Decoder = Callable[[bytes], Sample | Rejected]

JOINT_STATE = "sensor_msgs/msg/JointState"
ODOMETRY = "nav_msgs/msg/Odometry"
POSE_WITH_COVARIANCE = "geometry_msgs/msg/PoseWithCovarianceStamped"
IMU = "sensor_msgs/msg/Imu"
NAVSATFIX = "sensor_msgs/msg/NavSatFix"
#: the message types with a decoder here
DECODED_TYPES = (JOINT_STATE, ODOMETRY, POSE_WITH_COVARIANCE, IMU, NAVSATFIX)

_isfinite = math.isfinite
_atan2 = math.atan2
_MIN_QUAT_NORM2 = convert.MIN_QUAT_NORM2
_NS = 1_000_000_000
_NAN = math.nan
# what malformed bytes raise below the CdrError checks
_LOW = (CdrError, struct.error, IndexError, UnicodeDecodeError, ValueError, TypeError)


def _guard(what: str, decode: Callable[[bytes], Sample | Rejected]) -> Decoder:
    """``decode`` with every decoding error turned into a 'malformed' rejection."""

    def guarded(buf: bytes) -> Sample | Rejected:
        if type(buf) is not bytes:
            buf = bytes(buf)
        try:
            return decode(buf)
        except _LOW as exc:
            text = str(exc) if isinstance(exc, CdrError) else f"malformed {what}: {exc}"
            return Rejected("malformed", text[:200])

    guarded.__name__ = guarded.__qualname__ = decode.__name__.lstrip("_")
    guarded.__doc__ = decode.__doc__
    return guarded


def _head(buf: bytes, lay: Layout) -> tuple[int, int, bytes, int]:
    """Header: (sec, nanosec, frame_id bytes, end position)."""
    sec, nanosec, length = lay.head.unpack_from(buf, BODY)
    end = 16 + length
    if end > len(buf):
        raise CdrError(f"frame_id length {length} runs past the buffer")
    return sec, nanosec, (buf[16 : end - 1] if length else b""), end


# frame_id bytes -> (decoded frame_id, frame as stored in samples, accepted as a
# localisation frame): a topic's frame repeats message after message
_FRAMES: dict[bytes, tuple[str, str, bool]] = {}
_FRAMES_MAX = 32


def _frame(raw: bytes) -> tuple[str, str, bool]:
    hit = _FRAMES.get(raw)
    if hit is not None:
        return hit
    text = raw.decode()
    stored = convert.stored_frame(text)
    result = (text, stored, convert.world_frame(stored))
    if len(_FRAMES) >= _FRAMES_MAX:
        _FRAMES.clear()
    _FRAMES[raw] = result
    return result


def _cov36(block: tuple[float, ...], at: int) -> list[float]:
    """A 6x6 covariance holding the (x, y, yaw) block ``block[at:at + 9]``, zeros elsewhere."""
    cov = [0.0] * 36
    for k, i in enumerate(COV3):
        cov[i] = block[at + k]
    return cov


# ---- sample construction --------------------------------------------------------------------
# A frozen dataclass's __init__ sets each field through object.__setattr__; setting the slots
# directly makes the same object (equal, same fields) in a third of the time. The field lists
# are checked against the classes here, so a field added to a sample class fails at import.
_new = object.__new__


def _setters(cls: type, names: tuple[str, ...]) -> tuple[Callable[[object, object], None], ...]:
    got = tuple(f.name for f in dataclasses.fields(cls))
    if got != names or hasattr(cls, "__post_init__"):
        raise ImportError(f"decode: {cls.__name__} fields are {got}, expected {names}")
    return tuple(cls.__dict__[n].__set__ for n in names)


(_c_stamp, _c_sl, _c_sr, _c_steer, _c_fl, _c_fr, _c_rl, _c_rr, _c_speed) = _setters(
    ChassisSample, ("stamp", "steer_left", "steer_right", "steer", "wheel_front_left",
                    "wheel_front_right", "wheel_rear_left", "wheel_rear_right", "speed"))
(_l_stamp, _l_x, _l_y, _l_yaw, _l_vx, _l_vy, _l_rate, _l_frame, _l_pcov, _l_tcov) = _setters(
    LocalizationSample, ("stamp", "x", "y", "yaw", "vx", "vy", "yaw_rate", "frame_id",
                         "pose_cov", "twist_cov"))
(_i_stamp, _i_rate, _i_ax, _i_ay, _i_yaw) = _setters(
    ImuSample, ("stamp", "yaw_rate", "ax", "ay", "yaw"))


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


def _localization(stamp: float, v: tuple[float, ...], vx: float, vy: float, rate: float,
                  frame: str, tcov: tuple[float, ...]) -> LocalizationSample:
    """LocalizationSample from the picked pose block ``v`` (x, y, quaternion, cov3, ...)."""
    qx, qy, qz, qw = v[2], v[3], v[4], v[5]
    o = _new(LocalizationSample)
    _l_stamp(o, stamp)
    _l_x(o, v[0])
    _l_y(o, v[1])
    # ZYX yaw, as convert (both atan2 arguments scale with the squared norm)
    _l_yaw(o, _atan2(2.0 * (qw * qz + qx * qy), qw * qw + qx * qx - qy * qy - qz * qz))
    _l_vx(o, vx)
    _l_vy(o, vy)
    _l_rate(o, rate)
    _l_frame(o, frame)
    _l_pcov(o, v[6:15])
    _l_tcov(o, tcov)
    return o


def _imu_sample(stamp: float, rate: float, ax: float, ay: float, yaw: float) -> ImuSample:
    """ImuSample with every field given, in declaration order."""
    o = _new(ImuSample)
    _i_stamp(o, stamp)
    _i_rate(o, rate)
    _i_ax(o, ax)
    _i_ay(o, ay)
    _i_yaw(o, yaw)
    return o


# ---- nav_msgs/msg/Odometry and geometry_msgs/msg/PoseWithCovarianceStamped -----------------


def _pose_ok(sec: int, nanosec: int, world: bool, v: tuple[float, ...], total: float) -> bool:
    """The usual case of a pose: stamp valid, world frame, ``total`` (a sum of every used
    value) finite and the quaternion usable."""
    qx, qy, qz, qw = v[2], v[3], v[4], v[5]
    n2 = qx * qx + qy * qy + qz * qz + qw * qw
    return (world and sec >= 0 and nanosec < _NS and (sec or nanosec) != 0
            and _isfinite(total + n2) and n2 >= _MIN_QUAT_NORM2)


def _odometry(buf: bytes) -> Sample | Rejected:
    """nav_msgs/msg/Odometry CDR bytes -> LocalizationSample (pose in frame_id, body twist)."""
    lay = layout_of(buf)
    sec, nanosec, raw_frame, end = _head(buf, lay)
    # child_frame_id: decoded only to check its bytes
    pos = end + (-(end - BODY) % 4)
    (clen,) = lay.u32.unpack_from(buf, pos)
    pos += 4
    cend = pos + clen
    if cend > len(buf):
        raise CdrError(f"string length {clen} at offset {pos - 4} runs past the buffer")
    if clen:
        buf[pos : cend - 1].decode()
    v = lay.odom.unpack_from(buf, cend + (-(cend - BODY) % 8))
    frame_id, stored, world = _frame(raw_frame)
    if _pose_ok(sec, nanosec, world, v, sum(v)):
        return _localization(sec + nanosec * 1e-9, v, v[15], v[16], v[17], stored, v[18:27])
    # anything unusual: convert decides (same checks, same reasons)
    return convert.localization_from_odometry(
        stamp_seconds(sec, nanosec), frame_id, (v[0], v[1], 0.0), v[2:6], _cov36(v, 6),
        (v[15], v[16], 0.0), (0.0, 0.0, v[17]), _cov36(v, 18))


def _pose_with_covariance_stamped(buf: bytes) -> Sample | Rejected:
    """geometry_msgs/msg/PoseWithCovarianceStamped CDR bytes -> LocalizationSample."""
    lay = layout_of(buf)
    sec, nanosec, raw_frame, end = _head(buf, lay)
    v = lay.pose.unpack_from(buf, end + (-(end - BODY) % 8))
    frame_id, stored, world = _frame(raw_frame)
    if _pose_ok(sec, nanosec, world, v, sum(v)):
        return _localization(sec + nanosec * 1e-9, v, _NAN, _NAN, _NAN, stored, ())
    return convert.localization_from_pose(
        stamp_seconds(sec, nanosec), frame_id, (v[0], v[1], 0.0), v[2:6], _cov36(v, 6))


odometry = _guard(ODOMETRY, _odometry)
pose_with_covariance_stamped = _guard(POSE_WITH_COVARIANCE, _pose_with_covariance_stamped)


# ---- sensor_msgs/msg/Imu -------------------------------------------------------------------


def _imu(buf: bytes) -> Sample | Rejected:
    """sensor_msgs/msg/Imu CDR bytes -> ImuSample (body yaw rate, ax, ay, yaw or NaN)."""
    lay = layout_of(buf)
    sec, nanosec, raw_frame, end = _head(buf, lay)
    raw_frame.decode()  # frame_id unused: only its bytes are checked
    qx, qy, qz, qw, ocov0, wz, wcov0, ax, ay, acov0 = lay.imu.unpack_from(
        buf, end + (-(end - BODY) % 8))
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
            return _imu_sample(sec + nanosec * 1e-9, wz, ax, ay, yaw)
    # no orientation, absent quantities or anything unusual: convert decides
    return convert.imu_from_fields(
        stamp_seconds(sec, nanosec), (qx, qy, qz, qw), (ocov0,), (0.0, 0.0, wz), (wcov0,),
        (ax, ay, 0.0), (acov0,))


imu = _guard(IMU, _imu)


# ---- sensor_msgs/msg/NavSatFix (10 Hz at most: no inline case) ----------------------------


def _navsatfix(buf: bytes) -> Sample | Rejected:
    """sensor_msgs/msg/NavSatFix CDR bytes -> GnssSample (WGS84 degrees, metres)."""
    lay = layout_of(buf)
    sec, nanosec, raw_frame, pos = _head(buf, lay)
    raw_frame.decode()
    (status,) = lay.i8.unpack_from(buf, pos)
    pos += 1
    pos += -(pos - BODY) % 2
    lay.u16.unpack_from(buf, pos)  # service: unused
    pos += 2
    pos += -(pos - BODY) % 8
    lat, lon, alt = lay.navsat.unpack_from(buf, pos)[:3]
    lay.u8.unpack_from(buf, pos + 96)  # covariance type: unused, its byte must be there
    return convert.gnss_from_fields(stamp_seconds(sec, nanosec), status, lat, lon, alt)


navsatfix = _guard(NAVSATFIX, _navsatfix)


# ---- sensor_msgs/msg/JointState ------------------------------------------------------------


def joint_state_decoder(jmap: JointMap, max_steer: float = math.pi / 2) -> Decoder:
    """Decoder of sensor_msgs/msg/JointState CDR bytes -> ChassisSample for ``jmap``.

    Road-wheel angles [rad] (steering joint positions after ``jmap.steering_ratio``) and
    wheel speeds [rad/s] (joint velocities); ``max_steer`` [rad] as in
    ``convert.chassis_from_joint_state``. Each distinct name block (bytes) is resolved
    against ``jmap`` once.
    """
    # names-block bytes -> (names, indices or Rejected); drivers repeat the same block
    blocks: dict[bytes, tuple[tuple[str, ...], tuple[int, ...] | Rejected]] = {}
    full = len(jmap.steering) == 2 and len(jmap.front) == 2 and len(jmap.rear) == 2
    ratio = jmap.steering_ratio

    def names_at(buf: bytes, pos: int, lay: Layout
                 ) -> tuple[tuple[str, ...], tuple[int, ...] | Rejected, int]:
        pos += -(pos - BODY) % 4
        for block, (names, idx) in blocks.items():
            if buf.startswith(block, pos):
                return names, idx, pos + len(block)
        got, end = read_names(buf, pos, lay)
        resolved = jmap.resolve(got)
        if len(blocks) >= 8:
            blocks.clear()
        blocks[bytes(buf[pos:end])] = (got, resolved)
        return got, resolved, end

    def _joint_state(buf: bytes) -> Sample | Rejected:
        lay = layout_of(buf)
        sec, nanosec, raw_frame, end = _head(buf, lay)
        raw_frame.decode()
        names, idx, pos = names_at(buf, end, lay)
        positions, pos = read_doubles(buf, pos, lay)
        velocities, pos = read_doubles(buf, pos, lay)
        pos += -(pos - BODY) % 4  # efforts: only the count is checked
        (count,) = lay.u32.unpack_from(buf, pos)
        if count and pos + 4 + (-pos % 8) + 8 * count > len(buf):
            raise CdrError(f"effort sequence of {count} runs past the buffer")
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
        return convert.chassis_from_joint_state(
            stamp_seconds(sec, nanosec), names, positions, velocities, jmap, max_steer)

    return _guard(JOINT_STATE, _joint_state)


def decoder_for(type_name: str, jmap: JointMap | None = None,
                max_steer: float = math.pi / 2) -> Decoder:
    """The decoder for a ROS 2 message type (``pkg/msg/Name``).

    JointState needs ``jmap`` (and ``max_steer`` [rad]); ValueError naming the type for a
    type without a decoder here or a JointState without a joint map.
    """
    if type_name == JOINT_STATE:
        if jmap is None:
            raise ValueError(f"{JOINT_STATE} needs a JointMap")
        return joint_state_decoder(jmap, max_steer)
    fixed: dict[str, Decoder] = {
        ODOMETRY: odometry,
        POSE_WITH_COVARIANCE: pose_with_covariance_stamped,
        IMU: imu,
        NAVSATFIX: navsatfix,
    }
    if type_name not in fixed:
        raise ValueError(f"no decoder for message type {type_name!r}; "
                         f"available: {', '.join(DECODED_TYPES)}")
    return fixed[type_name]
