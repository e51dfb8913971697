"""cdr decoders checked against the rosbags reference (de)serialiser.

Reference: rosbags.typesys typestore ``serialize_cdr`` / ``deserialize_cdr`` (Stores.ROS2_HUMBLE
message definitions), both byte orders. Random frame_id / name lengths move every
following field across all alignment phases.
"""

from __future__ import annotations

import random
import string

import numpy as np
import oracles as cdr
import pytest
from rosbags.typesys import Stores, get_typestore

TS = get_typestore(Stores.ROS2_HUMBLE)
T = TS.types
Header, Time = T["std_msgs/msg/Header"], T["builtin_interfaces/msg/Time"]
Vec, Quat, Point = (
    T["geometry_msgs/msg/Vector3"],
    T["geometry_msgs/msg/Quaternion"],
    T["geometry_msgs/msg/Point"],
)


def _text(rng: random.Random, n: int) -> str:
    return "".join(rng.choice(string.ascii_letters + "_/") for _ in range(n))


def _header(rng: random.Random) -> object:
    return Header(
        stamp=Time(sec=rng.randint(-(2**31), 2**31 - 1), nanosec=rng.randint(0, 2**32 - 1)),
        frame_id=_text(rng, rng.randint(0, 11)),
    )


def _arr(rng: random.Random, n: int) -> np.ndarray:
    return np.array([rng.uniform(-1e6, 1e6) for _ in range(n)], dtype=np.float64)


def _pose_cov(rng: random.Random) -> object:
    return T["geometry_msgs/msg/PoseWithCovariance"](
        pose=T["geometry_msgs/msg/Pose"](
            position=Point(*_arr(rng, 3)), orientation=Quat(*_arr(rng, 4))
        ),
        covariance=_arr(rng, 36),
    )


def _make(kind: str, rng: random.Random) -> object:
    if kind == "sensor_msgs/msg/JointState":
        n = rng.choice([0, 1, 3, 6, 7])
        return T[kind](
            header=_header(rng),
            name=[_text(rng, rng.randint(0, 9)) for _ in range(n)],
            position=_arr(rng, rng.choice([0, n])),
            velocity=_arr(rng, rng.choice([0, n])),
            effort=_arr(rng, rng.choice([0, n])),
        )
    if kind == "nav_msgs/msg/Odometry":
        return T[kind](
            header=_header(rng),
            child_frame_id=_text(rng, rng.randint(0, 9)),
            pose=_pose_cov(rng),
            twist=T["geometry_msgs/msg/TwistWithCovariance"](
                twist=T["geometry_msgs/msg/Twist"](
                    linear=Vec(*_arr(rng, 3)), angular=Vec(*_arr(rng, 3))
                ),
                covariance=_arr(rng, 36),
            ),
        )
    if kind == "geometry_msgs/msg/PoseWithCovarianceStamped":
        return T[kind](header=_header(rng), pose=_pose_cov(rng))
    if kind == "sensor_msgs/msg/Imu":
        return T[kind](
            header=_header(rng),
            orientation=Quat(*_arr(rng, 4)),
            orientation_covariance=_arr(rng, 9),
            angular_velocity=Vec(*_arr(rng, 3)),
            angular_velocity_covariance=_arr(rng, 9),
            linear_acceleration=Vec(*_arr(rng, 3)),
            linear_acceleration_covariance=_arr(rng, 9),
        )
    assert kind == "sensor_msgs/msg/NavSatFix"
    return T[kind](
        header=_header(rng),
        status=T["sensor_msgs/msg/NavSatStatus"](
            status=rng.randint(-128, 127), service=rng.randint(0, 65535)
        ),
        latitude=rng.uniform(-90, 90),
        longitude=rng.uniform(-180, 180),
        altitude=rng.uniform(-100, 9000),
        position_covariance=_arr(rng, 9),
        position_covariance_type=rng.randint(0, 255),
    )


def _xyz(v: object) -> tuple[float, ...]:
    return (v.x, v.y, v.z)  # type: ignore[attr-defined]


def _xyzw(q: object) -> tuple[float, ...]:
    return (q.x, q.y, q.z, q.w)  # type: ignore[attr-defined]


def _expected(kind: str, m: object) -> tuple:  # type: ignore[type-arg]
    """The same fields, read from the reference deserialiser's object."""
    h = m.header  # type: ignore[attr-defined]
    head = (h.stamp.sec, h.stamp.nanosec, h.frame_id)
    if kind == "sensor_msgs/msg/JointState":
        return head + (tuple(m.name), tuple(m.position), tuple(m.velocity))  # type: ignore[attr-defined]
    if kind in ("nav_msgs/msg/Odometry", "geometry_msgs/msg/PoseWithCovarianceStamped"):
        p = m.pose  # type: ignore[attr-defined]
        pose = (_xyz(p.pose.position), _xyzw(p.pose.orientation), tuple(p.covariance))
        if kind == "geometry_msgs/msg/PoseWithCovarianceStamped":
            return head + pose
        tw = m.twist  # type: ignore[attr-defined]
        return (
            head
            + (m.child_frame_id,)  # type: ignore[attr-defined]
            + pose
            + (_xyz(tw.twist.linear), _xyz(tw.twist.angular), tuple(tw.covariance))
        )
    if kind == "sensor_msgs/msg/Imu":
        return head + (
            _xyzw(m.orientation),  # type: ignore[attr-defined]
            tuple(m.orientation_covariance),  # type: ignore[attr-defined]
            _xyz(m.angular_velocity),  # type: ignore[attr-defined]
            tuple(m.angular_velocity_covariance),  # type: ignore[attr-defined]
            _xyz(m.linear_acceleration),  # type: ignore[attr-defined]
            tuple(m.linear_acceleration_covariance),  # type: ignore[attr-defined]
        )
    return head + (
        m.status.status,  # type: ignore[attr-defined]
        m.status.service,  # type: ignore[attr-defined]
        m.latitude,  # type: ignore[attr-defined]
        m.longitude,  # type: ignore[attr-defined]
        m.altitude,  # type: ignore[attr-defined]
        tuple(m.position_covariance),  # type: ignore[attr-defined]
        m.position_covariance_type,  # type: ignore[attr-defined]
    )


KINDS = sorted(cdr.DECODERS)


@pytest.mark.parametrize("little_endian", [True, False])
@pytest.mark.parametrize("kind", KINDS)
def test_decoders_match_rosbags(kind: str, little_endian: bool) -> None:
    # reference: rosbags serialize_cdr -> bytes -> deserialize_cdr vs our decoder
    rng = random.Random(hash((kind, little_endian)) & 0xFFFF)
    decode = cdr.DECODERS[kind]
    for _ in range(150):
        msg = _make(kind, rng)
        raw = bytes(TS.serialize_cdr(msg, kind, little_endian=little_endian))
        assert raw[1] == int(little_endian)
        ref = TS.deserialize_cdr(raw, kind)
        assert tuple(decode(raw)) == _expected(kind, ref)


@pytest.mark.parametrize("kind", KINDS)
def test_every_truncation_raises_cdr_error_only(kind: str) -> None:
    rng = random.Random(7)
    decode = cdr.DECODERS[kind]
    for le in (True, False):
        raw = bytes(TS.serialize_cdr(_make(kind, rng), kind, little_endian=le))
        decode(raw)
        # the last up-to-7 bytes can be alignment padding of an empty trailing sequence
        # or the trailing uint8 of NavSatFix; every shorter cut must be noticed
        limit = len(raw) - (1 if kind == "sensor_msgs/msg/NavSatFix" else 0)
        for cut in range(limit):
            if kind == "sensor_msgs/msg/JointState" and cut >= len(raw) - 4:
                continue  # effort count is the last field; a cut inside it is checked
            with pytest.raises(cdr.CdrError):
                decode(raw[:cut])


def test_bogus_lengths_and_encapsulation() -> None:
    kind = "sensor_msgs/msg/JointState"
    msg = T[kind](
        header=Header(stamp=Time(sec=5, nanosec=6), frame_id="base"),
        name=["a", "b"],
        position=np.array([1.0, 2.0]),
        velocity=np.array([3.0, 4.0]),
        effort=np.array([], dtype=np.float64),
    )
    raw = bytearray(TS.serialize_cdr(msg, kind, little_endian=True))
    bad_frame = bytearray(raw)
    bad_frame[12:16] = (0xFFFFFFF0).to_bytes(4, "little")  # frame_id length
    bad_count = bytearray(raw)
    bad_count[24:28] = (0x7FFFFFFF).to_bytes(4, "little")  # name count
    bad_enc = bytearray(raw)
    bad_enc[1] = 7
    for buf in (bad_frame, bad_count, bad_enc, b"", b"\x00\x01"):
        with pytest.raises(cdr.CdrError):
            cdr.decode_joint_state(bytes(buf))
    # an invalid UTF-8 joint name is a CdrError too, not a UnicodeDecodeError
    bad_utf = bytearray(raw)
    bad_utf[32] = 0xFF  # first byte of name "a" (frame "base\\0" + padding end at 24)
    with pytest.raises(cdr.CdrError):
        cdr.decode_joint_state(bytes(bad_utf))
