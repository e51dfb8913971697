"""Steering and speed inputs beyond JointState: parameters, conversion, type look-ups.

Checked against: the ROS 2 message definitions of std_msgs/Float64, geometry_msgs/
TwistStamped and Vector3Stamped (rosbags' bundled typestore builds the messages); the
rclpy type description (``get_fields_and_field_types``) of installed message classes
compared with rosbags' parse of the same definitions (two independent implementations);
REP 103 units (rad, m/s). Conversions 1 deg = pi/180 rad and 1 km/h = 1/3.6 m/s are exact
by definition (SI brochure).
"""

from __future__ import annotations

import math

import pytest
from rosbags.typesys import Stores, get_typestore

from kinematic_monitor.config import schema, validation
from kinematic_monitor.core.samples import ChassisSample
from kinematic_monitor.io import convert as cv
from kinematic_monitor.io import scalar_inputs as si
from kinematic_monitor.io.scalar_inputs import typestore_fields

TS = get_typestore(Stores.ROS2_HUMBLE)
T = TS.types
GEOMETRY = {"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
            "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55}


def settings(**values: object) -> list[si.ScalarSettings]:
    cfg = validation.validate({**GEOMETRY, **values})
    return si.scalar_settings(cfg)


def test_disabled_by_default() -> None:
    assert settings() == []


def test_standard_types_fill_type_and_field() -> None:
    st, sp = settings(**{"inputs.steering.topic": "/s", "inputs.steering.type": "float32",
                         "inputs.speed.topic": "/v"})
    assert (st.role, st.type_name, st.field) == ("steering", "std_msgs/msg/Float32", "data")
    assert (sp.role, sp.type_name, sp.field) == ("speed", "geometry_msgs/msg/TwistStamped",
                                                 "twist.linear.x")


def test_steering_wheel_angle_in_degrees_divided_by_ratio() -> None:
    # 270 deg at the steering wheel with ratio 15 -> 18 deg road-wheel angle
    (st,) = settings(**{"inputs.steering.topic": "/s", "inputs.steering.kind": "steering_wheel",
                        "inputs.steering.scale": math.pi / 180, "vehicle.steering_ratio": 15.0})
    got = si.chassis_from_scalars(10.0, [(st, 270.0)])
    assert isinstance(got, ChassisSample)
    assert got.steer == pytest.approx(math.radians(18.0)) and math.isnan(got.speed)


def test_offset_added_after_scale_and_speed_in_kmh() -> None:
    (sp,) = settings(**{"inputs.speed.topic": "/v", "inputs.speed.scale": 1 / 3.6,
                        "inputs.speed.offset": 0.5})
    got = si.chassis_from_scalars(10.0, [(sp, 36.0)])
    assert isinstance(got, ChassisSample) and got.speed == pytest.approx(10.5)
    assert math.isnan(got.steer)


@pytest.mark.parametrize(("stamp", "raw", "reason"), [
    (0.0, 0.1, "bad_stamp"), (math.nan, 0.1, "bad_stamp"), (5.0, math.nan, "nan"),
    (5.0, math.inf, "nan"), (5.0, 0.71, "steer_out_of_range"), (5.0, -0.71, "steer_out_of_range"),
])
def test_rejections(stamp: float, raw: float, reason: str) -> None:
    (st,) = settings(**{"inputs.steering.topic": "/s"})  # max_road_wheel_angle 0.7 rad
    got = si.chassis_from_scalars(stamp, [(st, raw)])
    assert isinstance(got, cv.Rejected) and got.reason == reason and reason in cv.REASONS


def test_message_conversion_header_or_receive_time() -> None:
    fields = typestore_fields(TS)
    st, sp = (si.plan_scalar_input(s, fields) for s in settings(
        **{"inputs.steering.topic": "/s", "inputs.speed.topic": "/v"}))
    assert st.receive_time_stamped and not sp.receive_time_stamped
    got = si.chassis_from_scalar_msg(T["std_msgs/msg/Float64"](data=0.1), [st], 123.5)
    assert isinstance(got, ChassisSample) and (got.stamp, got.steer) == (123.5, 0.1)
    Vec = T["geometry_msgs/msg/Vector3"]
    tw = T["geometry_msgs/msg/TwistStamped"](
        header=T["std_msgs/msg/Header"](
            stamp=T["builtin_interfaces/msg/Time"](sec=1_800_000_000, nanosec=250_000_000),
            frame_id="base_link"),
        twist=T["geometry_msgs/msg/Twist"](linear=Vec(7.0, 0.0, 0.0), angular=Vec(0, 0, 0)))
    got = si.chassis_from_scalar_msg(tw, [sp], 99.0)
    assert isinstance(got, ChassisSample)
    assert got.stamp == pytest.approx(1_800_000_000.25) and got.speed == 7.0
    tw.header.stamp.sec = 0  # zero stamp -> rejected, not replaced by the receive time
    tw.header.stamp.nanosec = 0
    got = si.chassis_from_scalar_msg(tw, [sp], 99.0)
    assert isinstance(got, cv.Rejected) and got.reason == "bad_stamp"


def test_steering_and_speed_from_one_message_type() -> None:
    # one topic carrying both: JointState used as a stand-in vehicle report (position[0] =
    # angle, velocity[0] = speed); one sample holds both values
    common = {"type": "field", "type_name": "sensor_msgs/msg/JointState"}
    cfg = {f"inputs.{r}.{k}": v for r in ("steering", "speed") for k, v in common.items()}
    cfg.update({"inputs.steering.topic": "/report", "inputs.speed.topic": "/report",
                "inputs.steering.field": "position[0]", "inputs.speed.field": "velocity[0]",
                "inputs.joint_states.topic": "/unused_joint_states"})
    fields = typestore_fields(TS)
    planned = [si.plan_scalar_input(s, fields) for s in settings(**cfg)]
    import numpy as np

    msg = T["sensor_msgs/msg/JointState"](
        header=T["std_msgs/msg/Header"](
            stamp=T["builtin_interfaces/msg/Time"](sec=20, nanosec=0), frame_id=""),
        name=["x"], position=np.array([0.05]), velocity=np.array([4.0]), effort=np.array([]))
    got = si.chassis_from_scalar_msg(msg, planned, 1.0)
    assert isinstance(got, ChassisSample) and (got.stamp, got.steer, got.speed) == (20.0, 0.05,
                                                                                  4.0)
    msg.position = np.array([])  # sequence too short for this message: counted rejection
    got = si.chassis_from_scalar_msg(msg, planned, 1.0)
    assert isinstance(got, cv.Rejected) and got.reason == "missing_field"


@pytest.mark.parametrize(("values", "name"), [
    ({"inputs.steering.topic": "/s", "inputs.steering.scale": 0.0}, "inputs.steering.scale"),
    ({"inputs.speed.topic": "/v", "inputs.speed.type": "field"}, "inputs.speed.type_name"),
    ({"inputs.speed.topic": "/v", "inputs.speed.type": "field",
      "inputs.speed.type_name": "acme_msgs/msg/Report"}, "inputs.speed.field"),
    ({"inputs.speed.type_name": "acme_msgs/Report"}, "inputs.speed.type_name"),
    ({"inputs.steering.field": "a..b"}, "inputs.steering.field"),
    ({"inputs.steering.topic": "/imu/data"}, "inputs.steering.topic"),
    ({"inputs.steering.topic": "/x", "inputs.speed.topic": "/x"}, "inputs.speed.topic"),
    ({"inputs.steering.topic": "/s", "inputs.steering.kind": "steering_wheel"},
     "inputs.steering.kind"),
    ({"inputs.steering.type": "int16"}, "inputs.steering.type"),
])
def test_bad_settings_name_the_parameter(values: dict[str, object], name: str) -> None:
    with pytest.raises(schema.ParamError) as info:
        validation.validate({**GEOMETRY, **values})
    assert info.value.name == name


def test_joint_map_wheels_only() -> None:
    jm = cv.JointMap((), ("fl", "fr"), ("rl", "rr"))
    got = cv.chassis_from_joint_state(3.0, ("fl", "fr", "rl", "rr"), (), (1.0, 2.0, 3.0, 4.0), jm)
    assert isinstance(got, ChassisSample) and got.wheel_rear_right == 4.0
    assert math.isnan(got.steer_left)
    with pytest.raises(ValueError, match="only when wheel joints"):
        cv.JointMap(())


@pytest.mark.dds  # rclpy in this process: run under every tested ROS release
@pytest.mark.parametrize("type_name", [
    "geometry_msgs/msg/TwistStamped", "geometry_msgs/msg/PoseWithCovariance",
    "sensor_msgs/msg/JointState", "sensor_msgs/msg/NavSatFix", "std_msgs/msg/Float32",
])
def test_rclpy_type_lookup_agrees_with_rosbags(type_name: str) -> None:
    rm = pytest.importorskip("kinematic_monitor.ros.messages")
    assert rm.rclpy_fields_of(type_name) == typestore_fields(TS)(type_name)


@pytest.mark.dds  # rclpy in this process: run under every tested ROS release
def test_import_message_class_errors_name_the_type() -> None:
    rm = pytest.importorskip("kinematic_monitor.ros.messages")
    assert rm.import_message_class("std_msgs/msg/Float64").__name__ == "Float64"
    with pytest.raises(ImportError, match="acme_msgs/msg/SteeringReport.*not installed"):
        rm.import_message_class("acme_msgs/msg/SteeringReport")
    with pytest.raises(ImportError, match="std_msgs/msg/NoSuchThing"):
        rm.import_message_class("std_msgs/msg/NoSuchThing")
