"""convert: message fields -> samples or counted rejections."""

from __future__ import annotations

import math
import random

import numpy as np
import oracles
import pytest
import transforms3d
from rosbags.typesys import Stores, get_typestore

from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample
from kinematic_monitor.io import convert as cv

STEER = ("front_left_steer_joint", "front_right_steer_joint")
FRONT = ("front_left_wheel_joint", "front_right_wheel_joint")
REAR = ("rear_left_wheel_joint", "rear_right_wheel_joint")
NAMES = ("extra",) + STEER + FRONT + REAR
POS = (9.0, 0.10, 0.08, 0.0, 0.0, 0.0, 0.0)
VEL = (0.0, 0.0, 0.0, 30.0, 31.0, 29.5, 29.0)


def jmap() -> cv.JointMap:
    return cv.JointMap(STEER, FRONT, REAR)


def test_stamp_seconds() -> None:
    # builtin_interfaces/Time: sec + nanosec * 1e-9, nanosec < 1e9 (message definition)
    assert cv.stamp_seconds(1_800_000_012, 310_000_000) == pytest.approx(1_800_000_012.31)
    for sec, nsec in ((0, 0), (-1, 0), (5, 1_000_000_000)):
        assert math.isnan(cv.stamp_seconds(sec, nsec))


def test_joint_state_picks_configured_joints_in_any_order() -> None:
    rng = random.Random(3)
    order = list(range(len(NAMES)))
    for _ in range(20):
        rng.shuffle(order)
        s = cv.chassis_from_joint_state(
            12.5,
            [NAMES[i] for i in order],
            [POS[i] for i in order],
            [VEL[i] for i in order],
            jmap(),
        )
        assert isinstance(s, ChassisSample) and s.stamp == 12.5
        assert (s.steer_left, s.steer_right) == (0.10, 0.08)
        assert (s.wheel_front_left, s.wheel_front_right) == (30.0, 31.0)
        assert (s.wheel_rear_left, s.wheel_rear_right) == (29.5, 29.0)
        assert math.isnan(s.steer) and math.isnan(s.speed)


def test_joint_state_without_wheels_and_front_only() -> None:
    s = cv.chassis_from_joint_state(1.0, STEER, (0.1, 0.1), (), cv.JointMap(STEER))
    assert isinstance(s, ChassisSample) and math.isnan(s.wheel_front_left)
    s = cv.chassis_from_joint_state(
        1.0, STEER + FRONT, (0.1, 0.1, 0, 0), (0, 0, 3.0, 4.0), cv.JointMap(STEER, FRONT)
    )
    assert isinstance(s, ChassisSample)
    assert (s.wheel_front_left, s.wheel_front_right) == (3.0, 4.0)
    assert math.isnan(s.wheel_rear_left)


@pytest.mark.parametrize(
    ("kwargs", "reason"),
    [
        ({"stamp": 0.0}, "bad_stamp"),
        ({"stamp": math.nan}, "bad_stamp"),
        ({"positions": POS[:-1]}, "length_mismatch"),
        ({"velocities": VEL[:3]}, "length_mismatch"),
        ({"names": ("extra", "x") + NAMES[2:]}, "missing_joint"),
        (
            {"names": NAMES + (STEER[0],), "positions": POS + (0.0,), "velocities": VEL + (0.0,)},
            "duplicate_joint",
        ),
        ({"positions": (9.0, math.nan) + POS[2:]}, "nan"),
        ({"velocities": VEL[:-1] + (math.inf,)}, "nan"),
        ({"positions": (9.0, 0.1, 1.7) + POS[3:]}, "steer_out_of_range"),
    ],
)
def test_joint_state_rejections(kwargs: dict, reason: str) -> None:  # type: ignore[type-arg]
    args = {"stamp": 3.0, "names": NAMES, "positions": POS, "velocities": VEL}
    args.update(kwargs)
    got = cv.chassis_from_joint_state(jmap=jmap(), max_steer=1.0, **args)
    assert isinstance(got, cv.Rejected) and got.reason == reason
    assert got.reason in cv.REASONS


def test_joint_map_validates_configuration() -> None:
    with pytest.raises(ValueError, match="steering_joints"):
        cv.JointMap(("only_one",))
    with pytest.raises(ValueError, match="distinct"):
        cv.JointMap(STEER, (STEER[0], "x"))
    m = jmap()
    assert m.resolve(NAMES) is m.resolve(list(NAMES))  # cached per name tuple


def _quat_xyzw(yaw: float, pitch: float = 0.0, roll: float = 0.0) -> tuple[float, ...]:
    w, x, y, z = transforms3d.euler.euler2quat(yaw, pitch, roll, axes="rzyx")
    return (x, y, z, w)


def test_odometry_yaw_covariance_and_twist() -> None:
    # reference: transforms3d.euler, axes 'rzyx' (yaw, then pitch, then roll about the moving
    # axes: the ROS roll-pitch-yaw convention R = Rz(yaw) Ry(pitch) Rx(roll))
    rng = random.Random(11)
    for _ in range(50):
        yaw = rng.uniform(-math.pi, math.pi)
        pitch, roll = rng.uniform(-0.3, 0.3), rng.uniform(-0.3, 0.3)
        scale = rng.uniform(0.2, 5.0)  # not normalised on purpose
        q = tuple(scale * c for c in _quat_xyzw(yaw, pitch, roll))
        cov = tuple(float(i) for i in range(36))
        s = cv.localization_from_odometry(
            7.0, "/map", (1.0, 2.0, 3.0), q, cov, (4.0, 0.5, 0.0), (0.0, 0.0, 0.2), cov
        )
        assert isinstance(s, LocalizationSample)
        assert s.yaw == pytest.approx(yaw, abs=1e-9)
        assert (s.x, s.y, s.vx, s.vy, s.yaw_rate, s.frame_id) == (1.0, 2.0, 4.0, 0.5, 0.2, "map")
        # REP 103 / nav_msgs covariance order (x, y, z, roll, pitch, yaw): rows/cols 0, 1, 5
        assert s.pose_cov == (0.0, 1.0, 5.0, 6.0, 7.0, 11.0, 30.0, 31.0, 35.0)


def test_localization_rejections() -> None:
    cov = (0.0,) * 36
    q = (0.0, 0.0, 0.0, 1.0)
    pose = cv.localization_from_pose
    assert pose(1.0, "map", (0, 0, 0), (0.0, 0.0, 0.0, 0.0), cov).reason == "bad_quaternion"  # type: ignore[union-attr]
    assert pose(1.0, "map", (math.nan, 0, 0), q, cov).reason == "nan"  # type: ignore[union-attr]
    assert pose(1.0, "map", (0, 0, 0), (math.nan, 0, 0, 1), cov).reason == "nan"  # type: ignore[union-attr]
    assert pose(1.0, "map", (0, 0, 0), q, cov[:35]).reason == "length_mismatch"  # type: ignore[union-attr]
    assert pose(0.0, "map", (0, 0, 0), q, cov).reason == "bad_stamp"  # type: ignore[union-attr]
    bad_cov = (math.inf,) + cov[1:]
    assert pose(1.0, "map", (0, 0, 0), q, bad_cov).reason == "nan"  # type: ignore[union-attr]
    odo = cv.localization_from_odometry(
        1.0, "map", (0, 0, 0), q, cov, (math.nan, 0, 0), (0, 0, 0), cov
    )
    assert isinstance(odo, cv.Rejected) and odo.reason == "nan"


def test_imu_absent_fields_follow_message_definition() -> None:
    # sensor_msgs/msg/Imu definition: covariance element 0 == -1 means "not provided"
    q = _quat_xyzw(0.4)
    z9 = (0.0,) * 9
    absent = (-1.0,) + (0.0,) * 8
    s = cv.imu_from_fields(2.0, q, z9, (0, 0, 0.3), z9, (1.0, -0.5, 9.8), z9)
    assert isinstance(s, ImuSample)
    assert (s.yaw_rate, s.ax, s.ay) == (0.3, 1.0, -0.5) and s.yaw == pytest.approx(0.4)
    s = cv.imu_from_fields(2.0, q, absent, (0, 0, 0.3), z9, (1.0, -0.5, 9.8), absent)
    assert isinstance(s, ImuSample) and math.isnan(s.yaw) and math.isnan(s.ax)
    got = cv.imu_from_fields(2.0, q, z9, (0, 0, 0.3), absent, (1.0, -0.5, 9.8), z9)
    assert isinstance(got, cv.Rejected) and got.reason == "no_yaw_rate"
    # all-zero quaternion read as "no orientation" (common practice, no source)
    s = cv.imu_from_fields(2.0, (0, 0, 0, 0), z9, (0, 0, 0.3), z9, (0, 0, 0), z9)
    assert isinstance(s, ImuSample) and math.isnan(s.yaw)
    got = cv.imu_from_fields(2.0, q, z9, (0, 0, math.nan), z9, (0, 0, 0), z9)
    assert isinstance(got, cv.Rejected) and got.reason == "nan"


def test_gnss() -> None:
    # sensor_msgs/msg/NavSatStatus: STATUS_NO_FIX = -1; WGS84 degree ranges
    assert cv.gnss_from_fields(1.0, 0, 48.1, 11.5, 500.0) == GnssSample(1.0, 48.1, 11.5, 500.0)
    assert cv.gnss_from_fields(1.0, -1, 48.1, 11.5, 0.0).reason == "no_fix"  # type: ignore[union-attr]
    assert cv.gnss_from_fields(1.0, 0, 91.0, 11.5, 0.0).reason == "out_of_range"  # type: ignore[union-attr]
    assert cv.gnss_from_fields(1.0, 0, math.nan, 11.5, 0.0).reason == "nan"  # type: ignore[union-attr]
    assert isinstance(cv.gnss_from_fields(1.0, 0, 1.0, 2.0, math.nan), GnssSample)


def test_message_objects_from_rosbags_typestore() -> None:
    # duck-typed converters on rosbags message classes (same field names as rclpy)
    ts = get_typestore(Stores.ROS2_HUMBLE)
    T = ts.types
    hdr = T["std_msgs/msg/Header"](
        stamp=T["builtin_interfaces/msg/Time"](sec=100, nanosec=500_000_000), frame_id="map"
    )
    js = T["sensor_msgs/msg/JointState"](
        header=hdr,
        name=list(NAMES),
        position=np.array(POS),
        velocity=np.array(VEL),
        effort=np.array([], dtype=np.float64),
    )
    s = oracles.chassis_from_msg(js, jmap())
    assert isinstance(s, ChassisSample) and s.stamp == 100.5 and type(s.steer_left) is float
    Vec = T["geometry_msgs/msg/Vector3"]
    Quat = T["geometry_msgs/msg/Quaternion"]
    pwc = T["geometry_msgs/msg/PoseWithCovariance"](
        pose=T["geometry_msgs/msg/Pose"](
            position=T["geometry_msgs/msg/Point"](x=1.0, y=2.0, z=0.0),
            orientation=Quat(*_quat_xyzw(1.0)),
        ),
        covariance=np.eye(6).ravel(),
    )
    odo = T["nav_msgs/msg/Odometry"](
        header=hdr,
        child_frame_id="base_link",
        pose=pwc,
        twist=T["geometry_msgs/msg/TwistWithCovariance"](
            twist=T["geometry_msgs/msg/Twist"](linear=Vec(3.0, 0.0, 0.0), angular=Vec(0, 0, 0.1)),
            covariance=np.eye(6).ravel(),
        ),
    )
    s2 = oracles.localization_from_odometry_msg(odo)
    assert isinstance(s2, LocalizationSample) and s2.yaw == pytest.approx(1.0)
    assert s2.pose_cov == (1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0)
    s3 = oracles.localization_from_pose_msg(
        T["geometry_msgs/msg/PoseWithCovarianceStamped"](header=hdr, pose=pwc)
    )
    assert isinstance(s3, LocalizationSample) and math.isnan(s3.vx) and s3.twist_cov == ()
    imu = T["sensor_msgs/msg/Imu"](
        header=hdr,
        orientation=Quat(0.0, 0.0, 0.0, 1.0),
        orientation_covariance=np.zeros(9),
        angular_velocity=Vec(0.0, 0.0, 0.25),
        angular_velocity_covariance=np.zeros(9),
        linear_acceleration=Vec(0.5, 0.1, 9.8),
        linear_acceleration_covariance=np.zeros(9),
    )
    s4 = oracles.imu_from_msg(imu)
    assert isinstance(s4, ImuSample) and (s4.yaw_rate, s4.yaw) == (0.25, 0.0)
    fix = T["sensor_msgs/msg/NavSatFix"](
        header=hdr,
        status=T["sensor_msgs/msg/NavSatStatus"](status=0, service=1),
        latitude=48.0,
        longitude=11.0,
        altitude=520.0,
        position_covariance=np.zeros(9),
        position_covariance_type=0,
    )
    assert oracles.gnss_from_msg(fix) == GnssSample(100.5, 48.0, 11.0, 520.0)
