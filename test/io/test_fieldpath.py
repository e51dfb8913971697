"""fieldpath: parsing, resolution and the static check of paths into ROS messages.

Message layouts (field names and types) are those of the ROS 2 definitions
(std_msgs/Header, geometry_msgs/Vector3Stamped, sensor_msgs/JointState), taken here from
rosbags' bundled typestore, an independent implementation of those definitions.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from rosbags.typesys import Stores, get_types_from_msg, get_typestore

from kinematic_monitor.io import fieldpath as fp
from kinematic_monitor.io.scalar_inputs import typestore_fields

TS = get_typestore(Stores.ROS2_HUMBLE)
TS.register(get_types_from_msg("std_msgs/Header header\nfloat64 road_wheel_angle\n",
                               "acme_msgs/msg/Report"))
TS.register(get_types_from_msg("acme_msgs/Report report\nacme_msgs/Report[] history\n"
                               "float32[3] gains\nstring label\n",
                               "acme_msgs/msg/SteeringReport"))
FIELDS = typestore_fields(TS)


def test_parse_nested_and_indexed() -> None:
    p = fp.parse("a.b[2].c[0][1]")
    assert p.steps == ("a", "b", 2, "c", 0, 1)
    assert str(p.prefix(3)) == "a.b[2]"
    assert str(p.prefix(0).extend("header", "stamp")) == "header.stamp"


@pytest.mark.parametrize("bad", ["", " ", "a..b", ".a", "a.", "a[x]", "a[-1]", "1a", "a b",
                                 "a[2", "a.b]"])
def test_parse_rejects_malformed(bad: str) -> None:
    with pytest.raises(fp.FieldPathError):
        fp.parse(bad)


def test_resolve_on_objects_and_errors_name_the_step() -> None:
    msg = SimpleNamespace(report=SimpleNamespace(wheels=[SimpleNamespace(angle=0.25)]))
    assert fp.resolve_number(msg, fp.parse("report.wheels[0].angle")) == 0.25
    with pytest.raises(fp.FieldPathError, match=r"'report.wheels' has no element \[3\]"):
        fp.resolve(msg, fp.parse("report.wheels[3].angle"))
    with pytest.raises(fp.FieldPathError, match="has no field 'speed'"):
        fp.resolve(msg, fp.parse("report.speed"))
    with pytest.raises(fp.FieldPathError, match="not a number"):
        fp.resolve_number(msg, fp.parse("report.wheels"))


def test_resolve_on_rosbags_message_with_numpy_array() -> None:
    T = TS.types
    msg = T["sensor_msgs/msg/JointState"](
        header=T["std_msgs/msg/Header"](stamp=T["builtin_interfaces/msg/Time"](sec=5, nanosec=0),
                                        frame_id=""),
        name=["a", "b"], position=np.array([0.1, 0.2]), velocity=np.array([]),
        effort=np.array([]))
    assert fp.resolve_number(msg, fp.parse("position[1]")) == pytest.approx(0.2)
    assert isinstance(fp.resolve_number(msg, fp.parse("position[1]")), float)


def test_plan_finds_nearest_header_for_the_stamp() -> None:
    plan = fp.plan("acme_msgs/msg/SteeringReport", fp.parse("report.road_wheel_angle"), FIELDS)
    assert str(plan.stamp_path) == "report.header.stamp" and plan.leaf.base == "float64"
    plan = fp.plan("acme_msgs/msg/SteeringReport", fp.parse("history[4].road_wheel_angle"),
                   FIELDS)
    assert str(plan.stamp_path) == "history[4].header.stamp"
    plan = fp.plan("geometry_msgs/msg/Vector3Stamped", fp.parse("vector.z"), FIELDS)
    assert str(plan.stamp_path) == "header.stamp"
    # a fixed array of float32 in a message without a header: receive time
    plan = fp.plan("acme_msgs/msg/SteeringReport", fp.parse("gains[2]"), FIELDS)
    assert plan.stamp_path is None and plan.leaf.base == "float32"
    plan = fp.plan("std_msgs/Float64", fp.parse("data"), FIELDS)  # short type form
    assert plan.type_name == "std_msgs/msg/Float64" and plan.stamp_path is None


@pytest.mark.parametrize(("path", "words"), [
    ("report.road_wheel_angel", "no field 'road_wheel_angel' (fields: header, road_wheel_angle)"),
    ("gains[3]", "beyond"),
    ("gains", "array"),
    ("history.road_wheel_angle", "is an array"),
    ("label", "string, not a number"),
    ("report", "acme_msgs/msg/Report, not a number"),
    ("report.road_wheel_angle[0]", "not an array"),
    ("report.road_wheel_angle.x", "float64, it has no field 'x'"),
])
def test_plan_errors_name_type_path_and_reason(path: str, words: str) -> None:
    with pytest.raises(fp.FieldPathError) as info:
        fp.plan("acme_msgs/msg/SteeringReport", fp.parse(path), FIELDS)
    text = str(info.value)
    assert "acme_msgs/msg/SteeringReport" in text and path in text and words in text, text


def test_plan_unknown_type() -> None:
    with pytest.raises(fp.FieldPathError, match="proving_msgs/msg/Nothing is unknown"):
        fp.plan("proving_msgs/msg/Nothing", fp.parse("x"), FIELDS)
    with pytest.raises(fp.FieldPathError, match="package/msg/Name"):
        fp.plan("not a type", fp.parse("x"), FIELDS)
