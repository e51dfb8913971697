"""The one decoder per type (io.decode) checked against the reference path, message by message.

References: messages are encoded by rosbags' ``serialize_cdr`` (Stores.ROS2_HUMBLE message
definitions, both byte orders; OMG XCDR1 as used by ROS 2), so the byte layout comes from
outside the project. Every result must equal what the reference path gives (test/oracles.py):
the rosbags message object through the message-object converters and the bytes through the
full reference decoders + the rules of ``convert``: the same sample (every field,
NaN-aware), or the same Rejected (reason and detail), or a 'malformed' rejection for the
buffers the reference decoders refuse. Values are drawn to hit every branch:
bad stamps, NaN/inf in used and unused fields, covariance flags of -1 (sensor_msgs/Imu
definition: quantity absent), zero quaternions, frames inside and outside REP 105's world
frames, missing/duplicate/reordered joints and length mismatches.
"""

from __future__ import annotations

import ast
import dataclasses
import math
import random
from typing import Any

import numpy as np
import oracles
import pytest
from rosbags.typesys import Stores, get_typestore

from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample
from kinematic_monitor.io import convert, decode
from kinematic_monitor.io.cdr import CdrError
from kinematic_monitor.io.convert import JointMap, Rejected

TS = get_typestore(Stores.ROS2_HUMBLE)
T = TS.types
Header, Time = T["std_msgs/msg/Header"], T["builtin_interfaces/msg/Time"]
Vec, Quat, Point = (T["geometry_msgs/msg/Vector3"], T["geometry_msgs/msg/Quaternion"],
                    T["geometry_msgs/msg/Point"])

JS, ODOM, POSE, IMU, NAV = decode.DECODED_TYPES
STEER = ("fl_steer", "fr_steer")
FRONT = ("fl_wheel", "fr_wheel")
REAR = ("rl_wheel", "rr_wheel")
MAX_STEER = 0.6
N_RANDOM = 400  # messages per type and byte order


# ---- random messages -------------------------------------------------------------------

_DIRT = [1.0]  # scales the chance of an unusual value; 0 for a clean message


def _float(rng: random.Random, scale: float = 10.0) -> float:
    r = rng.random() / max(_DIRT[0], 1e-9)
    if r < 0.03:
        return math.nan
    if r < 0.05:
        return rng.choice([math.inf, -math.inf])
    if r < 0.07:
        return 0.0
    if r < 0.08:
        return rng.choice([1e300, -1e300])  # sums overflow: the inline check must not care
    return rng.uniform(-scale, scale)


def _arr(rng: random.Random, n: int, scale: float = 10.0) -> np.ndarray:
    return np.array([_float(rng, scale) for _ in range(n)], dtype=np.float64)


def _stamp(rng: random.Random) -> Any:
    r = rng.random() / max(_DIRT[0], 1e-9)
    if r < 0.05:
        sec, ns = 0, 0
    elif r < 0.1:
        sec, ns = -rng.randint(1, 100), rng.randint(0, 999_999_999)
    elif r < 0.15:
        sec, ns = rng.randint(0, 2**31 - 1), rng.randint(1_000_000_000, 2**32 - 1)
    elif r < 0.18:
        sec, ns = 0, rng.randint(1, 999_999_999)
    else:
        sec, ns = rng.randint(1, 2**31 - 1), rng.randint(0, 999_999_999)
    return Time(sec=sec, nanosec=ns)


FRAMES = ["map", "odom", "/map", "car7/odom", "base_link", "", "mapx", "x/map/y", "maps",
          "o", "odom/"]


def _quat(rng: random.Random) -> Any:
    r = rng.random() / max(_DIRT[0], 1e-9)
    if r < 0.08:
        return Quat(0.0, 0.0, 0.0, 0.0)
    if r < 0.12:
        return Quat(1e-7, 0.0, 0.0, 0.0)  # norm² below 1e-12
    return Quat(*_arr(rng, 4, 1.0))


def _cov(rng: random.Random, n: int) -> np.ndarray:
    a = _arr(rng, n, 1.0)
    if rng.random() < 0.15 * _DIRT[0]:
        a[0] = -1.0  # sensor_msgs/Imu: quantity not provided
    return a


def _pose_cov(rng: random.Random) -> Any:
    return T["geometry_msgs/msg/PoseWithCovariance"](
        pose=T["geometry_msgs/msg/Pose"](position=Point(*_arr(rng, 3, 1e3)),
                                         orientation=_quat(rng)),
        covariance=_arr(rng, 36, 1.0))


def _names(rng: random.Random) -> list[str]:
    names = list(STEER + FRONT + REAR) + ["rear_axle", "arm"][: rng.randint(0, 2)]
    rng.shuffle(names)
    r = rng.random() / max(_DIRT[0], 1e-9)
    if r < 0.06:
        names.remove(rng.choice(STEER + FRONT + REAR))  # missing_joint
    elif r < 0.12:
        names.append(rng.choice(STEER + REAR))  # duplicate_joint
    return names


def make(kind: str, rng: random.Random) -> Any:
    """A random message of ``kind`` (rosbags class) that hits the converter's branches.

    Half the messages are clean (only usual values), so the inline path is exercised too.
    """
    clean = rng.random() < 0.5
    _DIRT[0] = 0.0 if clean else 1.0
    frame = rng.choice(FRAMES[:4] if clean else FRAMES)
    header = Header(stamp=_stamp(rng), frame_id=frame)
    if kind == JS:
        names = _names(rng)
        n = len(names)
        pos = np.array([rng.uniform(-0.8, 0.8) if rng.random() >= 0.03 * _DIRT[0] else math.nan
                        for _ in range(n)])
        vel = _arr(rng, n, 50.0)
        r = rng.random() / max(_DIRT[0], 1e-9)
        if r < 0.05:
            pos = pos[: max(0, n - 1)]  # length_mismatch (positions)
        elif r < 0.1:
            vel = np.zeros(0)  # length_mismatch (velocities)
        return T[kind](header=header, name=names, position=pos, velocity=vel,
                       effort=_arr(rng, rng.choice([0, n])))
    if kind == ODOM:
        return T[kind](
            header=header, child_frame_id=rng.choice(FRAMES),
            pose=_pose_cov(rng),
            twist=T["geometry_msgs/msg/TwistWithCovariance"](
                twist=T["geometry_msgs/msg/Twist"](linear=Vec(*_arr(rng, 3)),
                                                   angular=Vec(*_arr(rng, 3))),
                covariance=_arr(rng, 36, 1.0)))
    if kind == POSE:
        return T[kind](header=header, pose=_pose_cov(rng))
    if kind == IMU:
        return T[kind](header=header, orientation=_quat(rng), orientation_covariance=_cov(rng, 9),
                       angular_velocity=Vec(*_arr(rng, 3)),
                       angular_velocity_covariance=_cov(rng, 9),
                       linear_acceleration=Vec(*_arr(rng, 3)),
                       linear_acceleration_covariance=_cov(rng, 9))
    status = T["sensor_msgs/msg/NavSatStatus"](status=rng.choice([-1, 0, 1, 2]), service=1)
    return T[kind](header=header, status=status, latitude=_float(rng, 120.0),
                   longitude=_float(rng, 200.0), altitude=_float(rng, 100.0),
                   position_covariance=_arr(rng, 9, 1.0), position_covariance_type=0)


# ---- the two-step reference ------------------------------------------------------------

JMAP = JointMap(STEER, FRONT, REAR)


def two_step(kind: str, buf: bytes, jmap: JointMap = JMAP) -> object:
    """The full reference decoders + the rules of convert on the decoded fields."""
    st = convert.stamp_seconds
    if kind == JS:
        f = oracles.decode_joint_state(buf)
        return convert.chassis_from_joint_state(st(f.sec, f.nanosec), f.names, f.positions,
                                                f.velocities, jmap, MAX_STEER)
    if kind == ODOM:
        o = oracles.decode_odometry(buf)
        return convert.localization_from_odometry(
            st(o.sec, o.nanosec), o.frame_id, o.position, o.orientation, o.pose_covariance,
            o.linear, o.angular, o.twist_covariance)
    if kind == POSE:
        p = oracles.decode_pose_with_covariance_stamped(buf)
        return convert.localization_from_pose(st(p.sec, p.nanosec), p.frame_id, p.position,
                                              p.orientation, p.pose_covariance)
    if kind == IMU:
        i = oracles.decode_imu(buf)
        return convert.imu_from_fields(
            st(i.sec, i.nanosec), i.orientation, i.orientation_covariance, i.angular_velocity,
            i.angular_velocity_covariance, i.linear_acceleration,
            i.linear_acceleration_covariance)
    g = oracles.decode_navsatfix(buf)
    return convert.gnss_from_fields(st(g.sec, g.nanosec), g.status, g.latitude, g.longitude,
                                    g.altitude)


def from_msg(kind: str, msg: object, jmap: JointMap = JMAP) -> object:
    """The message-object converters on the rosbags object (no CDR involved)."""
    if kind == JS:
        return oracles.chassis_from_msg(msg, jmap, MAX_STEER)
    return {ODOM: oracles.localization_from_odometry_msg,
            POSE: oracles.localization_from_pose_msg,
            IMU: oracles.imu_from_msg, NAV: oracles.gnss_from_msg}[kind](msg)


def key(result: object) -> tuple[object, ...]:
    """Comparable form: type and every field (repr makes NaN equal to NaN, -0.0 != 0.0)."""
    if isinstance(result, Rejected):
        return ("Rejected", result.reason, result.detail)
    assert dataclasses.is_dataclass(result)
    return (type(result).__name__,
            *(repr(getattr(result, f.name)) for f in dataclasses.fields(result)))


def fused(kind: str, jmap: JointMap = JMAP) -> decode.Decoder:
    return decode.decoder_for(kind, jmap, MAX_STEER)


def malformed(got: object) -> bool:
    """A counted 'malformed' rejection saying what was wrong."""
    return isinstance(got, Rejected) and got.reason == "malformed" and bool(got.detail)


# ---- tests -------------------------------------------------------------------------------

@pytest.mark.parametrize("little", [True, False], ids=["le", "be"])
@pytest.mark.parametrize("kind", decode.DECODED_TYPES)
def test_random_messages_match_two_step_path(kind: str, little: bool) -> None:
    # reference encoder: rosbags serialize_cdr; reference result: the full decoders +
    # convert, and the message-object converters on the decoded-by-nobody object
    rng = random.Random(hash((kind, little)) & 0xFFFF)
    conv = fused(kind)
    reasons: set[str] = set()
    accepted = 0
    for _ in range(N_RANDOM):
        msg = make(kind, rng)
        buf = bytes(TS.serialize_cdr(msg, kind, little_endian=little))
        want = two_step(kind, buf)
        got = conv(buf)
        assert key(got) == key(want), (msg, got, want)
        assert key(got) == key(from_msg(kind, msg)), msg
        assert key(conv(memoryview(buf))) == key(want)  # type: ignore[arg-type]  # rosbags: memoryview
        if isinstance(got, Rejected):
            reasons.add(got.reason)
        else:
            accepted += 1
    assert accepted > N_RANDOM // 5, "too few accepted messages: the inline path is untested"
    assert len(reasons) >= 2, reasons


def test_every_rejection_reason_is_reached_and_matches() -> None:
    # crafted cases: one message per reason a decoder can give (convert.REASONS)
    def hdr(frame: str = "map", sec: int = 100, ns: int = 5) -> Any:
        return Header(stamp=Time(sec=sec, nanosec=ns), frame_id=frame)

    def odom(**kw: Any) -> Any:
        pose = kw.get("pose") or T["geometry_msgs/msg/PoseWithCovariance"](
            pose=T["geometry_msgs/msg/Pose"](position=Point(1.0, 2.0, 0.0),
                                             orientation=kw.get("q", Quat(0, 0, 0.3, 0.95))),
            covariance=kw.get("pcov", np.eye(6).ravel() * 0.01))
        return T[ODOM](header=kw.get("h", hdr()), child_frame_id="base_link", pose=pose,
                       twist=T["geometry_msgs/msg/TwistWithCovariance"](
                           twist=T["geometry_msgs/msg/Twist"](
                               linear=Vec(kw.get("vx", 5.0), 0.1, 0.0),
                               angular=Vec(0.0, 0.0, 0.02)),
                           covariance=kw.get("tcov", np.eye(6).ravel() * 0.04)))

    def imu(**kw: Any) -> Any:
        ocov, wcov, acov = np.zeros(9), np.zeros(9), np.zeros(9)
        ocov[0], wcov[0], acov[0] = kw.get("o0", 0.01), kw.get("w0", 0.01), kw.get("a0", 0.1)
        return T[IMU](header=kw.get("h", hdr("imu")), orientation=kw.get("q", Quat(0, 0, 0, 1)),
                      orientation_covariance=ocov,
                      angular_velocity=Vec(0.0, 0.0, kw.get("wz", 0.1)),
                      angular_velocity_covariance=wcov,
                      linear_acceleration=Vec(kw.get("ax", 0.5), 0.1, 9.8),
                      linear_acceleration_covariance=acov)

    def js(names: list[str] | None = None, pos: list[float] | None = None,
           vel: list[float] | None = None, h: Any = None) -> object:
        names = names if names is not None else list(STEER + FRONT + REAR)
        return T[JS](header=h or hdr("base_link"), name=names,
                     position=np.array(pos if pos is not None else [0.1] * len(names)),
                     velocity=np.array(vel if vel is not None else [20.0] * len(names)),
                     effort=np.zeros(0))

    def nav(status: int = 0, lat: float = 48.0, lon: float = 11.0) -> Any:
        return T[NAV](header=hdr("gnss"), status=T["sensor_msgs/msg/NavSatStatus"](
            status=status, service=1), latitude=lat, longitude=lon, altitude=500.0,
            position_covariance=np.zeros(9), position_covariance_type=0)

    nan = math.nan
    cases = {
        "bad_stamp": [(ODOM, odom(h=hdr(sec=0, ns=0))), (IMU, imu(h=hdr(sec=-1))),
                      (JS, js(h=hdr(ns=1_000_000_000))), (POSE, T[POSE](
                          header=hdr(sec=0, ns=0), pose=odom().pose))],
        "nan": [(ODOM, odom(vx=nan)), (ODOM, odom(pcov=np.full(36, nan))),
                (ODOM, odom(tcov=np.full(36, math.inf))), (IMU, imu(wz=nan)),
                (IMU, imu(ax=math.inf)), (IMU, imu(q=Quat(nan, 0, 0, 1))),
                (JS, js(pos=[nan] * 6)), (JS, js(vel=[math.inf] * 6)),
                (NAV, nav(lat=nan))],
        "length_mismatch": [(JS, js(pos=[0.1] * 5)), (JS, js(vel=[1.0] * 7))],
        "missing_joint": [(JS, js(names=list(STEER + FRONT)))],
        "duplicate_joint": [(JS, js(names=list(STEER + FRONT + REAR) + ["fl_wheel"]))],
        "steer_out_of_range": [(JS, js(pos=[0.9] * 6))],
        "bad_quaternion": [(ODOM, odom(q=Quat(0, 0, 0, 0))), (IMU, imu(q=Quat(1e-7, 0, 0, 0)))],
        "no_yaw_rate": [(IMU, imu(w0=-1.0))],
        "no_fix": [(NAV, nav(status=-1))],
        "out_of_range": [(NAV, nav(lon=181.0))],
        "unexpected_frame": [(ODOM, odom(h=hdr("base_link"))),
                             (POSE, T[POSE](header=hdr("imu"), pose=odom().pose))],
    }
    for reason, items in cases.items():
        assert reason in convert.REASONS
        for kind, msg in items:
            for little in (True, False):
                buf = bytes(TS.serialize_cdr(msg, kind, little_endian=little))
                got = fused(kind)(buf)
                assert isinstance(got, Rejected) and got.reason == reason, (reason, kind, got)
                assert key(got) == key(two_step(kind, buf)) == key(from_msg(kind, msg))
    # 'malformed': bytes that cannot be decoded (see the truncation test below)
    assert malformed(decode.imu(b"\x00\x01\x00\x00\x01"))
    # the reasons a decoder can give are all covered above
    fused_reasons = set(convert.REASONS) - {"missing_field"}  # field paths only
    assert fused_reasons == set(cases) | {"malformed"}


def test_absent_imu_quantities_and_accepted_samples() -> None:
    # sensor_msgs/Imu: covariance[0] = -1 marks a quantity as not provided
    base: dict[str, Any] = dict(
                header=Header(stamp=Time(sec=7, nanosec=500_000_000), frame_id="imu"),
                orientation=Quat(0.0, 0.0, math.sin(0.25), math.cos(0.25)),
                angular_velocity=Vec(0.0, 0.0, 0.2), linear_acceleration=Vec(1.0, -0.5, 9.8),
                angular_velocity_covariance=np.zeros(9))
    ocov = np.zeros(9)
    ocov[0] = -1.0
    got = decode.imu(bytes(TS.serialize_cdr(
        T[IMU](**base, orientation_covariance=ocov, linear_acceleration_covariance=ocov), IMU)))
    assert isinstance(got, ImuSample)
    assert got.stamp == 7.5 and got.yaw_rate == 0.2
    assert math.isnan(got.yaw) and math.isnan(got.ax) and math.isnan(got.ay)
    got = decode.imu(bytes(TS.serialize_cdr(
        T[IMU](**base, orientation_covariance=np.zeros(9),
               linear_acceleration_covariance=np.zeros(9)), IMU)))
    assert isinstance(got, ImuSample)
    # yaw of a rotation by 0.5 rad about z (quaternion (0, 0, sin 0.25, cos 0.25))
    assert got.yaw == pytest.approx(0.5, abs=1e-12) and (got.ax, got.ay) == (1.0, -0.5)


@pytest.mark.parametrize("kind", decode.DECODED_TYPES)
def test_truncated_and_corrupt_buffers_fail_alike(kind: str) -> None:
    rng = random.Random(5)
    conv = fused(kind)
    for little in (True, False):
        msg = make(kind, rng)
        buf = bytes(TS.serialize_cdr(msg, kind, little_endian=little))
        for cut in range(len(buf)):
            short = buf[:cut]
            try:
                want = key(two_step(kind, short))
            except CdrError:
                assert malformed(conv(short)), cut
                continue
            assert key(conv(short)) == want  # cut only in the unused tail (efforts)
        # invalid UTF-8 in the frame_id: the reference refuses it, so must the decoder
        bad = bytearray(buf)
        if bad[16:20] != b"\x00" * 4 and bad[12] > 1:
            bad[16] = 0xFF
            with pytest.raises(CdrError):
                two_step(kind, bytes(bad))
            assert malformed(conv(bytes(bad)))
    got = conv(b"\x01\x07\x00\x00" + b"\x00" * 200)
    assert malformed(got) and "encapsulation" in got.detail  # type: ignore[union-attr]


def test_joint_configurations_without_steering_or_rear_wheels() -> None:
    # the inline path covers steering + 4 wheels (any steering ratio); other maps go
    # through the rules of convert
    rng = random.Random(9)
    maps = [JointMap((), FRONT, REAR), JointMap(STEER, FRONT), JointMap(STEER, (), REAR),
            JointMap(STEER)]
    maps.append(JointMap(STEER, FRONT, REAR, steering_ratio=1.5))  # steering-wheel joints
    for jmap in maps:
        conv = decode.joint_state_decoder(jmap, MAX_STEER)
        for _ in range(100):
            buf = bytes(TS.serialize_cdr(make(JS, rng), JS))
            assert key(conv(buf)) == key(two_step(JS, buf, jmap))


def test_name_block_cache_follows_changing_names() -> None:
    # the same converter sees joints reordered between messages: indices must follow
    conv = fused(JS)
    names = list(STEER + FRONT + REAR)
    for order in range(6):
        rot = names[order:] + names[:order]
        pos = [0.01 * (i + 1) for i in range(6)]
        msg = T[JS](header=Header(stamp=Time(sec=1, nanosec=0), frame_id=""), name=rot,
                    position=np.array(pos), velocity=np.array([10.0 + i for i in range(6)]),
                    effort=np.zeros(0))
        got = conv(bytes(TS.serialize_cdr(msg, JS)))
        assert isinstance(got, ChassisSample)
        assert got.steer_left == pos[rot.index("fl_steer")]
        assert got.wheel_rear_right == 10.0 + rot.index("rr_wheel")


def test_samples_built_by_the_decoder_are_ordinary_dataclass_instances() -> None:
    buf = bytes(TS.serialize_cdr(T[ODOM](
        header=Header(stamp=Time(sec=3, nanosec=0), frame_id="/odom"), child_frame_id="b",
        pose=T["geometry_msgs/msg/PoseWithCovariance"](
            pose=T["geometry_msgs/msg/Pose"](position=Point(1.0, 2.0, 3.0),
                                             orientation=Quat(0.0, 0.0, 0.0, 1.0)),
            covariance=np.eye(6).ravel()),
        twist=T["geometry_msgs/msg/TwistWithCovariance"](
            twist=T["geometry_msgs/msg/Twist"](linear=Vec(4.0, 0.5, 0.0),
                                               angular=Vec(0.0, 0.0, 0.1)),
            covariance=np.eye(6).ravel() * 2.0)), ODOM))
    got = decode.odometry(buf)
    want = LocalizationSample(3.0, 1.0, 2.0, 0.0, 4.0, 0.5, 0.1, "odom",
                              (1.0, 0, 0, 0, 1.0, 0, 0, 0, 1.0),
                              (2.0, 0, 0, 0, 2.0, 0, 0, 0, 2.0))
    assert got == want and hash(got) == hash(want)
    assert dataclasses.replace(got, x=5.0).x == 5.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        got.x = 1.0  # type: ignore[misc]


def test_decoder_for_names_bad_requests() -> None:
    with pytest.raises(ValueError, match="std_msgs/msg/Float64"):
        decode.decoder_for("std_msgs/msg/Float64")
    with pytest.raises(ValueError, match="JointMap"):
        decode.decoder_for(JS)


# ---- the node's raw path -----------------------------------------------------------------

def _rclpy_messages(rng: random.Random) -> list[tuple[str, Any]]:
    """rclpy message objects with the same random contents as ``make`` (via rosbags)."""
    rclpy_ser = pytest.importorskip("rclpy.serialization")
    from geometry_msgs.msg import PoseWithCovarianceStamped
    from nav_msgs.msg import Odometry
    from sensor_msgs.msg import Imu, JointState, NavSatFix

    classes = {JS: JointState, ODOM: Odometry, POSE: PoseWithCovarianceStamped, IMU: Imu,
               NAV: NavSatFix}
    out = []
    for kind, cls in classes.items():
        for _ in range(60):
            # same bytes, read back by rclpy's own deserialiser (rmw CDR type support)
            buf = bytes(TS.serialize_cdr(make(kind, rng), kind))
            out.append((kind, rclpy_ser.deserialize_message(buf, cls)))
    return out


@pytest.mark.dds  # rclpy in this process: run under every tested ROS release
def test_rclpy_serialized_bytes_match_the_message_object_path() -> None:
    # what a raw subscription hands over: rclpy's serialize_message output (the rmw's CDR);
    # the decoder's result must equal the message-object converters on the rclpy object
    rclpy_ser = pytest.importorskip("rclpy.serialization")
    rng = random.Random(21)
    n_ok = 0
    for kind, msg in _rclpy_messages(rng):
        buf = bytes(rclpy_ser.serialize_message(msg))
        got = fused(kind)(buf)
        assert key(got) == key(from_msg(kind, msg)), (kind, msg)
        n_ok += not isinstance(got, Rejected)
    assert n_ok > 50


@pytest.mark.dds  # rclpy in this process: run under every tested ROS release
def test_node_publishes_bytes_with_a_fallback_for_old_rclpy() -> None:
    # rclpy's Publisher.publish takes serialized bytes; an rclpy whose publish refuses them
    # (TypeError) gets the message object rclpy itself deserialises from the same bytes
    node = pytest.importorskip("kinematic_monitor.ros.node")
    rclpy_ser = pytest.importorskip("rclpy.serialization")
    from diagnostic_msgs.msg import DiagnosticStatus

    from kinematic_monitor.io import encode

    data = encode.diagnostic_status(2, "kinematic_monitor: x", "m", "hw", [("k", "v")])

    class Old:
        msg_type = DiagnosticStatus
        sent: list[object] = []

        def publish(self, msg: object) -> None:
            if isinstance(msg, bytes):
                raise TypeError("Expected DiagnosticStatus, got bytes")
            self.sent.append(msg)

    class New(Old):
        def publish(self, msg: object) -> None:
            self.sent.append(msg)

    old, new = Old(), New()
    old.sent, new.sent = [], []
    node.publish_bytes(old, data)
    node.publish_bytes(new, data)
    assert new.sent == [data]
    (msg,) = old.sent
    assert msg == rclpy_ser.deserialize_message(data, DiagnosticStatus)
    assert msg.level == b"\x02" and msg.values[0].key == "k"  # type: ignore[attr-defined]


@pytest.mark.dds
def test_node_takes_every_message_as_bytes(tmp_path: object) -> None:
    # over real DDS (localhost, own domain): the node's own counters report every published
    # message received (serialized bytes through the decoders) and none rejected
    pytest.importorskip("rclpy")
    import time
    from pathlib import Path

    from dds_helpers import Listener, new_domain_id, start_node, start_publisher, write_params

    work = Path(str(tmp_path))
    # reliable QoS on both ends: every message must arrive, so the counts can be exact
    # (best effort may drop one on a busy machine, which is not what this test is about)
    params = write_params(work / "p.yaml", extra='    inputs:\n      qos: reliable\n'
                          '      gnss:\n        topic: ""\n')
    domain = new_domain_id()
    node = start_node(params, domain, work, executor="events")
    lis = Listener(domain)
    pub = None
    try:
        deadline = time.monotonic() + 20
        while "running (" not in node.output() and time.monotonic() < deadline:
            time.sleep(0.05)
        assert "raw messages" in node.output(), node.output()
        pub = start_publisher(domain, work, "--duration", "2.0", "--reliable")
        assert pub.wait(timeout=20) == 0, pub.output()
        published = pub.output().strip().splitlines()[-1]

        def counters() -> dict[str, str]:
            for arr in reversed(lis.diagnostics):
                for s in arr.status:
                    if s.name == "kinematic_monitor: node":
                        return {kv.key: kv.value for kv in s.values}
            return {}

        want = {"received.joint_states": "js", "received.localization": "odom",
                "received.imu": "imu"}
        sent = ast.literal_eval(published.removeprefix("published "))
        assert lis.spin_until(
            lambda: all(counters().get(k) == str(sent[v]) for k, v in want.items()),
            timeout=6.0), ({k: v for k, v in counters().items()
                            if k.startswith(("received", "rejected"))}, published)
        assert not any(k.startswith("rejected") for k in counters()), counters()
    finally:
        if pub is not None:
            pub.stop()
        node.stop()
        lis.close()
