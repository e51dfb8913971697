"""rosbag2 output of the simulator, read back with ``rosbags`` (the reference reader)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from rosbags.rosbag2 import Reader
from rosbags.typesys import Stores, get_typestore

from fixtures.traces import _Vehicle, circle_trace
from kinematic_monitor.config.files import load_config
from kinematic_monitor.sim import faults as flt
from kinematic_monitor.sim.bagout import (
    DEFAULT_TOPICS,
    record_cdr,
    vehicle_params,
    write_bag,
    write_simulation,
)
from kinematic_monitor.sim.sensors import (
    DEFAULT_EPOCH_NS,
    ImuRecord,
    JointStateRecord,
    NavSatFixRecord,
    OdometryRecord,
    Record,
    SensorConfig,
    add_noise,
    iter_records,
    sample_truth,
)

TYPES = {topic: msgtype for topic, msgtype in DEFAULT_TOPICS.values()}
STORE = get_typestore(Stores.ROS2_JAZZY)


def read_bag(path: Path) -> dict[str, list[tuple[int, object]]]:
    """topic -> [(log time ns, deserialised message)] using rosbags' own reader."""
    out: dict[str, list[tuple[int, object]]] = {}
    with Reader(path) as reader:
        for conn in reader.connections:
            assert TYPES[conn.topic] == conn.msgtype
        for conn, logtime, raw in reader.messages():
            msg = STORE.deserialize_cdr(raw, conn.msgtype)
            out.setdefault(conn.topic, []).append((logtime, msg))
    return out


def stamp_ns(msg: object) -> int:
    st = msg.header.stamp  # type: ignore[attr-defined]
    return int(st.sec) * 1_000_000_000 + int(st.nanosec)


@pytest.mark.parametrize("storage", ["sqlite3", "mcap"])
def test_bag_reads_back_with_topics_types_counts_and_times(tmp_path: Path, storage: str) -> None:
    trace = circle_trace(v=10.0, delta=0.1, duration=3.0)
    cfg = SensorConfig()
    cfg.imu.dropout = 0.1
    faults = [flt.LocalizationJump(start=1.0, dx=2.0, dy=0.0)]
    out = write_simulation(
        tmp_path / "bag", trace, seed=4, storage=storage, faults=faults, config=cfg
    )
    meta = (out.bag / "metadata.yaml").read_text()
    assert f"storage_identifier: {storage}" in meta
    msgs = read_bag(out.bag)
    assert set(msgs) == set(TYPES)
    counts = {t: len(v) for t, v in msgs.items()}
    # rate x 3 s + 1 samples (t = 0 included); IMU loses ~10 % to dropouts
    assert counts["/joint_states"] == 301
    assert counts["/localization/odom"] == 151
    assert counts["/gnss/fix"] == 31
    assert 601 * 0.9 - 5 * math.sqrt(601 * 0.09) < counts["/imu/data"] < 601
    assert out.counts == {
        "joint_states": 301,
        "odometry": 151,
        "imu": counts["/imu/data"],
        "gnss": 31,
    }
    for topic, items in msgs.items():
        rate = {"/joint_states": 100, "/localization/odom": 50, "/imu/data": 200, "/gnss/fix": 10}
        period = 1_000_000_000 // rate[topic]
        for logtime, msg in items:
            st = stamp_ns(msg)
            # header stamp = epoch + simulated time on the sensor's sample grid
            assert (st - DEFAULT_EPOCH_NS) % period == 0
            # logged at arrival: never before the stamp (latency >= 0)
            assert logtime >= st
    odom = msgs["/localization/odom"]
    assert odom[0][1].header.frame_id == "map"  # type: ignore[attr-defined]
    assert odom[0][1].child_frame_id == "base_link"  # type: ignore[attr-defined]
    # the injected 2 m jump at t = 1 s shows in the odometry x track against truth
    for _, msg in odom:
        t = (stamp_ns(msg) - DEFAULT_EPOCH_NS) * 1e-9
        err = msg.pose.pose.position.x - float(trace.x[trace.at(t)])  # type: ignore[attr-defined]
        expected = 2.0 if t >= 1.0 else 0.0
        assert abs(err - expected) < 0.15  # 0.02 m noise sigma; 7 sigma margin
    js = msgs["/joint_states"][0][1]
    assert list(js.name) == [  # type: ignore[attr-defined]
        "front_left_steer_joint",
        "front_right_steer_joint",
        "front_left_wheel_joint",
        "front_right_wheel_joint",
        "rear_left_wheel_joint",
        "rear_right_wheel_joint",
    ]


def test_truth_json_and_params_yaml(tmp_path: Path) -> None:
    trace = circle_trace(duration=2.0)
    faults = [flt.SteeringOffset(offset=0.02, start=0.5), flt.TopicSilent("gnss", 1.0, 0.5)]
    out = write_simulation(tmp_path / "b", trace, seed=9, faults=faults)
    doc = json.loads(out.truth.read_text())
    assert doc["schema"] == "kinematic_monitor.sim_truth/1"
    assert doc["scenario"] == "test_circle" and doc["seed"] == 9
    assert doc["epoch"] == 1_800_000_000.0
    assert [f["name"] for f in doc["faults"]] == ["steer-offset", "silent"]
    truth = doc["truth"]
    assert [(iv["kind"], iv["sim_start"], iv["sim_end"]) for iv in truth] == [
        ("calibration_bias", 0.5, 2.0),
        ("input_stale", 1.0, 1.5),
    ]
    # interval times are header-stamp seconds (epoch + simulated time)
    assert truth[0]["start"] == pytest.approx(1_800_000_000.5, abs=1e-6)
    assert doc["topics"]["gnss"] == {
        "topic": "/gnss/fix",
        "type": "sensor_msgs/msg/NavSatFix",
        "count": 21 - 5,
    }
    assert doc["sensors"]["imu"]["rate_hz"] == 200.0
    # the params file loads with the node's own schema loader (docs/interface.md section 2)
    cfg = load_config(out.params)
    assert cfg.vehicle.wheelbase == 2.70
    assert cfg.vehicle.cg_to_rear_axle == 1.35
    assert cfg.vehicle.wheel_radius == 0.31
    assert cfg.vehicle.track_width == 1.55


def test_vehicle_params_derives_inner_wheel_limit() -> None:
    class V(_Vehicle):
        max_steer = 0.6

    p = vehicle_params(V())
    # Ackermann inner wheel at 0.6 rad bicycle angle: atan(2.7 / (2.7/tan 0.6 - 0.775))
    inner = math.atan(2.7 / (2.7 / math.tan(0.6) - 0.775))
    assert inner < p["vehicle.max_road_wheel_angle"] <= inner + 0.06
    assert "vehicle.max_road_wheel_angle" not in vehicle_params(_Vehicle())


def _typestore_message(r: Record) -> object:
    """The rosbags typestore object for one record (the reference for record_cdr)."""
    t = STORE.types
    sec, nanosec = divmod(r.stamp_ns, 1_000_000_000)
    vec, quat = t["geometry_msgs/msg/Vector3"], t["geometry_msgs/msg/Quaternion"]

    def hdr(frame_id: str) -> object:
        return t["std_msgs/msg/Header"](
            stamp=t["builtin_interfaces/msg/Time"](sec=sec, nanosec=nanosec), frame_id=frame_id)

    if isinstance(r, JointStateRecord):
        return t["sensor_msgs/msg/JointState"](
            header=hdr(""), name=list(r.name), position=np.array(r.position),
            velocity=np.array(r.velocity), effort=np.zeros(0))
    if isinstance(r, OdometryRecord):
        pose = t["geometry_msgs/msg/Pose"](position=t["geometry_msgs/msg/Point"](*r.position),
                                           orientation=quat(*r.orientation))
        twist = t["geometry_msgs/msg/Twist"](linear=vec(*r.linear), angular=vec(*r.angular))
        return t["nav_msgs/msg/Odometry"](
            header=hdr(r.frame_id), child_frame_id=r.child_frame_id,
            pose=t["geometry_msgs/msg/PoseWithCovariance"](
                pose=pose, covariance=np.array(r.pose_covariance)),
            twist=t["geometry_msgs/msg/TwistWithCovariance"](
                twist=twist, covariance=np.array(r.twist_covariance)))
    if isinstance(r, ImuRecord):
        return t["sensor_msgs/msg/Imu"](
            header=hdr(r.frame_id), orientation=quat(*r.orientation),
            orientation_covariance=np.array(r.orientation_covariance),
            angular_velocity=vec(*r.angular_velocity),
            angular_velocity_covariance=np.array(r.angular_velocity_covariance),
            linear_acceleration=vec(*r.linear_acceleration),
            linear_acceleration_covariance=np.array(r.linear_acceleration_covariance))
    assert isinstance(r, NavSatFixRecord)
    return t["sensor_msgs/msg/NavSatFix"](
        header=hdr(r.frame_id),
        status=t["sensor_msgs/msg/NavSatStatus"](status=r.status, service=r.service),
        latitude=r.latitude, longitude=r.longitude, altitude=r.altitude,
        position_covariance=np.array(r.position_covariance),
        position_covariance_type=r.covariance_type)


def test_serializer_matches_typestore_round_trip() -> None:
    trace = circle_trace(duration=0.2)
    cfg = SensorConfig()
    series = sample_truth(trace, cfg)
    add_noise(series, cfg, 0)
    seen = set()
    for r in iter_records(series, cfg):
        msgtype = DEFAULT_TOPICS[r.key][1]
        msg = STORE.deserialize_cdr(record_cdr(r), msgtype)
        assert stamp_ns(msg) == r.stamp_ns
        if r.key == "imu":
            assert msg.angular_velocity.z == r.angular_velocity[2]
            assert np.array_equal(
                msg.linear_acceleration_covariance, r.linear_acceleration_covariance
            )
        elif r.key == "gnss":
            assert (msg.latitude, msg.longitude) == (r.latitude, r.longitude)
            assert msg.status.status == 0
        elif r.key == "odometry":
            assert msg.pose.pose.orientation.z == r.orientation[2]
            assert msg.twist.covariance[35] == r.twist_covariance[35]
        else:
            assert tuple(msg.velocity) == r.velocity
        seen.add(r.key)
    assert seen == {"joint_states", "odometry", "imu", "gnss"}


def test_record_bytes_are_byte_identical_to_rosbags_typestore() -> None:
    # reference: rosbags' own CDR serialiser for the ROS 2 Jazzy message definitions
    trace = circle_trace(duration=0.3)
    cfg = SensorConfig()
    cfg.odometry.frame_id = "odom"  # other string lengths shift every later offset
    cfg.imu.frame_id = "imu"
    series = sample_truth(trace, cfg)
    add_noise(series, cfg, 0)
    n = 0
    for r in iter_records(series, cfg):
        msgtype = DEFAULT_TOPICS[r.key][1]
        assert record_cdr(r) == bytes(STORE.serialize_cdr(_typestore_message(r), msgtype)), r.key
        n += 1
    assert n > 100


def test_write_bag_refuses_existing_and_cleans_up_on_error(tmp_path: Path) -> None:
    (tmp_path / "exists").mkdir()
    with pytest.raises(FileExistsError):
        write_bag(tmp_path / "exists", [])
    with pytest.raises(ValueError, match="storage 'zip'"):
        write_bag(tmp_path / "x", [], storage="zip")

    trace = circle_trace(duration=0.5)
    cfg = SensorConfig()
    series = sample_truth(trace, cfg)
    add_noise(series, cfg, 0)
    with pytest.raises(ValueError, match="topic key 'gnss'"):
        write_bag(
            tmp_path / "partial",
            iter_records(series, cfg),
            only=["imu", "joint_states", "odometry"],
        )
    assert not (tmp_path / "partial").exists()
