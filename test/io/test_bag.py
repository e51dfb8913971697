"""bag: rosbag2 folders (sqlite3 and MCAP) written here with the rosbags Writer."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from rosbags.rosbag2 import StoragePlugin, Writer
from rosbags.typesys import Stores, get_typestore

from fixtures.bags import STORAGES, T0, TS, T, header, imu, joint_state, odometry, write_bag
from kinematic_monitor.core.samples import ChassisSample, ImuSample, LocalizationSample
from kinematic_monitor.io.bag import BagError, open_bag


@pytest.mark.parametrize("storage", STORAGES)
def test_samples_in_stamp_order_with_counts(tmp_path: Path, storage: StoragePlugin) -> None:
    bag = write_bag(tmp_path / "b", storage)
    with open_bag(bag, {"inputs": {"gnss": {"topic": ""}}}) as src:
        assert src.message_count == 300 + 300 + 150
        assert src.duration == pytest.approx(3.0, abs=0.05)
        seen: list[tuple[int, int]] = []
        samples = list(
            src.iter_samples(progress=lambda a, b: seen.append((a, b)), progress_every=100)
        )
        assert src.damage is None and src.out_of_order == 0 and not src.warnings
    stamps = [s.stamp for s in samples]
    assert stamps == sorted(stamps)  # header-stamp order across topics
    kinds = [type(s) for s in samples]
    assert kinds.count(ChassisSample) == 300 and kinds.count(ImuSample) == 300
    assert kinds.count(LocalizationSample) == 150
    assert seen[-1] == (750, 750)
    first = next(s for s in samples if isinstance(s, ChassisSample))
    assert first.stamp == pytest.approx(T0) and first.steer_left == pytest.approx(0.05)
    assert first.wheel_rear_right == 30.0
    loc = [s for s in samples if isinstance(s, LocalizationSample)]
    assert loc[1].x == pytest.approx(0.186) and loc[1].frame_id == "map"
    assert src.stats["/joint_states"].accepted == 300


def test_rejections_counted_per_topic_and_reason(tmp_path: Path) -> None:
    extra = [
        (
            "/joint_states",
            "sensor_msgs/msg/JointState",
            T0 + 1.0005,
            joint_state(T0 + 1.0005, steer=math.nan),
        ),
        (
            "/joint_states",
            "sensor_msgs/msg/JointState",
            T0 + 1.0006,
            joint_state(T0 + 1.0006, steer=2.0),
        ),
        ("/joint_states", "sensor_msgs/msg/JointState", T0 + 1.0007, b"\x00\x01\x00\x00\x01"),
    ]
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=2.0, extra=extra)
    src = open_bag(bag, {"inputs.gnss.topic": "", "vehicle.max_road_wheel_angle": 0.7})
    list(src.iter_samples())
    st = src.stats["/joint_states"]
    assert st.read == 203 and st.accepted == 200
    assert dict(st.rejected) == {"nan": 1, "steer_out_of_range": 1, "malformed": 1}
    src.close()


def test_late_sample_beyond_window_is_counted(tmp_path: Path) -> None:
    # an Imu message logged 1 s after its stamp, with a 0.2 s reorder window: the node's
    # buffer has released later stamps by then (core/ordering.py), so it is dropped
    extra = [("/imu/data", "sensor_msgs/msg/Imu", T0 + 1.5, imu(T0 + 0.5005))]
    bag = write_bag(tmp_path / "b", StoragePlugin.MCAP, seconds=2.0, extra=extra)
    src = open_bag(bag, {"inputs.reorder_window": 0.2})
    samples = list(src.iter_samples())
    assert src.out_of_order == 1 and src.stats["/imu/data"].rejected["out_of_order"] == 1
    assert [s.stamp for s in samples] == sorted(s.stamp for s in samples)
    assert any("/gnss/fix" in w for w in src.warnings)  # optional topic absent: a warning


def test_backwards_time_jump_starts_new_timeline(tmp_path: Path) -> None:
    extra = [("/joint_states", "sensor_msgs/msg/JointState", T0 + 2.5, joint_state(T0 - 100.0))]
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=2.0, extra=extra)
    src = open_bag(bag, None)
    samples = list(src.iter_samples())
    assert src.time_jumps == 1 and samples[-1].stamp == pytest.approx(T0 - 100.0)


def test_missing_or_mistyped_topics(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=0.2)
    with pytest.raises(BagError, match=r"'/js'.*inputs.joint_states.topic.*not in bag"):
        open_bag(bag, {"inputs": {"joint_states": {"topic": "/js"}}})
    with pytest.raises(
        BagError, match=r"'/imu/data'.*type sensor_msgs/msg/Imu, expected nav_msgs"
    ):
        open_bag(bag, {"inputs": {"localization": {"topic": "/imu/data"}}})
    with pytest.raises(BagError, match="pose_with_covariance.*odometry|expected geometry_msgs"):
        open_bag(bag, {"inputs": {"localization": {"type": "pose_with_covariance"}}})
    with pytest.raises(BagError, match="inputs.localization.type"):
        open_bag(bag, {"inputs": {"localization": {"type": "gps"}}})
    with pytest.raises(BagError, match="does not exist"):
        open_bag(tmp_path / "nothing", None)
    # ROS parameter-file form and unknown extra topics are fine
    cfg = {"kinematic_monitor": {"ros__parameters": {"inputs": {"imu": {"topic": ""}}}}}
    src = open_bag(bag, cfg)
    assert "/imu/data" not in src.stats and len(list(src.iter_samples())) == 30


def test_pose_with_covariance_input(tmp_path: Path) -> None:
    bag = tmp_path / "b"
    pose = T["geometry_msgs/msg/PoseWithCovarianceStamped"](
        header=header(T0 + 0.05, "map"),
        pose=T["geometry_msgs/msg/PoseWithCovariance"](
            pose=T["geometry_msgs/msg/Pose"](
                position=T["geometry_msgs/msg/Point"](x=1.0, y=2.0, z=0.0),
                orientation=T["geometry_msgs/msg/Quaternion"](x=0.0, y=0.0, z=0.0, w=1.0),
            ),
            covariance=np.zeros(36),
        ),
    )
    raw = bytes(TS.serialize_cdr(pose, "geometry_msgs/msg/PoseWithCovarianceStamped"))
    extra = [("/pose", "geometry_msgs/msg/PoseWithCovarianceStamped", T0 + 0.06, raw)]
    write_bag(bag, StoragePlugin.MCAP, seconds=0.2, extra=extra)
    cfg = {
        "inputs.localization.topic": "/pose",
        "inputs.localization.type": "pose_with_covariance",
    }
    samples = list(open_bag(bag, cfg).iter_samples())
    loc = [s for s in samples if isinstance(s, LocalizationSample)]
    assert len(loc) == 1 and (loc[0].x, loc[0].y) == (1.0, 2.0) and math.isnan(loc[0].vx)


@pytest.mark.parametrize("storage", STORAGES)
@pytest.mark.parametrize("fraction", [0.83, 0.5, 0.31, 0.02])
def test_truncated_bag_read_up_to_damage(
    tmp_path: Path, storage: StoragePlugin, fraction: float
) -> None:
    bag = write_bag(tmp_path / "b", storage, seconds=6.0)
    (data,) = [p for p in bag.iterdir() if p.suffix in (".db3", ".mcap")]
    size = data.stat().st_size
    with open(data, "r+b") as fh:
        fh.truncate(int(size * fraction) + 13)  # a cut at an arbitrary byte
    src = open_bag(bag, None)
    samples = list(src.iter_samples())
    damage = src.damage
    assert damage is not None, "damage must be reported"
    assert damage.expected == {"/joint_states": 600, "/localization/odom": 300, "/imu/data": 600}
    assert sum(damage.read.values()) < 1500
    stamps = [s.stamp for s in samples]
    assert stamps == sorted(stamps)
    if samples:
        assert damage.last_good_stamp == stamps[-1]
    else:
        assert math.isnan(damage.last_good_stamp)
    assert "read up to stamp" in damage.summary()
    if fraction >= 0.5:  # most of what is before the cut comes back
        assert len(samples) > 0.3 * fraction * 1500


# ---- steering and speed from other message types (inputs.steering / inputs.speed) -------
# Field paths, scale and offset per the parameter descriptions in kinematic_monitor/params.py;
# message layouts from the ROS 2 definitions of std_msgs/Float64 and
# geometry_msgs/TwistStamped (rosbags' bundled typestore serialises them here).

STEER_REPORT_MSG = """\
std_msgs/Header header
float64 road_wheel_angle_deg
float64[2] spare
"""  # invented vehicle message of our proving-ground car


def _scalar_bag(path: Path, storage: StoragePlugin = StoragePlugin.SQLITE3,
                custom: bool = False, seconds: float = 1.0) -> Path:
    """Float64 (or custom SteerReport) steering 50 Hz, TwistStamped speed 50 Hz, Odometry."""
    from rosbags.typesys import get_types_from_msg

    ts = get_typestore(Stores.ROS2_HUMBLE)
    if custom:
        ts.register(get_types_from_msg(STEER_REPORT_MSG, "proving_msgs/msg/SteerReport"))
    Vec = ts.types["geometry_msgs/msg/Vector3"]
    records: list[tuple[float, str, bytes]] = []
    for i in range(int(seconds * 50)):
        t = T0 + i * 0.02
        if custom:
            msg = ts.types["proving_msgs/msg/SteerReport"](
                header=header(t), road_wheel_angle_deg=2.0 + 0.01 * i,
                spare=np.zeros(2, dtype=np.float64))
            data = ts.serialize_cdr(msg, "proving_msgs/msg/SteerReport")
        else:
            data = ts.serialize_cdr(ts.types["std_msgs/msg/Float64"](data=0.03 + 0.001 * i),
                                    "std_msgs/msg/Float64")
        records.append((t + 0.005, "/steering", bytes(data)))
        tw = ts.types["geometry_msgs/msg/TwistStamped"](
            header=header(t + 0.01), twist=ts.types["geometry_msgs/msg/Twist"](
                linear=Vec(36.0, 0.0, 0.0), angular=Vec(0.0, 0.0, 0.0)))
        records.append((t + 0.012, "/speed", bytes(ts.serialize_cdr(
            tw, "geometry_msgs/msg/TwistStamped"))))
        records.append((t + 0.013, "/localization/odom", odometry(t, 10.0 * i * 0.02)))
    records.sort(key=lambda r: r[0])
    types = {"/steering": "proving_msgs/msg/SteerReport" if custom else "std_msgs/msg/Float64",
             "/speed": "geometry_msgs/msg/TwistStamped",
             "/localization/odom": "nav_msgs/msg/Odometry"}
    with Writer(path, version=9, storage_plugin=storage) as w:
        conns = {t: w.add_connection(t, m, typestore=ts) for t, m in types.items()}
        for log_t, topic, data in records:
            w.write(conns[topic], int(round(log_t * 1e9)), data)
    return path


SCALAR_CFG = {"inputs": {
    "imu": {"topic": ""}, "gnss": {"topic": ""},
    "steering": {"topic": "/steering", "type": "float64"},
    "speed": {"topic": "/speed", "type": "twist_stamped", "scale": 1 / 3.6},  # km/h -> m/s
}}


@pytest.mark.parametrize("storage", STORAGES)
def test_float64_steering_and_twist_speed_without_joint_states(
        tmp_path: Path, storage: StoragePlugin) -> None:
    bag = _scalar_bag(tmp_path / "b", storage)
    with open_bag(bag, SCALAR_CFG) as src:
        assert "/joint_states" not in src.stats  # replaced by both inputs: not read
        samples = list(src.iter_samples())
        steer = [s for s in samples if isinstance(s, ChassisSample) and math.isfinite(s.steer)]
        speed = [s for s in samples if isinstance(s, ChassisSample) and math.isfinite(s.speed)]
        assert len(steer) == len(speed) == 50
        # Float64 has no header: stamped with the log time, and counted as such
        assert steer[0].stamp == pytest.approx(T0 + 0.005, abs=1e-6)
        assert steer[3].steer == pytest.approx(0.033)
        assert math.isnan(steer[0].speed)
        assert src.stats["/steering"].receive_time_stamped == 50
        # TwistStamped: header stamp, twist.linear.x scaled km/h -> m/s
        assert speed[0].stamp == pytest.approx(T0 + 0.01, abs=1e-6)
        assert speed[0].speed == pytest.approx(10.0)
        assert src.stats["/speed"].receive_time_stamped == 0
        stamps = [s.stamp for s in samples]
        assert stamps == sorted(stamps)


def test_custom_type_from_bag_definition_with_degree_scale(tmp_path: Path) -> None:
    bag = _scalar_bag(tmp_path / "b", custom=True)
    cfg = {"inputs": {**SCALAR_CFG["inputs"], "steering": {
        "topic": "/steering", "type": "field", "type_name": "proving_msgs/msg/SteerReport",
        "field": "road_wheel_angle_deg", "scale": math.pi / 180}}}
    with open_bag(bag, cfg) as src:
        steer = [s for s in src.iter_samples()
                 if isinstance(s, ChassisSample) and math.isfinite(s.steer)]
        assert len(steer) == 50 and src.stats["/steering"].receive_time_stamped == 0
        assert steer[0].stamp == pytest.approx(T0, abs=1e-6)  # the message's header stamp
        assert steer[10].steer == pytest.approx(math.radians(2.1))
        assert src.stats["/steering"].msgtype == "proving_msgs/msg/SteerReport"


@pytest.mark.parametrize(("field", "words"), [
    ("road_wheel_angle", "no field 'road_wheel_angle'"),
    ("spare[2]", "beyond"),
    ("header.frame_id", "not a number"),
])
def test_bad_field_path_names_topic_type_and_path(tmp_path: Path, field: str,
                                                  words: str) -> None:
    bag = _scalar_bag(tmp_path / "b", custom=True, seconds=0.1)
    cfg = {"inputs": {**SCALAR_CFG["inputs"], "steering": {
        "topic": "/steering", "type": "field", "type_name": "proving_msgs/msg/SteerReport",
        "field": field}}}
    with pytest.raises(BagError) as info, open_bag(bag, cfg) as src:
        list(src.iter_samples())
    text = str(info.value)
    assert "/steering" in text and "proving_msgs/msg/SteerReport" in text
    assert field in text and words in text


def test_scalar_topic_with_wrong_type_is_refused(tmp_path: Path) -> None:
    bag = _scalar_bag(tmp_path / "b", seconds=0.1)
    cfg = {"inputs": {**SCALAR_CFG["inputs"], "speed": {"topic": "/steering"},
                      "steering": {"topic": "/speed"}}}
    with pytest.raises(BagError, match="'/speed' .*TwistStamped, expected std_msgs/msg/Float64"):
        open_bag(bag, cfg)


def test_steering_input_keeps_joint_state_wheels(tmp_path: Path) -> None:
    # steering from a Float64 topic, wheel speeds still from JointState
    ts = get_typestore(Stores.ROS2_HUMBLE)
    extra = [("/steer_angle", "std_msgs/msg/Float64", T0 + 0.0105 + 0.01 * i,
              bytes(ts.serialize_cdr(ts.types["std_msgs/msg/Float64"](data=0.02),
                                     "std_msgs/msg/Float64"))) for i in range(100)]
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=1.0, extra=extra)
    cfg = {"inputs": {"gnss": {"topic": ""}, "steering": {"topic": "/steer_angle"}}}
    with open_bag(bag, cfg) as src:
        chassis = [s for s in src.iter_samples() if isinstance(s, ChassisSample)]
    from_js = [s for s in chassis if math.isfinite(s.wheel_rear_left)]
    from_float = [s for s in chassis if math.isfinite(s.steer)]
    assert len(from_js) == 100 and len(from_float) == 100
    assert all(math.isnan(s.steer_left) and math.isnan(s.steer) for s in from_js)
    assert from_js[0].wheel_rear_left == 30.0 and from_float[0].steer == 0.02


def test_steering_wheel_angles_divided_by_the_ratio(tmp_path: Path) -> None:
    # vehicle.steering_ratio != 1: the steer joints report steering-wheel angles, and the
    # reader hands the core road-wheel angles (steering ratio = steering-wheel angle per
    # road-wheel angle, SAE J670 vocabulary); the live node uses the same JointMap rule
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=0.5)
    config = {"inputs": {"gnss": {"topic": ""}}, "vehicle": {"steering_ratio": 2.5}}
    with open_bag(bag, config) as src:
        chassis = [s for s in src.iter_samples() if isinstance(s, ChassisSample)]
    assert chassis and all(s.steer_left == pytest.approx(0.05 / 2.5) for s in chassis)
