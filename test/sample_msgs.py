"""Samples -> rclpy messages, for the test publishers and the load bench (test helpers).

Units and frames follow REP 103 / REP 105 and the ROS message definitions.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from builtin_interfaces.msg import Time
from geometry_msgs.msg import PoseWithCovarianceStamped
from nav_msgs.msg import Odometry
from sensor_msgs.msg import Imu, JointState, NavSatFix

from kinematic_monitor.core.geometry import yaw_to_quaternion
from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample


def sec_to_stamp(t: float) -> Time:
    """builtin_interfaces/Time from seconds [s] (non-finite or negative -> zero time)."""
    if not math.isfinite(t) or t < 0.0:
        return Time()
    ns = int(round(t * 1e9))
    return Time(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)


DEFAULT_STEER_JOINTS = ("front_left_steer_joint", "front_right_steer_joint")
DEFAULT_WHEEL_JOINTS = (
    "front_left_wheel_joint",
    "front_right_wheel_joint",
    "rear_left_wheel_joint",
    "rear_right_wheel_joint",
)


def joint_state_msg(s: ChassisSample, steer_joints: Sequence[str] = DEFAULT_STEER_JOINTS,
                    wheel_joints: Sequence[str] = DEFAULT_WHEEL_JOINTS) -> JointState:
    """JointState: steer joints carry ``position`` [rad], wheel joints ``velocity`` [rad/s].

    Order of ``wheel_joints``: front left, front right, rear left, rear right.
    """
    msg = JointState()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.name = [*steer_joints, *wheel_joints]
    wheels = (s.wheel_front_left, s.wheel_front_right, s.wheel_rear_left, s.wheel_rear_right)
    msg.position = [float(s.steer_left), float(s.steer_right)] + [0.0] * len(wheel_joints)
    msg.velocity = [0.0, 0.0] + [float(w) for w in wheels[: len(wheel_joints)]]
    return msg


def odometry_msg(s: LocalizationSample, child_frame_id: str = "base_link") -> Odometry:
    """nav_msgs/Odometry from a localisation sample (pose in s.frame_id, twist in body)."""
    msg = Odometry()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = s.frame_id
    msg.child_frame_id = child_frame_id
    msg.pose.pose.position.x = float(s.x)
    msg.pose.pose.position.y = float(s.y)
    qx, qy, qz, qw = yaw_to_quaternion(s.yaw)
    msg.pose.pose.orientation.z = qz
    msg.pose.pose.orientation.w = qw
    msg.pose.pose.orientation.x = qx
    msg.pose.pose.orientation.y = qy
    for attr, val in (("x", s.vx), ("y", s.vy)):
        if math.isfinite(val):
            setattr(msg.twist.twist.linear, attr, float(val))
    if math.isfinite(s.yaw_rate):
        msg.twist.twist.angular.z = float(s.yaw_rate)
    idx = (0, 1, 5)
    for src, dst in ((s.pose_cov, msg.pose), (s.twist_cov, msg.twist)):
        if len(src) == 9:
            pc = [0.0] * 36
            for i in range(3):
                for j in range(3):
                    pc[idx[i] * 6 + idx[j]] = float(src[i * 3 + j])
            dst.covariance = pc
    return msg


def pose_msg(s: LocalizationSample) -> PoseWithCovarianceStamped:
    """geometry_msgs/PoseWithCovarianceStamped from a localisation sample."""
    odo = odometry_msg(s)
    msg = PoseWithCovarianceStamped()
    msg.header = odo.header
    msg.pose = odo.pose
    return msg


def imu_msg(s: ImuSample, frame_id: str = "base_link") -> Imu:
    """sensor_msgs/Imu: angular_velocity.z [rad/s], linear_acceleration.x/y [m/s^2].

    Orientation is marked unknown (covariance[0] = -1) unless ``s.yaw`` is finite.
    """
    msg = Imu()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = frame_id
    msg.angular_velocity.z = float(s.yaw_rate)
    msg.linear_acceleration.x = float(s.ax) if math.isfinite(s.ax) else 0.0
    msg.linear_acceleration.y = float(s.ay) if math.isfinite(s.ay) else 0.0
    msg.linear_acceleration.z = 9.80665
    if math.isfinite(s.yaw):
        qx, qy, qz, qw = yaw_to_quaternion(s.yaw)
        msg.orientation.z = qz
        msg.orientation.w = qw
    else:
        cov = [0.0] * 9
        cov[0] = -1.0  # sensor_msgs/Imu: orientation unknown
        msg.orientation_covariance = cov
    return msg


def navsatfix_msg(s: GnssSample, frame_id: str = "gnss") -> NavSatFix:
    """sensor_msgs/NavSatFix from a GNSS sample (WGS84 degrees, metres)."""
    msg = NavSatFix()
    msg.header.stamp = sec_to_stamp(s.stamp)
    msg.header.frame_id = frame_id
    msg.latitude = float(s.latitude)
    msg.longitude = float(s.longitude)
    msg.altitude = float(s.altitude) if math.isfinite(s.altitude) else 0.0
    return msg
