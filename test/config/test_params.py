"""Parameter schema, ROS 2 parameter-file loading, validation and writing."""

from __future__ import annotations

import io
import json
import math
import os
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from kinematic_monitor.config import docs, schema, validation
from kinematic_monitor.config.docs import spec_table_markdown
from kinematic_monitor.config.files import (
    dump_params_yaml,
    dumps_params_yaml,
    load_params_file,
    parse_params_text,
)
from kinematic_monitor.config.schema import SPEC_BY_NAME, SPECS, ParamError, check_value
from kinematic_monitor.config.validation import MonitorConfig, validate

REPO = Path(__file__).resolve().parents[2]
CONFIG_FILES = [REPO / "config" / "kinematic_monitor.yaml",
                REPO / "config" / "example_shuttle.yaml"]
# invented test-car geometry (ours)
GEOMETRY = {"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
            "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55}


def _write(tmp_path: Path, text: str, name: str = "p.yaml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def _with(**overrides: Any) -> dict[str, Any]:
    """GEOMETRY plus overrides given as name__with__dots=value."""
    values: dict[str, Any] = dict(GEOMETRY)
    values.update({k.replace("__", "."): v for k, v in overrides.items()})
    return values


# --- the schema itself -----------------------------------------------------------------------
def test_every_default_passes_its_own_checks() -> None:
    for spec in SPECS:
        if spec.required:
            assert spec.default is None, spec.name
            continue
        converted = check_value(spec, spec.default)
        expected = tuple(spec.default) if isinstance(spec.default, list) else spec.default
        assert converted == expected, spec.name


def test_numeric_bounds_are_enforced_just_outside_the_range() -> None:
    # every declared bound rejects a value just past it, and an exclusive bound its own value
    for spec in SPECS:
        if spec.type not in ("double", "integer"):
            continue
        step = 1 if spec.type == "integer" else 1e-9
        if spec.min_value is not None:
            lo = spec.min_value if spec.type == "double" else int(spec.min_value)
            with pytest.raises(ParamError):
                check_value(spec, lo - step)
            if not spec.min_inclusive:
                with pytest.raises(ParamError):
                    check_value(spec, lo)
        if spec.max_value is not None:
            hi = spec.max_value if spec.type == "double" else int(spec.max_value)
            with pytest.raises(ParamError):
                check_value(spec, hi + step)
            if not spec.max_inclusive:
                with pytest.raises(ParamError):
                    check_value(spec, hi)


def test_required_are_exactly_the_vehicle_geometry() -> None:
    assert set(schema.REQUIRED_NAMES) == set(GEOMETRY)


def test_every_spec_is_documented_with_a_unit() -> None:
    for spec in SPECS:
        assert spec.description.strip(), spec.name
        assert spec.unit, spec.name
        assert spec.name.split(".")[0] in ("vehicle", "inputs", "noise", "checks",
                                           "timeouts", "output"), spec.name


def test_typed_groups_match_the_schema() -> None:
    # the typed groups are the one way code reads parameters: every schema parameter has
    # exactly one typed attribute, holding the validated value
    assert set(validation.group_field_names()) == set(SPEC_BY_NAME)
    cfg = validate(GEOMETRY)
    for name in validation.group_field_names():
        obj: Any = cfg
        for part in name.split("."):
            obj = getattr(obj, part)
        assert obj == cfg.values[name], name


def test_topics_and_joints_fixed_thresholds_runtime_changeable() -> None:
    for spec in SPECS:
        if spec.name.startswith("inputs."):
            assert not spec.runtime_changeable, spec.name
        if spec.name.startswith(("checks.", "timeouts.")):
            assert spec.runtime_changeable, spec.name


def test_spec_table_lists_every_parameter_once() -> None:
    table = spec_table_markdown()
    rows = [r for r in table.splitlines() if r.startswith("| `")]
    assert len(rows) == len(SPECS)
    for spec, row in zip(SPECS, rows, strict=True):
        assert row.startswith(f"| `{spec.name}` | {spec.type} |")
    assert "(required)" in rows[0]


def test_descriptor_fields() -> None:
    wheelbase = docs.descriptor_fields(SPEC_BY_NAME["vehicle.wheelbase"])
    assert wheelbase["type"] == "PARAMETER_DOUBLE" and wheelbase["range"] == (0.0, 20.0)
    assert "[m]" in wheelbase["description"] and "(0, 20]" in wheelbase["additional_constraints"]
    assert wheelbase["read_only"] is True
    window = docs.descriptor_fields(SPEC_BY_NAME["checks.nis_window"])
    assert window["type"] == "PARAMETER_INTEGER" and window["read_only"] is False
    joints = docs.descriptor_fields(SPEC_BY_NAME["inputs.joint_states.steering_joints"])
    assert joints["type"] == "PARAMETER_STRING_ARRAY" and joints["range"] is None
    # the type names are rcl_interfaces/msg/ParameterType constants
    msg = pytest.importorskip("rcl_interfaces.msg")
    for name in docs.ROS_TYPE_NAMES.values():
        assert isinstance(getattr(msg.ParameterType, name), int), name


# --- config files ----------------------------------------------------------------------------
@pytest.mark.parametrize("path", CONFIG_FILES, ids=lambda p: p.name)
def test_config_file_loads_and_validates(path: Path) -> None:
    cfg = validate(load_params_file(path))
    assert cfg.vehicle.cg_to_rear_axle < cfg.vehicle.wheelbase


def test_default_config_gives_every_parameter_with_a_comment() -> None:
    path = CONFIG_FILES[0]
    values = load_params_file(path)
    assert set(values) == set(SPEC_BY_NAME)
    # non-default values in the documented file would make it lie about the defaults
    for spec in SPECS:
        if not spec.required:
            assert check_value(spec, values[spec.name]) == check_value(spec, spec.default)
    for line in path.read_text().splitlines():
        if line.strip() and ":" in line and not line.strip().endswith(":") \
                and not line.lstrip().startswith("#"):
            assert "#" in line, f"undocumented line: {line}"


def test_shuttle_example_uses_non_default_inputs() -> None:
    cfg = validate(load_params_file(CONFIG_FILES[1]))
    assert cfg.inputs.joint_states.topic != SPEC_BY_NAME["inputs.joint_states.topic"].default
    assert cfg.inputs.localization.type == "pose_with_covariance"
    assert not cfg.inputs.gnss.enabled
    assert cfg.inputs.imu.enabled


# --- validation --------------------------------------------------------------------------------
def test_defaults_fill_in() -> None:
    cfg = validate(GEOMETRY)
    assert cfg.checks.min_speed == 1.0
    assert cfg.checks.nis_window == 50 and isinstance(cfg.checks.nis_window, int)
    assert cfg.inputs.imu.topic == "/imu/data"
    assert cfg.inputs.joint_states.steering_joints == ("front_left_steer_joint",
                                                       "front_right_steer_joint")


def test_missing_geometry_names_wheelbase() -> None:
    values = dict(GEOMETRY)
    del values["vehicle.wheelbase"]
    with pytest.raises(ParamError) as err:
        validate(values)
    assert err.value.name == "vehicle.wheelbase"
    assert "vehicle.wheelbase" in str(err.value) and "required" in str(err.value)


def test_missing_geometry_in_a_file(tmp_path: Path) -> None:
    path = _write(tmp_path, """\
        kinematic_monitor:
          ros__parameters:
            vehicle: {cg_to_rear_axle: 1.3, wheel_radius: 0.3, track_width: 1.5}
        """)
    with pytest.raises(ParamError, match="vehicle.wheelbase"):
        validate(load_params_file(path))


@pytest.mark.parametrize("lr", [2.7, 3.0])
def test_cg_to_rear_axle_must_be_less_than_wheelbase(lr: float) -> None:
    with pytest.raises(ParamError) as err:
        validate(_with(vehicle__cg_to_rear_axle=lr))
    assert err.value.name == "vehicle.cg_to_rear_axle"
    assert "2.7" in str(err.value)


def test_error_message_names_parameter_value_and_range() -> None:
    with pytest.raises(ParamError) as err:
        validate(_with(vehicle__wheelbase=-1.0))
    text = str(err.value)
    assert "vehicle.wheelbase" in text and "-1.0" in text and "(0, 20] m" in text


def test_unknown_key_refused_by_name(tmp_path: Path) -> None:
    with pytest.raises(ParamError, match="vehicle.wheel_base"):
        validate(_with(vehicle__wheel_base=2.7))
    path = _write(tmp_path, """\
        kinematic_monitor:
          ros__parameters:
            vehicle: {wheelbase: 2.7, cg_to_rear_axle: 1.3, wheel_radius: 0.3, track_width: 1.5}
            checks: {min_sped: 2.0}
        """)
    with pytest.raises(ParamError, match="checks.min_sped"):
        load_params_file(path)


@pytest.mark.parametrize("name, value", [
    ("vehicle.wheelbase", "2.7"),
    ("vehicle.wheelbase", True),
    ("vehicle.wheelbase", [2.7]),
    ("checks.nis_window", 50.0),
    ("checks.nis_window", True),
    ("inputs.imu.topic", 5),
    ("inputs.joint_states.steering_joints", "front_left_steer_joint"),
    ("inputs.joint_states.steering_joints", ["a", 3]),
    ("checks.min_speed", None),
    ("checks.min_speed", {"a": 1}),
])
def test_wrong_type_refused(name: str, value: Any) -> None:
    with pytest.raises(ParamError) as err:
        validate(_with(**{name.replace(".", "__"): value}))
    assert err.value.name == name


def test_int_accepted_for_double() -> None:
    cfg = validate(_with(vehicle__wheelbase=3, checks__min_speed=2))
    assert cfg.vehicle.wheelbase == 3.0 and isinstance(cfg.vehicle.wheelbase, float)


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_non_finite_refused(bad: float) -> None:
    with pytest.raises(ParamError, match="vehicle.track_width"):
        validate(_with(vehicle__track_width=bad))


@pytest.mark.parametrize("text", [".nan", ".inf", "-.inf"])
def test_non_finite_refused_from_yaml(tmp_path: Path, text: str) -> None:
    path = _write(tmp_path, f"""\
        kinematic_monitor:
          ros__parameters:
            vehicle: {{wheelbase: 2.7, cg_to_rear_axle: 1.3, wheel_radius: {text},
                       track_width: 1.5}}
        """)
    with pytest.raises(ParamError, match="vehicle.wheel_radius"):
        validate(load_params_file(path))


@pytest.mark.parametrize("joints", [[], ["a"], ["a", "b", "c"], ["x"] * 100_000])
def test_list_length_mismatch_refused(joints: list[str]) -> None:
    with pytest.raises(ParamError) as err:
        validate(_with(inputs__joint_states__steering_joints=joints))
    assert err.value.name == "inputs.joint_states.steering_joints"
    assert "exactly 2" in str(err.value)
    assert len(str(err.value)) < 400  # a huge list is not echoed in full


def test_duplicate_joint_names_refused() -> None:
    with pytest.raises(ParamError, match="steering_joints"):
        validate(_with(inputs__joint_states__steering_joints=["a", "a"]))
    with pytest.raises(ParamError, match="rear_wheel_joints"):
        validate(_with(inputs__joint_states__rear_wheel_joints=["front_left_wheel_joint", "b"]))


@pytest.mark.parametrize("name, value", [
    ("timeouts.imu", -0.5),
    ("timeouts.localization", 0.0),
    ("output.diagnostics_period", 0.0),
    ("output.diagnostics_period", 2.0),
    ("output.events_log", "../escape.jsonl"),
    ("output.events_log", "logs/../../escape.jsonl"),
    ("output.events_log", ""),
    ("output.prediction_frame", "/map"),
    ("output.prediction_rate", 0.0),
    ("output.prediction_rate", 5000.0),
    ("inputs.localization.type", "pose"),
    ("inputs.qos", "best_effort"),
    ("inputs.joint_states.topic", ""),
    ("inputs.joint_states.topic", "/bad topic"),
    ("inputs.localization.topic", "/a//b"),
    ("inputs.imu.topic", "/1imu"),
    ("checks.error_confidence", 1.0),
    ("checks.nis_window", 0),
    ("vehicle.max_road_wheel_angle", 1.5),
])
def test_out_of_range_refused(name: str, value: Any) -> None:
    with pytest.raises(ParamError) as err:
        validate(_with(**{name.replace(".", "__"): value}))
    assert err.value.name == name


def test_optional_topics_may_be_disabled() -> None:
    cfg = validate(_with(inputs__imu__topic="", inputs__gnss__topic=""))
    assert not cfg.inputs.imu.enabled and not cfg.inputs.gnss.enabled
    assert validate(_with(inputs__imu__topic="~/imu")).inputs.imu.topic == "~/imu"


def test_slip_thresholds_ordered() -> None:
    with pytest.raises(ParamError, match="checks.slip_ratio_warn"):
        validate(_with(checks__slip_ratio_warn=0.3, checks__slip_ratio_error=0.2))


def test_steering_offset_below_max_angle() -> None:
    with pytest.raises(ParamError, match="vehicle.steering_offset"):
        validate(_with(vehicle__steering_offset=0.15, vehicle__max_road_wheel_angle=0.1))


def test_inner_wheel_limit_follows_ackermann_geometry() -> None:
    # Ackermann geometry (Gillespie, Fundamentals of Vehicle Dynamics, ch. 6 [from memory]):
    # inner wheel angle delta_i = atan(L / (R - w/2)) with R = L / tan(delta); it reaches
    # 90 deg when R = w/2, i.e. tan(delta) = 2 L / w. L = 1.0, w = 1.6: delta = atan(1.25).
    limit = math.atan(2 * 1.0 / 1.6)
    base = {"vehicle.wheelbase": 1.0, "vehicle.cg_to_rear_axle": 0.5,
            "vehicle.wheel_radius": 0.2, "vehicle.track_width": 1.6}
    assert validate({**base, "vehicle.max_road_wheel_angle": limit - 1e-6})
    with pytest.raises(ParamError, match="vehicle.max_road_wheel_angle"):
        validate({**base, "vehicle.max_road_wheel_angle": limit + 1e-6})


def test_ros_reserved_parameters_pass_through() -> None:
    cfg = validate(_with(use_sim_time=True, **{"qos_overrides__/x__depth": 5}))
    assert cfg.ros["use_sim_time"] is True
    assert "use_sim_time" not in cfg.values
    with pytest.raises(ParamError, match="use_sim_time"):
        validate(_with(use_sim_time="yes"))


def test_config_is_immutable_and_comparable() -> None:
    a, b = validate(GEOMETRY), validate(dict(GEOMETRY))
    assert a == b and hash(a) == hash(b)
    with pytest.raises(TypeError):
        a.values["vehicle.wheelbase"] = 3.0  # type: ignore[index]
    assert validate(a) == a
    assert validate(_with(checks__min_speed=2.0)) != a


def test_not_a_mapping_refused() -> None:
    with pytest.raises(ParamError):
        validate([("vehicle.wheelbase", 2.7)])  # type: ignore[arg-type]


def test_vehicle_params_from_model() -> None:
    model = pytest.importorskip("kinematic_monitor.core.model")
    vp = validate(_with(vehicle__steering_offset=0.01)).vehicle
    assert isinstance(vp, model.VehicleParams)
    assert (vp.wheelbase, vp.cg_to_rear_axle, vp.steering_offset) == (2.7, 1.35, 0.01)


_finite = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=150, deadline=None)
@given(wheelbase=_finite, lr=_finite, radius=_finite, track=_finite, offset=_finite,
       scale=_finite, max_angle=_finite)
def test_what_validate_accepts_the_model_accepts(wheelbase: float, lr: float, radius: float,
                                                 track: float, offset: float, scale: float,
                                                 max_angle: float) -> None:
    # the schema's ranges and cross-field rules are at least as strict as VehicleParams' own
    model = pytest.importorskip("kinematic_monitor.core.model")
    values = {"vehicle.wheelbase": wheelbase, "vehicle.cg_to_rear_axle": lr,
              "vehicle.wheel_radius": radius, "vehicle.track_width": track,
              "vehicle.steering_offset": offset, "vehicle.wheel_speed_scale": scale,
              "vehicle.max_road_wheel_angle": max_angle}
    try:
        cfg = validate(values)
    except ParamError:
        return
    assert isinstance(cfg.vehicle, model.VehicleParams)


_hostile = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=20),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=5), inner,
                                                                max_size=3),
    max_leaves=8,
)


@settings(max_examples=200, deadline=None)
@given(name=st.sampled_from([s.name for s in SPECS]), value=_hostile)
def test_hostile_values_give_param_error_only(name: str, value: Any) -> None:
    try:
        validate({**GEOMETRY, name: value})
    except ParamError as err:
        assert err.name == name or err.name.startswith(("vehicle.", "checks.", "inputs."))


# --- file form -------------------------------------------------------------------------------
GEOM_YAML = "vehicle: {wheelbase: 2.7, cg_to_rear_axle: 1.3, wheel_radius: 0.3, track_width: 1.5}"


@pytest.mark.parametrize("key", ["kinematic_monitor", "/kinematic_monitor", "/**",
                                 "/ns/kinematic_monitor", "/ns/*"])
def test_node_key_forms(tmp_path: Path, key: str) -> None:
    path = _write(tmp_path, f"{key}:\n  ros__parameters:\n    {GEOM_YAML}\n")
    assert load_params_file(path)["vehicle.wheelbase"] == 2.7


def test_nested_namespace_and_other_nodes(tmp_path: Path) -> None:
    path = _write(tmp_path, f"""\
        other_node:
          ros__parameters:
            unrelated: 1
        ns:
          kinematic_monitor:
            ros__parameters:
              {GEOM_YAML}
        """)
    assert load_params_file(path)["vehicle.track_width"] == 1.5


def test_wildcard_then_specific_section_overrides(tmp_path: Path) -> None:
    path = _write(tmp_path, f"""\
        /**:
          ros__parameters:
            checks: {{min_speed: 3.0}}
            use_sim_time: true
        kinematic_monitor:
          ros__parameters:
            {GEOM_YAML}
            checks.min_speed: 2.0
        """)
    values = load_params_file(path)
    assert values["checks.min_speed"] == 2.0 and values["use_sim_time"] is True


def test_no_section_for_our_node(tmp_path: Path) -> None:
    path = _write(tmp_path, "other_node:\n  ros__parameters:\n    a: 1\n")
    with pytest.raises(ParamError, match="kinematic_monitor"):
        load_params_file(path)


def test_duplicate_name_nested_and_dotted_refused(tmp_path: Path) -> None:
    path = _write(tmp_path, f"""\
        kinematic_monitor:
          ros__parameters:
            {GEOM_YAML}
            vehicle.wheelbase: 3.0
        """)
    with pytest.raises(ParamError, match="vehicle.wheelbase"):
        load_params_file(path)


@pytest.mark.parametrize("text", [
    "",
    "- a\n- b\n",
    "just a string\n",
    "42\n",
    "kinematic_monitor: [1, 2\n",
    "kinematic_monitor:\n  ros__parameters: [1, 2]\n",
    "kinematic_monitor:\n  ros__parameters:\n    1: 2\n",
    "kinematic_monitor:\n  ros__parameters:\n    vehicle: &a [*a]\n",
    "[" * 5000 + "]" * 5000,
    "a: &a [" + ", ".join(["*a"] * 10) + "]\n",
    ("kinematic_monitor:\n  ros__parameters:\n    " + "x:\n      " * 30 + "y: 1\n"),
    "kinematic_monitor:\n  ros__parameters:\n    vehicle: {wheelbase: &a [*a]}\n",
    "kinematic_monitor:\n  ros__parameters:\n    vehicle: &a {x: *a}\n",
    # a billion-entry alias expansion must stop early, not run out of memory
    "kinematic_monitor:\n  ros__parameters:\n    l0: &l0 {" + ", ".join(
        f"k{i}: 1" for i in range(10)) + "}\n" + "".join(
        f"    l{n}: &l{n} {{" + ", ".join(f"k{i}: *l{n - 1}" for i in range(10)) + "}\n"
        for n in range(1, 9)),
])
def test_hostile_files_give_param_error(tmp_path: Path, text: str) -> None:
    path = tmp_path / "p.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ParamError):
        validate(load_params_file(path))


def test_unreadable_and_oversized_files(tmp_path: Path) -> None:
    with pytest.raises(ParamError, match="missing.yaml"):
        load_params_file(tmp_path / "missing.yaml")
    big = tmp_path / "big.yaml"
    big.write_text("#" * (schema.MAX_FILE_BYTES + 1))
    with pytest.raises(ParamError, match="big.yaml"):
        load_params_file(big)
    binary = tmp_path / "bin.yaml"
    binary.write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(ParamError, match="bin.yaml"):
        load_params_file(binary)
    with pytest.raises(ParamError):
        load_params_file(tmp_path)  # a directory


def test_exponent_without_point_is_a_double(tmp_path: Path) -> None:
    # the ROS 2 YAML parser (rcl_yaml_param_parser) reads 1e-3 with strtod as a double;
    # plain YAML 1.1 would read a string (checked against rclpy below)
    path = _write(tmp_path, f"""\
        kinematic_monitor:
          ros__parameters:
            {GEOM_YAML}
            noise: {{steering_angle_std: 2e-3}}
        """)
    assert validate(load_params_file(path)).noise.steering_angle_std == 0.002


# --- writing ---------------------------------------------------------------------------------
def test_round_trip_config(tmp_path: Path) -> None:
    cfg = validate(_with(vehicle__steering_offset=-0.0125, checks__nis_window=7,
                         noise__steering_angle_std=1.5e-5, inputs__imu__topic="",
                         inputs__joint_states__steering_joints=["l \"quoted\"", "r: x"],
                         use_sim_time=True))
    path = tmp_path / "out.yaml"
    dump_params_yaml(cfg, path, comments={"vehicle": "fitted on the skid pad",
                                          "vehicle.steering_offset": "+- 0.002 rad # 1 sigma"})
    loaded = load_params_file(path)
    assert validate(loaded) == cfg
    assert loaded["use_sim_time"] is True
    assert loaded["vehicle.steering_offset"] == -0.0125
    text = path.read_text()
    assert "# fitted on the skid pad" in text and "+- 0.002 rad # 1 sigma" in text


def test_round_trip_partial_mapping() -> None:
    values = {"vehicle.wheelbase": 3, "vehicle.steering_offset": 0.001}
    text = dumps_params_yaml(values)
    assert "wheelbase: 3.0" in text  # doubles always carry a point, so ROS reads a double
    assert parse_params_text(text) == {"vehicle.wheelbase": 3.0, "vehicle.steering_offset": 0.001}


def test_dump_refuses_bad_input() -> None:
    with pytest.raises(ParamError, match="vehicle.wheel_base"):
        dumps_params_yaml({"vehicle.wheel_base": 3.0})
    with pytest.raises(ParamError, match="vehicle.wheelbase"):
        dumps_params_yaml({"vehicle.wheelbase": math.nan})
    with pytest.raises(ParamError, match="checks"):
        dumps_params_yaml({"vehicle.wheelbase": 3.0}, comments={"checks": "x"})


def test_dump_to_stream_is_plain_yaml() -> None:
    buf = io.StringIO()
    dump_params_yaml(validate(GEOMETRY), buf)
    doc = yaml.safe_load(buf.getvalue())
    assert doc["kinematic_monitor"]["ros__parameters"]["vehicle"]["wheelbase"] == 2.7


# --- agreement with the ROS 2 parser ---------------------------------------------------------
_RCLPY_DUMP = textwrap.dedent("""\
    import json, sys
    import rclpy
    from rclpy.node import Node
    rclpy.init(args=["--ros-args", "--params-file", sys.argv[1]])
    node = Node("kinematic_monitor", automatically_declare_parameters_from_overrides=True)
    out = {}
    for name, p in node._parameters.items():
        v = p.value
        out[name] = list(v) if not isinstance(v, (str, bytes, int, float, bool)) else v
    print(json.dumps(out))
    node.destroy_node()
    rclpy.shutdown()
""")


def _rclpy_parameters(path: Path) -> dict[str, Any]:
    pytest.importorskip("rclpy")
    env = dict(os.environ)
    env["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
    env.setdefault("ROS_DOMAIN_ID", str(1 + os.getpid() % 101))
    out = subprocess.run([sys.executable, "-c", _RCLPY_DUMP, str(path)], capture_output=True,
                         text=True, timeout=60, env=env)
    assert out.returncode == 0, out.stderr
    result: dict[str, Any] = json.loads(out.stdout.strip().splitlines()[-1])
    return result


@pytest.mark.dds
def test_rclpy_reads_the_same_parameters(tmp_path: Path) -> None:
    # reference: rcl_yaml_param_parser, used by rclpy for --params-file
    tricky = _write(tmp_path, f"""\
        /**:
          ros__parameters:
            checks: {{min_speed: 3.0}}
        kinematic_monitor:
          ros__parameters:
            {GEOM_YAML}
            checks.min_speed: 2.0
            checks: {{nis_window: 20}}
            noise: {{steering_angle_std: 2e-3}}
            inputs:
              imu: {{topic: ""}}
              qos: reliable
        """)
    later_wildcard = _write(tmp_path, f"""\
        kinematic_monitor:
          ros__parameters:
            {GEOM_YAML}
            checks: {{min_speed: 2.0}}
        /**:
          ros__parameters:
            checks.min_speed: 3.0
        """, "later.yaml")
    dumped = tmp_path / "dumped.yaml"
    dump_params_yaml(validate(_with(vehicle__steering_offset=-1.5e-5)), dumped)
    for path in [*CONFIG_FILES[:1], tricky, later_wildcard, dumped]:
        ours = load_params_file(path)
        theirs = _rclpy_parameters(path)
        for reserved in ("use_sim_time", "start_type_description_service"):
            theirs.pop(reserved, None)
        assert theirs == ours, path.name
        for name, value in ours.items():  # same types too (2.0 vs 2 matters to ROS)
            assert type(theirs[name]) is type(value), name


@pytest.mark.dds
def test_rclpy_reads_namespaced_example(tmp_path: Path) -> None:
    # the example file's key is /shuttle/kinematic_monitor: rclpy applies it to a node in /shuttle
    pytest.importorskip("rclpy")
    text = CONFIG_FILES[1].read_text().replace("/shuttle/kinematic_monitor:", "kinematic_monitor:")
    path = _write(tmp_path, text)
    theirs = _rclpy_parameters(path)
    theirs.pop("use_sim_time", None)
    theirs.pop("start_type_description_service", None)
    assert theirs == load_params_file(CONFIG_FILES[1])


def test_monitor_config_exported() -> None:
    assert isinstance(validate(GEOMETRY), MonitorConfig)
