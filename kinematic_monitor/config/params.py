"""The parameter schema: one source of truth for the node, the command line and the docs.

Parameters use the ROS 2 parameter-file form (``<node>: ros__parameters: ...``); nested
maps flatten to dotted names (``vehicle.wheelbase``). Every parameter has a default except
the vehicle geometry, which must be given. Units are SI and angles radians (REP 103).

Pure Python: no ROS import. The rclpy node builds its ParameterDescriptors from ``SPECS``.
Adding a parameter is one line in ``SPECS``; a typed attribute in the group dataclasses
below is optional (every parameter is reachable with ``MonitorConfig.get(name)``).
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any, Literal, TypeVar, get_type_hints

import yaml

ParamType = Literal["double", "integer", "bool", "string", "string_array", "double_array"]
StringKind = Literal["text", "topic", "optional_topic", "frame", "path", "joint",
                     "msg_type", "field_path"]

NODE_NAME = "kinematic_monitor"
ROS_PARAMETERS_KEY = "ros__parameters"
# Parameters every rclpy node has; accepted in files and passed through, not part of our schema.
ROS_RESERVED_NAMES = frozenset({"use_sim_time", "start_type_description_service"})
ROS_RESERVED_PREFIXES = ("qos_overrides.",)

MAX_FILE_BYTES = 1 << 20  # a parameter file larger than 1 MiB is refused
MAX_ARRAY_LENGTH = 64  # longest list any parameter accepts
MAX_STRING_LENGTH = 4096
MAX_NESTING = 16
MAX_ENTRIES = 10_000


class ParamError(ValueError):
    """A bad parameter: names the parameter, the offending value and what is allowed."""

    def __init__(self, name: str, value: Any, allowed: str) -> None:
        self.name = name
        self.value = value
        self.allowed = allowed
        super().__init__(str(self))

    def __str__(self) -> str:
        return (f"parameter '{self.name}': bad value {_short_repr(self.value)}; "
                f"allowed: {self.allowed}")


def _short_repr(value: Any, limit: int = 80) -> str:
    try:
        text = repr(value)
    except Exception:  # noqa: BLE001 - a hostile __repr__ must not hide the real error
        text = f"<{type(value).__name__}>"
    return text if len(text) <= limit else text[: limit - 3] + "..."


class _Missing:
    def __repr__(self) -> str:
        return "<missing>"


MISSING: Any = _Missing()


@dataclass(frozen=True)
class ParamSpec:
    """One parameter: dotted name, type, default, unit, range/choices and documentation.

    ``min_value``/``max_value`` bound numbers (and every element of a double array);
    ``length`` is the exact list length for arrays; ``kind`` adds a syntax check for strings.
    """

    name: str
    type: ParamType
    default: Any
    description: str
    unit: str = "-"
    min_value: float | None = None
    max_value: float | None = None
    min_inclusive: bool = True
    max_inclusive: bool = True
    choices: tuple[str, ...] = ()
    required: bool = False
    runtime_changeable: bool = False
    length: int | None = None
    kind: StringKind = "text"

    @property
    def group(self) -> str:
        """The dotted prefix, e.g. ``inputs.joint_states`` for ``inputs.joint_states.topic``."""
        return self.name.rpartition(".")[0]

    def range_text(self) -> str:
        """The numeric range in interval notation, e.g. ``(0, 20]``; '' if unbounded."""
        if self.min_value is None and self.max_value is None:
            return ""
        lo = "-inf" if self.min_value is None else _num(self.min_value)
        hi = "inf" if self.max_value is None else _num(self.max_value)
        left = "[" if self.min_value is not None and self.min_inclusive else "("
        right = "]" if self.max_value is not None and self.max_inclusive else ")"
        return f"{left}{lo}, {hi}{right}"

    def allowed_text(self) -> str:
        """Human-readable statement of what the parameter accepts (used in errors and docs)."""
        parts = [_TYPE_TEXT[self.type]]
        if self.length is not None:
            parts.append(f"exactly {self.length} entries")
        if self.range_text():
            parts.append(f"in {self.range_text()}" + ("" if self.unit == "-" else f" {self.unit}"))
        if self.choices:
            parts.append("one of " + ", ".join(repr(c) for c in self.choices))
        if self.kind != "text":
            parts.append(_KIND_TEXT[self.kind])
        return ", ".join(parts)


_TYPE_TEXT: dict[str, str] = {
    "double": "a finite number",
    "integer": "an integer",
    "bool": "true or false",
    "string": "a string",
    "string_array": "a list of strings",
    "double_array": "a list of finite numbers",
}
_KIND_TEXT: dict[str, str] = {
    "topic": "a ROS topic name such as /a/b",
    "optional_topic": "a ROS topic name such as /a/b, or '' to disable",
    "frame": "a frame id without leading '/' or spaces",
    "path": "a file path without '..' components",
    "joint": "non-empty, distinct joint names",
    "msg_type": "a message type package/msg/Name, or ''",
    "field_path": "a field path such as a.b[2].c, or ''",
}


def _num(x: float) -> str:
    return f"{x:g}"


# ---------------------------------------------------------------------------------------------
# The schema. Defaults are our own choices (common practice, no source) unless a comment says.
# ---------------------------------------------------------------------------------------------
def _double(name: str, default: float | None, unit: str, description: str,
            lo: float | None = None, hi: float | None = None, lo_inc: bool = True,
            hi_inc: bool = True, required: bool = False, runtime: bool = False) -> ParamSpec:
    return ParamSpec(name, "double", default, description, unit, lo, hi, lo_inc, hi_inc,
                     required=required, runtime_changeable=runtime)


def _string(name: str, default: str, description: str, kind: StringKind = "text",
            choices: tuple[str, ...] = ()) -> ParamSpec:
    return ParamSpec(name, "string", default, description, choices=choices, kind=kind)


def _joints(name: str, default: list[str], description: str) -> ParamSpec:
    return ParamSpec(name, "string_array", default, description, length=2, kind="joint")


SPECS: tuple[ParamSpec, ...] = (
    # vehicle: geometry (required) and calibration
    _double("vehicle.wheelbase", None, "m", "Distance front to rear axle (L).",
            0.0, 20.0, lo_inc=False, required=True),
    _double("vehicle.cg_to_rear_axle", None, "m",
            "Distance from the centre of gravity back to the rear axle (l_r); "
            "must be less than vehicle.wheelbase.", 0.0, 20.0, lo_inc=False, required=True),
    _double("vehicle.wheel_radius", None, "m", "Effective rolling radius of the wheels.",
            0.0, 3.0, lo_inc=False, required=True),
    _double("vehicle.track_width", None, "m", "Lateral distance between left and right wheels.",
            0.0, 5.0, lo_inc=False, required=True),
    _double("vehicle.steering_offset", 0.0, "rad",
            "Added to the measured road-wheel angle (steering zero calibration).", -0.2, 0.2),
    _double("vehicle.wheel_speed_scale", 1.0, "-",
            "Rolling-radius calibration: effective radius = wheel_radius * scale.", 0.5, 1.5),
    _double("vehicle.max_road_wheel_angle", 0.7, "rad",
            "Largest plausible road-wheel angle; larger measurements are rejected.",
            0.0, 1.5, lo_inc=False, hi_inc=False),
    _double("vehicle.understeer_gradient", 0.0, "rad/(m/s^2)",
            "Steady-state understeer gradient K (SAE J670 / ISO 8855 sign: positive for "
            "understeer); the kinematic prediction uses delta - K * a_y. 0 = pure kinematic. "
            "Estimate it with `kinematic-monitor calibrate`.",
            -0.05, 0.05),
    _double("vehicle.steering_ratio", 1.0, "-",
            "Steering-wheel angle per road-wheel angle. 1.0: the steer joints report "
            "road-wheel angles. Otherwise the JointState steer joints report steering-wheel "
            "angles, and so does a single-value steering input of kind 'steering_wheel'; the "
            "converters divide them by this ratio, so the monitor and calibrate only ever "
            "see road-wheel angles and never divide again. calibrate reports a correction "
            "as new ratio = this ratio x the fitted factor.",
            0.0, 50.0, lo_inc=False),
    # inputs
    _string("inputs.joint_states.topic", "/joint_states",
            "sensor_msgs/JointState topic with steering angles and wheel speeds.", "topic"),
    _joints("inputs.joint_states.steering_joints",
            ["front_left_steer_joint", "front_right_steer_joint"],
            "Left and right steer joints; position = road-wheel angle [rad] (steering-wheel "
            "angle when vehicle.steering_ratio != 1)."),
    _joints("inputs.joint_states.front_wheel_joints",
            ["front_left_wheel_joint", "front_right_wheel_joint"],
            "Left and right front wheel joints; velocity = wheel angular speed [rad/s]."),
    _joints("inputs.joint_states.rear_wheel_joints",
            ["rear_left_wheel_joint", "rear_right_wheel_joint"],
            "Left and right rear wheel joints; velocity = wheel angular speed [rad/s]."),
    _string("inputs.localization.topic", "/localization/odom",
            "Localisation topic (pose in map or odom frame).", "topic"),
    _string("inputs.localization.type", "odometry",
            "Message type on inputs.localization.topic.",
            choices=("odometry", "pose_with_covariance")),
    _string("inputs.localization.reset_topic", "",
            "Topic on which the localisation declares relocalisations "
            "(any message = a deliberate jump); '' = none.", "optional_topic"),
    _string("inputs.imu.topic", "/imu/data", "sensor_msgs/Imu topic; '' disables the IMU.",
            "optional_topic"),
    _string("inputs.gnss.topic", "/gnss/fix",
            "sensor_msgs/NavSatFix topic (for maps); '' disables it.", "optional_topic"),
    _string("inputs.qos", "sensor_data", "QoS profile of all subscriptions.",
            choices=("sensor_data", "reliable")),
    _double("inputs.reorder_window", 0.05, "s",
            "How long samples wait so that late messages can be put in stamp order.", 0.0, 1.0),
    ParamSpec("inputs.batch_size", "integer", 4,
              "Node only: samples in stamp order are processed together once this many wait "
              "(or inputs.batch_delay has passed); 1 = each at once.", "samples", 1, 1000),
    _double("inputs.batch_delay", 0.005, "s",
            "Node only: longest time a sample in stamp order waits for its batch.", 0.0, 0.5),
    # steering and speed from other message types (replace the JointState joints)
    _string("inputs.steering.topic", "",
            "Steering-angle topic replacing the JointState steer joints; '' = off.",
            "optional_topic"),
    _string("inputs.steering.type", "float64",
            "Message on inputs.steering.topic: std_msgs Float64/Float32 'data', or 'field' "
            "(inputs.steering.type_name + field).", choices=("float64", "float32", "field")),
    _string("inputs.steering.type_name", "",
            "Message type for type 'field', as package/msg/Name.", "msg_type"),
    _string("inputs.steering.field", "",
            "Field path to the angle for type 'field', e.g. report.road_wheel_angle or "
            "wheels[0].angle.", "field_path"),
    _double("inputs.steering.scale", 1.0, "-",
            "Raw value times scale plus offset gives the angle in rad (pi/180 for degrees); "
            "non-zero.", -1e6, 1e6),
    _double("inputs.steering.offset", 0.0, "rad",
            "Added to the scaled value (before dividing by vehicle.steering_ratio).",
            -10.0, 10.0),
    _string("inputs.steering.kind", "road_wheel",
            "Angle measured: 'road_wheel' (bicycle-equivalent road-wheel angle) or "
            "'steering_wheel' (divided by vehicle.steering_ratio).",
            choices=("road_wheel", "steering_wheel")),
    _string("inputs.speed.topic", "",
            "Vehicle speed topic replacing the JointState wheel joints; '' = off.",
            "optional_topic"),
    _string("inputs.speed.type", "twist_stamped",
            "Message on inputs.speed.topic: geometry_msgs TwistStamped twist.linear.x, or "
            "'field' (inputs.speed.type_name + field).", choices=("twist_stamped", "field")),
    _string("inputs.speed.type_name", "",
            "Message type for type 'field', as package/msg/Name.", "msg_type"),
    _string("inputs.speed.field", "",
            "Field path to the speed for type 'field', e.g. report.speed.", "field_path"),
    _double("inputs.speed.scale", 1.0, "-",
            "Raw value times scale plus offset gives the speed in m/s (1/3.6 for km/h); "
            "non-zero.", -1e6, 1e6),
    _double("inputs.speed.offset", 0.0, "m/s", "Added to the scaled speed.", -10.0, 10.0),
    # noise: sensor noise the statistical thresholds come from
    _double("noise.steering_angle_std", 0.002, "rad", "Std. dev. of the road-wheel angle.",
            0.0, 0.5, lo_inc=False, runtime=True),
    _double("noise.wheel_speed_std", 0.1, "rad/s", "Std. dev. of a wheel angular speed.",
            0.0, 10.0, lo_inc=False, runtime=True),
    _double("noise.imu_yaw_rate_std", 0.005, "rad/s", "Std. dev. of the IMU yaw rate.",
            0.0, 1.0, lo_inc=False, runtime=True),
    _double("noise.imu_accel_std", 0.1, "m/s^2",
            "Std. dev. of the IMU longitudinal/lateral acceleration.",
            0.0, 10.0, lo_inc=False, runtime=True),
    _double("noise.localization_position_std", 0.05, "m",
            "Position std. dev. used when the message covariance is zero or missing.",
            0.0, 100.0, lo_inc=False, runtime=True),
    _double("noise.localization_yaw_std", 0.01, "rad",
            "Yaw std. dev. used when the message covariance is zero or missing.",
            0.0, math.pi, lo_inc=False, runtime=True),
    _double("noise.localization_velocity_std", 0.05, "m/s",
            "Velocity std. dev. used when the message covariance is zero or missing.",
            0.0, 10.0, lo_inc=False, runtime=True),
    # checks: thresholds and timing of the detectors
    _double("checks.false_alarm_rate", 1.0, "1/h",
            "Target rate of false WARN alarms per hour of driving.",
            0.0, 3600.0, lo_inc=False, runtime=True),
    _double("checks.error_confidence", 0.999, "-",
            "Confidence that a deviation is real before it is raised to ERROR.",
            0.5, 1.0, lo_inc=False, hi_inc=False, runtime=True),
    _double("checks.min_speed", 1.0, "m/s",
            "Below this speed the checks report that they are not meaningful.",
            0.0, 30.0, runtime=True),
    _double("checks.min_duration", 0.2, "s",
            "A deviation must last this long before it is reported.", 0.0, 10.0, runtime=True),
    _double("checks.clear_duration", 1.0, "s",
            "A reported deviation must be gone this long before it clears (hysteresis).",
            0.0, 60.0, runtime=True),
    _double("checks.drift_horizon", 1.0, "s",
            "Horizon over which predicted and localised motion are compared.",
            0.0, 60.0, lo_inc=False, runtime=True),
    ParamSpec("checks.nis_window", "integer", 50,
              "Number of filter updates averaged for the NIS consistency test.", "updates",
              1, 10_000, runtime_changeable=True),
    _double("checks.friction_assumed", 1.0, "-",
            "Friction coefficient mu for the kinematic-validity envelope |a_y| <= 0.5*mu*g.",
            0.0, 2.0, lo_inc=False, runtime=True),
    _double("checks.slip_ratio_warn", 0.1, "-",
            "Wheel slip ratio that raises WARN; must be below checks.slip_ratio_error.",
            0.0, 1.0, lo_inc=False, runtime=True),
    _double("checks.slip_ratio_error", 0.2, "-", "Wheel slip ratio that raises ERROR.",
            0.0, 1.0, lo_inc=False, runtime=True),
    _double("checks.yaw_lag", 0.2, "s", "Yaw-response lag tolerated.", 0.0, 2.0, runtime=True),
    _double("checks.heading_time_constant", 5.0, "s", "Heading offset τ.", 0.1, 600, runtime=True),
    _double("checks.heading_tolerance", 0.005, "rad", "Heading error ok.", 0.0, 1.0, runtime=True),
    # timeouts: an input older than this is reported stale
    _double("timeouts.joint_states", 0.5, "s", "Joint states older than this are stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    _double("timeouts.localization", 0.5, "s", "Localisation older than this is stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    _double("timeouts.imu", 0.5, "s", "IMU data older than this is stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    # output
    _string("output.events_log", "kinematic_monitor_events.jsonl",
            "JSON-lines event log, flushed at each event start and end.", "path"),
    _double("output.diagnostics_period", 1.0, "s", "Period of /diagnostics publication.",
            0.0, 1.0, lo_inc=False),
    _string("output.prediction_frame", "map", "Frame id of the ~/prediction odometry.", "frame"),
    _double("output.prediction_rate", 20.0, "Hz",
            "Rate of ~/prediction messages (header-stamp time); at most one per processed "
            "sample.", 0.0, 1000.0, lo_inc=False),
)

SPEC_BY_NAME: dict[str, ParamSpec] = {s.name: s for s in SPECS}
REQUIRED_NAMES: tuple[str, ...] = tuple(s.name for s in SPECS if s.required)


def _check_schema() -> None:
    """Fail at import if the schema contradicts itself (duplicate names, bad defaults)."""
    if len(SPEC_BY_NAME) != len(SPECS):
        raise RuntimeError("duplicate parameter names in SPECS")
    for spec in SPECS:
        if spec.required:
            if spec.default is not None:
                raise RuntimeError(f"{spec.name}: a required parameter has no default")
        else:
            check_value(spec, spec.default)


# ---------------------------------------------------------------------------------------------
# Single-value checks
# ---------------------------------------------------------------------------------------------
_TOPIC_TOKEN = r"[A-Za-z_][A-Za-z0-9_]*"
_TOPIC_RE = re.compile(rf"^(~/|/)?{_TOPIC_TOKEN}(/{_TOPIC_TOKEN})*$")
_FRAME_RE = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_./-]*$")
_MSG_TYPE_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*/msg/[A-Za-z][A-Za-z0-9_]*$")
_FIELD_SEGMENT = r"[A-Za-z][A-Za-z0-9_]*(\[\d{1,6}\])*"
_FIELD_PATH_RE = re.compile(rf"^{_FIELD_SEGMENT}(\.{_FIELD_SEGMENT})*$")


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def check_value(spec: ParamSpec, value: Any) -> Any:
    """Return ``value`` converted to the parameter's Python type, or raise ParamError.

    Doubles come back as float (an int is accepted), arrays as tuples.
    """

    def bad() -> ParamError:
        return ParamError(spec.name, value, spec.allowed_text())

    if value is None or value is MISSING:
        raise bad()
    if spec.type == "double":
        if not _is_number(value):
            raise bad()
        number = float(value)
        if not math.isfinite(number) or not _in_range(spec, number):
            raise bad()
        return number
    if spec.type == "integer":
        if not isinstance(value, int) or isinstance(value, bool) or not _in_range(spec, value):
            raise bad()
        return int(value)
    if spec.type == "bool":
        if not isinstance(value, bool):
            raise bad()
        return value
    if spec.type == "string":
        if not isinstance(value, str) or not _string_ok(spec, value):
            raise bad()
        return value
    # arrays
    if not isinstance(value, list | tuple) or len(value) > MAX_ARRAY_LENGTH:
        raise bad()
    if spec.length is not None and len(value) != spec.length:
        raise bad()
    if spec.type == "double_array":
        if not all(_is_number(v) and math.isfinite(v) and _in_range(spec, v) for v in value):
            raise bad()
        return tuple(float(v) for v in value)
    if not all(isinstance(v, str) and _string_ok(spec, v) for v in value):
        raise bad()
    if spec.kind == "joint" and len(set(value)) != len(value):
        raise bad()
    return tuple(value)


def _in_range(spec: ParamSpec, x: float) -> bool:
    lo, hi = spec.min_value, spec.max_value
    if lo is not None and (x < lo or (x == lo and not spec.min_inclusive)):
        return False
    return not (hi is not None and (x > hi or (x == hi and not spec.max_inclusive)))


def _string_ok(spec: ParamSpec, text: str) -> bool:
    if len(text) > MAX_STRING_LENGTH or "\x00" in text:
        return False
    if spec.choices and text not in spec.choices:
        return False
    kind = spec.kind
    if kind == "topic":
        return bool(_TOPIC_RE.match(text))
    if kind == "optional_topic":
        return text == "" or bool(_TOPIC_RE.match(text))
    if kind == "frame":
        return bool(_FRAME_RE.match(text))
    if kind == "path":
        return text.strip() != "" and ".." not in re.split(r"[/\\]", text)
    if kind == "joint":
        return text.strip() != "" and text.isprintable()
    if kind == "msg_type":
        return text == "" or bool(_MSG_TYPE_RE.match(text))
    if kind == "field_path":
        return text == "" or bool(_FIELD_PATH_RE.match(text))
    return True


def is_ros_reserved(name: str) -> bool:
    """True for parameters every rclpy node has (``use_sim_time``, ``qos_overrides.*``)."""
    return name in ROS_RESERVED_NAMES or name.startswith(ROS_RESERVED_PREFIXES)


# ---------------------------------------------------------------------------------------------
# The typed configuration
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class VehicleConfig:
    """Vehicle geometry [m] and calibration (``vehicle.*``)."""

    wheelbase: float
    cg_to_rear_axle: float
    wheel_radius: float
    track_width: float
    steering_offset: float
    wheel_speed_scale: float
    max_road_wheel_angle: float
    steering_ratio: float


@dataclass(frozen=True)
class JointStatesInput:
    """``inputs.joint_states.*``: topic and (left, right) joint names."""

    topic: str
    steering_joints: tuple[str, ...]
    front_wheel_joints: tuple[str, ...]
    rear_wheel_joints: tuple[str, ...]


@dataclass(frozen=True)
class LocalizationInput:
    """``inputs.localization.*``."""

    topic: str
    type: str
    reset_topic: str


@dataclass(frozen=True)
class TopicInput:
    """An optional input given by its topic ('' = disabled)."""

    topic: str

    @property
    def enabled(self) -> bool:
        """False when the topic is ''."""
        return self.topic != ""


@dataclass(frozen=True)
class InputsConfig:
    """``inputs.*``."""

    joint_states: JointStatesInput
    localization: LocalizationInput
    imu: TopicInput
    gnss: TopicInput
    qos: str
    reorder_window: float
    batch_size: int
    batch_delay: float


@dataclass(frozen=True)
class NoiseConfig:
    """``noise.*``: sensor noise standard deviations (SI units, rad)."""

    steering_angle_std: float
    wheel_speed_std: float
    imu_yaw_rate_std: float
    imu_accel_std: float
    localization_position_std: float
    localization_yaw_std: float
    localization_velocity_std: float


@dataclass(frozen=True)
class ChecksConfig:
    """``checks.*``: detector thresholds and timing."""

    false_alarm_rate: float
    error_confidence: float
    min_speed: float
    min_duration: float
    clear_duration: float
    drift_horizon: float
    nis_window: int
    friction_assumed: float
    slip_ratio_warn: float
    slip_ratio_error: float


@dataclass(frozen=True)
class TimeoutsConfig:
    """``timeouts.*`` [s]."""

    joint_states: float
    localization: float
    imu: float


@dataclass(frozen=True)
class OutputConfig:
    """``output.*``."""

    events_log: str
    diagnostics_period: float
    prediction_frame: str
    prediction_rate: float


@dataclass(frozen=True)
class MonitorConfig:
    """Validated parameters: typed groups (``cfg.vehicle.wheelbase``) and ``get(name)``.

    ``values`` holds every schema parameter by dotted name (arrays as tuples); ``ros``
    holds ROS-reserved parameters that were given (e.g. ``use_sim_time``).
    """

    vehicle: VehicleConfig
    inputs: InputsConfig
    noise: NoiseConfig
    checks: ChecksConfig
    timeouts: TimeoutsConfig
    output: OutputConfig
    values: Mapping[str, Any] = field(repr=False, compare=True)
    ros: Mapping[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def get(self, name: str) -> Any:
        """The value of the parameter with dotted ``name``; KeyError naming it if unknown."""
        try:
            return self.values[name]
        except KeyError:
            raise KeyError(f"unknown parameter '{name}'") from None

    def as_dict(self) -> dict[str, Any]:
        """All schema parameters by dotted name, arrays as lists (ready for YAML/JSON)."""
        return {k: list(v) if isinstance(v, tuple) else v for k, v in self.values.items()}

    def vehicle_params(self) -> Any:
        """The vehicle as ``kinematic_monitor.core.model.VehicleParams``."""
        from kinematic_monitor.core.model import VehicleParams  # imported late: optional module

        v = self.vehicle
        return VehicleParams(
            wheelbase=v.wheelbase,
            cg_to_rear_axle=v.cg_to_rear_axle,
            wheel_radius=v.wheel_radius,
            track_width=v.track_width,
            steering_offset=v.steering_offset,
            wheel_speed_scale=v.wheel_speed_scale,
            max_road_wheel_angle=v.max_road_wheel_angle,
        )


_T = TypeVar("_T")


def _build_group(cls: type[_T], prefix: str, values: Mapping[str, Any]) -> _T:
    hints = get_type_hints(cls)
    kwargs: dict[str, Any] = {}
    for f in dataclasses.fields(cls):  # type: ignore[arg-type]
        hint = hints[f.name]
        if dataclasses.is_dataclass(hint):
            kwargs[f.name] = _build_group(hint, f"{prefix}{f.name}.", values)  # type: ignore[arg-type]
        else:
            kwargs[f.name] = values[prefix + f.name]
    return cls(**kwargs)


def group_field_names() -> list[str]:
    """Dotted names of every typed attribute of MonitorConfig (each must be in SPECS)."""
    names: list[str] = []

    def walk(cls: type, prefix: str) -> None:
        hints = get_type_hints(cls)
        for f in dataclasses.fields(cls):
            hint = hints[f.name]
            if dataclasses.is_dataclass(hint):
                walk(hint, f"{prefix}{f.name}.")  # type: ignore[arg-type]
            else:
                names.append(prefix + f.name)

    for group in ("vehicle", "inputs", "noise", "checks", "timeouts", "output"):
        walk(get_type_hints(MonitorConfig)[group], group + ".")
    return names


# ---------------------------------------------------------------------------------------------
# Validation
# ---------------------------------------------------------------------------------------------
def validate(values: Mapping[str, Any] | MonitorConfig) -> MonitorConfig:
    """Fill defaults, check every value and the cross-field rules; raise ParamError if bad.

    ``values`` maps dotted names to values (e.g. from ``load_params_file`` or an rclpy node).
    ROS-reserved names (``use_sim_time``...) are accepted and kept in ``MonitorConfig.ros``.
    """
    if isinstance(values, MonitorConfig):
        values = {**values.values, **values.ros}
    if not isinstance(values, Mapping):
        raise ParamError("(parameters)", values, "a mapping of parameter names to values")
    unknown = sorted(str(k) for k in values if not isinstance(k, str)
                     or (k not in SPEC_BY_NAME and not is_ros_reserved(k)))
    if unknown:
        raise ParamError(", ".join(unknown), "(unknown name)",
                         "known parameter names only (see the parameter table in README)")
    checked: dict[str, Any] = {}
    for spec in SPECS:
        if spec.name in values:
            checked[spec.name] = check_value(spec, values[spec.name])
        elif spec.required:
            raise ParamError(spec.name, MISSING, "required, " + spec.allowed_text())
        else:
            checked[spec.name] = check_value(spec, spec.default)
    _check_cross_fields(checked)
    ros = {k: v for k, v in values.items() if is_ros_reserved(k)}
    if "use_sim_time" in ros and not isinstance(ros["use_sim_time"], bool):
        raise ParamError("use_sim_time", ros["use_sim_time"], "true or false")
    groups = {g: _build_group(get_type_hints(MonitorConfig)[g], g + ".", checked)
              for g in ("vehicle", "inputs", "noise", "checks", "timeouts", "output")}
    return MonitorConfig(**groups, values=_FrozenDict(checked), ros=_FrozenDict(ros))


class _FrozenDict(dict[str, Any]):
    """A dict that refuses changes (keeps MonitorConfig effectively immutable)."""

    def _refuse(self, *args: Any, **kwargs: Any) -> None:
        raise TypeError("MonitorConfig values are read-only")

    __setitem__ = __delitem__ = _refuse  # type: ignore[assignment]
    clear = pop = popitem = setdefault = update = _refuse  # type: ignore[assignment]

    def __hash__(self) -> int:  # type: ignore[override]
        return hash(tuple(sorted(self.items())))


def _check_cross_fields(v: Mapping[str, Any]) -> None:
    wheelbase = v["vehicle.wheelbase"]
    if not v["vehicle.cg_to_rear_axle"] < wheelbase:
        raise ParamError("vehicle.cg_to_rear_axle", v["vehicle.cg_to_rear_axle"],
                         f"(0, vehicle.wheelbase) = (0, {wheelbase:g}) m")
    max_angle = v["vehicle.max_road_wheel_angle"]
    if not abs(v["vehicle.steering_offset"]) < max_angle:
        raise ParamError("vehicle.steering_offset", v["vehicle.steering_offset"],
                         f"|offset| < vehicle.max_road_wheel_angle = {max_angle:g} rad")
    # Ackermann: the inner front wheel turns by atan(L / (L / tan(delta) - w/2)), which
    # passes 90 deg once tan(delta) * w/2 >= L.
    if not 0.5 * v["vehicle.track_width"] * math.tan(max_angle) < wheelbase:
        raise ParamError("vehicle.max_road_wheel_angle", max_angle,
                         "small enough that tan(angle) * vehicle.track_width / 2 < "
                         "vehicle.wheelbase (inner wheel below 90 deg)")
    if not v["checks.slip_ratio_warn"] < v["checks.slip_ratio_error"]:
        raise ParamError("checks.slip_ratio_warn", v["checks.slip_ratio_warn"],
                         f"less than checks.slip_ratio_error = {v['checks.slip_ratio_error']:g}")
    seen: dict[str, str] = {}
    for name in ("inputs.joint_states.steering_joints", "inputs.joint_states.front_wheel_joints",
                 "inputs.joint_states.rear_wheel_joints"):
        for joint in v[name]:
            if joint in seen:
                raise ParamError(name, list(v[name]),
                                 f"joint names not used elsewhere ('{joint}' is also in "
                                 f"{seen[joint]})")
            seen[joint] = name
    _check_scalar_inputs(v)


def _check_scalar_inputs(v: Mapping[str, Any]) -> None:
    """inputs.steering / inputs.speed: complete 'field' settings, non-zero scale, own topic."""
    others = {v[n]: n for n in ("inputs.joint_states.topic", "inputs.localization.topic",
                                "inputs.localization.reset_topic", "inputs.imu.topic",
                                "inputs.gnss.topic") if v[n]}
    for role in ("steering", "speed"):
        pre = f"inputs.{role}."
        topic = v[pre + "topic"]
        if not topic:
            continue
        if v[pre + "scale"] == 0.0:
            raise ParamError(pre + "scale", v[pre + "scale"], "a finite, non-zero number")
        if topic in others:
            raise ParamError(pre + "topic", topic, f"a topic not used by {others[topic]}")
        if v[pre + "type"] == "field":
            for leaf in ("type_name", "field"):
                if not v[pre + leaf]:
                    raise ParamError(pre + leaf, "", f"required when {pre}type is 'field'; "
                                     + SPEC_BY_NAME[pre + leaf].allowed_text())
    if role_topics_clash(v):
        raise ParamError("inputs.speed.topic", v["inputs.speed.topic"],
                         "a topic other than inputs.steering.topic, unless both inputs have "
                         "type 'field' with the same type_name")
    if v["inputs.steering.topic"] and v["inputs.steering.kind"] == "steering_wheel" \
            and v["vehicle.steering_ratio"] == 1.0:
        raise ParamError("inputs.steering.kind", "steering_wheel",
                         "'road_wheel' unless vehicle.steering_ratio is set (it is 1.0)")


def role_topics_clash(v: Mapping[str, Any]) -> bool:
    """True when steering and speed share a topic but not one message type ('field')."""
    st, sp = v["inputs.steering.topic"], v["inputs.speed.topic"]
    if not st or st != sp:
        return False
    return not (v["inputs.steering.type"] == v["inputs.speed.type"] == "field"
                and v["inputs.steering.type_name"] == v["inputs.speed.type_name"])


# ---------------------------------------------------------------------------------------------
# Parameter files (ROS 2 form)
# ---------------------------------------------------------------------------------------------
class _Loader(yaml.SafeLoader):
    """SafeLoader that also reads ``1e3`` as a float, as the ROS 2 YAML parser does."""


_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)[eE][-+]?\d+$"),
    list("-+0123456789."),
)


def _node_matches(key: str, node_name: str) -> bool:
    """Does a file's node key (``/**``, ``name``, ``/ns/name``, ``/ns/*``) select our node?"""
    tokens = key.strip("/").split("/")
    return tokens == ["**"] or tokens[-1] in (node_name, "*", "**")


def _node_sections(doc: Mapping[Any, Any], prefix: str, depth: int,
                   out: list[tuple[str, Any]]) -> None:
    if depth > MAX_NESTING:
        raise ParamError("(file)", "(nesting too deep)", f"at most {MAX_NESTING} levels")
    for key, val in doc.items():
        if not isinstance(key, str):
            raise ParamError("(file)", key, "string keys only")
        if not isinstance(val, Mapping):
            continue  # not a node section (rcl would refuse it; other nodes' business)
        name = f"{prefix}/{key.strip('/')}" if prefix else key
        if ROS_PARAMETERS_KEY in val:
            out.append((name, val[ROS_PARAMETERS_KEY]))
        else:
            _node_sections(val, name, depth + 1, out)


def _flatten(tree: Mapping[Any, Any], prefix: str, out: dict[str, Any], depth: int) -> None:
    if depth > MAX_NESTING:
        raise ParamError(prefix.rstrip("."), "(nesting too deep)", f"at most {MAX_NESTING} levels")
    for key, val in tree.items():
        if not isinstance(key, str) or key == "":
            raise ParamError(prefix + str(key), val, "parameter names that are non-empty strings")
        name = prefix + key
        if isinstance(val, Mapping):
            _flatten(val, name + ".", out, depth + 1)
            continue
        if name in out:
            raise ParamError(name, val, "each parameter given once")
        if len(out) >= MAX_ENTRIES:
            raise ParamError("(file)", "(too many entries)", f"at most {MAX_ENTRIES} parameters")
        out[name] = val


def parse_params_text(text: str, node_name: str = NODE_NAME,
                      source: str = "<text>") -> dict[str, Any]:
    """Like ``load_params_file`` for YAML text already in memory."""
    try:
        doc = yaml.load(text, Loader=_Loader)  # noqa: S506 - _Loader derives from SafeLoader
    except yaml.YAMLError as exc:
        raise ParamError(source, "(unreadable YAML)", f"valid YAML ({exc})".replace("\n", " "))\
            from None
    except RecursionError:
        raise ParamError(source, "(nesting too deep)", "a ROS 2 parameter file") from None
    if not isinstance(doc, Mapping):
        raise ParamError(source, doc, f"a mapping '{node_name}: {{{ROS_PARAMETERS_KEY}: ...}}'")
    sections: list[tuple[str, Any]] = []
    _node_sections(doc, "", 0, sections)
    values: dict[str, Any] = {}
    found = False
    for key, params in sections:
        if not _node_matches(key, node_name):
            continue
        found = True
        if params is None:
            continue
        if not isinstance(params, Mapping):
            raise ParamError(f"{key}.{ROS_PARAMETERS_KEY}", params, "a mapping of parameters")
        section: dict[str, Any] = {}
        _flatten(params, "", section, 0)
        values.update(section)  # later sections override earlier ones, as in rcl
    if not found:
        raise ParamError(source, f"(no section for node '{node_name}')",
                         f"a '{node_name}:' or '/**:' key holding '{ROS_PARAMETERS_KEY}:'")
    unknown = sorted(k for k in values if k not in SPEC_BY_NAME and not is_ros_reserved(k))
    if unknown:
        raise ParamError(", ".join(unknown), "(unknown name)",
                         "known parameter names only (see the parameter table in README)")
    return values


def load_params_file(path: str | Path, node_name: str = NODE_NAME) -> dict[str, Any]:
    """Read a ROS 2 parameter file; return our node's parameters by dotted name.

    Accepts ``kinematic_monitor:``, ``/kinematic_monitor:``, ``/ns/kinematic_monitor:`` and
    ``/**:`` sections (later sections override earlier ones). Unknown names are refused.
    Values are returned as read (lists stay lists); call ``validate`` to check them.
    """
    p = Path(path)
    try:
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ParamError(str(p), f"({size} bytes)",
                             f"a file of at most {MAX_FILE_BYTES} bytes")
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ParamError(str(p), "(unreadable file)", f"a readable file ({exc.strerror})")\
            from None
    except UnicodeDecodeError:
        raise ParamError(str(p), "(not UTF-8 text)", "a UTF-8 YAML file") from None
    return parse_params_text(text, node_name, str(p))


def load_config(path: str | Path, node_name: str = NODE_NAME) -> MonitorConfig:
    """``validate(load_params_file(path))``."""
    return validate(load_params_file(path, node_name))


# ---------------------------------------------------------------------------------------------
# Writing parameter files
# ---------------------------------------------------------------------------------------------
def _yaml_scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        text = repr(value)
        if "e" in text and "." not in text.split("e")[0]:
            mantissa, exponent = text.split("e")
            text = f"{mantissa}.0e{exponent}"
        return text
    return json.dumps(str(value), ensure_ascii=False)  # double-quoted YAML string


def _yaml_value(spec: ParamSpec | None, value: Any) -> str:
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_yaml_scalar(_as_type(spec, v)) for v in value) + "]"
    return _yaml_scalar(_as_type(spec, value))


def _as_type(spec: ParamSpec | None, value: Any) -> Any:
    """Doubles always written with a decimal point, so ROS reads them as doubles."""
    if spec is not None and spec.type in ("double", "double_array") and _is_number(value):
        return float(value)
    return value


def dump_params_yaml(values_or_config: Mapping[str, Any] | MonitorConfig,
                     path_or_stream: str | Path | IO[str],
                     comments: Mapping[str, str] | None = None,
                     node_name: str = NODE_NAME) -> None:
    """Write parameters in the ROS 2 parameter-file form the node and CLI read.

    A MonitorConfig writes every parameter; a mapping writes only the names it holds (each
    value is checked, required ones need not be present). ``comments`` maps a dotted name
    (or a group such as ``vehicle``) to a note written beside it, e.g. an uncertainty.
    """
    if isinstance(values_or_config, MonitorConfig):
        flat: dict[str, Any] = {**values_or_config.as_dict(), **values_or_config.ros}
    else:
        flat = {}
        for name, value in values_or_config.items():
            if not isinstance(name, str) or (name not in SPEC_BY_NAME
                                             and not is_ros_reserved(name)):
                raise ParamError(str(name), "(unknown name)", "known parameter names only")
            spec = SPEC_BY_NAME.get(name)
            flat[name] = check_value(spec, value) if spec else value
    notes = dict(comments or {})
    for name in notes:
        if name not in flat and not any(k.startswith(name + ".") for k in flat):
            raise ParamError(name, notes[name], "a comment on a parameter or group being written")
    order = {s.name: i for i, s in enumerate(SPECS)}
    names = sorted(flat, key=lambda n: (order.get(n, -1), n))
    lines = [f"{node_name}:", f"  {ROS_PARAMETERS_KEY}:"]
    open_path: list[str] = []
    for name in names:
        *groups, leaf = name.split(".")
        common = 0
        while common < min(len(groups), len(open_path)) and groups[common] == open_path[common]:
            common += 1
        for depth in range(common, len(groups)):
            note = notes.get(".".join(groups[: depth + 1]))
            lines.append("  " * (depth + 2) + f"{groups[depth]}:" + _comment(note))
        open_path = groups
        value = flat[name]
        text = _yaml_value(SPEC_BY_NAME.get(name), list(value) if isinstance(value, tuple)
                           else value)
        lines.append("  " * (len(groups) + 2) + f"{leaf}: {text}" + _comment(notes.get(name)))
    out = "\n".join(lines) + "\n"
    if isinstance(path_or_stream, str | Path):
        Path(path_or_stream).write_text(out, encoding="utf-8")
    else:
        path_or_stream.write(out)


def _comment(note: str | None) -> str:
    if not note:
        return ""
    return "  # " + " ".join(note.split())  # one line, so the YAML stays valid


def dumps_params_yaml(values_or_config: Mapping[str, Any] | MonitorConfig,
                      comments: Mapping[str, str] | None = None) -> str:
    """``dump_params_yaml`` into a string."""
    buf = io.StringIO()
    dump_params_yaml(values_or_config, buf, comments)
    return buf.getvalue()


# ---------------------------------------------------------------------------------------------
# Documentation and descriptors
# ---------------------------------------------------------------------------------------------
ROS_TYPE_NAMES: dict[str, str] = {
    "double": "PARAMETER_DOUBLE",
    "integer": "PARAMETER_INTEGER",
    "bool": "PARAMETER_BOOL",
    "string": "PARAMETER_STRING",
    "string_array": "PARAMETER_STRING_ARRAY",
    "double_array": "PARAMETER_DOUBLE_ARRAY",
}


def descriptor_fields(spec: ParamSpec) -> dict[str, Any]:
    """Plain data for an rcl_interfaces ParameterDescriptor (the node builds the message).

    Keys: ``type`` (a ``rcl_interfaces.msg.ParameterType`` constant name), ``description``
    (with unit), ``additional_constraints`` (the full allowed text, incl. exclusive bounds
    and cross-field rules), ``read_only`` (not runtime-changeable), and ``range`` =
    (from, to) when both bounds exist (ROS ranges are inclusive; ``validate`` is exact).
    """
    unit = "" if spec.unit == "-" else f" [{spec.unit}]"
    fields: dict[str, Any] = {
        "name": spec.name,
        "type": ROS_TYPE_NAMES[spec.type],
        "description": spec.description + unit,
        "additional_constraints": spec.allowed_text() + ("; required" if spec.required else ""),
        "read_only": not spec.runtime_changeable,
        "range": None,
    }
    if spec.min_value is not None and spec.max_value is not None \
            and spec.type in ("double", "integer"):
        fields["range"] = (spec.min_value, spec.max_value)
    return fields


def _default_text(spec: ParamSpec) -> str:
    if spec.required:
        return "(required)"
    value = spec.default
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_yaml_scalar(v) for v in value) + "]"
    return _yaml_scalar(value)


def spec_table_markdown(specs: Sequence[ParamSpec] = SPECS) -> str:
    """A markdown table of every parameter (name, type, default, unit, allowed, description)."""

    def cell(text: str) -> str:
        return text.replace("|", "\\|").replace("\n", " ")

    rows = ["| parameter | type | default | unit | allowed | runtime | description |",
            "|---|---|---|---|---|---|---|"]
    for s in specs:
        allowed = s.range_text() or (", ".join(f"`{c}`" for c in s.choices))
        if s.length is not None:
            allowed = f"{s.length} names"
        elif s.kind in ("optional_topic",):
            allowed = "topic or '' (off)"
        rows.append("| " + " | ".join(cell(c) for c in (
            f"`{s.name}`", s.type, f"`{_default_text(s)}`" if not s.required else "(required)",
            s.unit, allowed, "yes" if s.runtime_changeable else "no", s.description)) + " |")
    return "\n".join(rows) + "\n"


_check_schema()
