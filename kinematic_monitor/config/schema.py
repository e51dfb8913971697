"""The parameter schema: one source of truth for the node, the command line and the docs.

Parameters use the ROS 2 parameter-file form (``<node>: ros__parameters: ...``); nested
maps flatten to dotted names (``vehicle.wheelbase``). Every parameter has a default except
the vehicle geometry, which must be given. Units are SI and angles radians (REP 103).

Pure Python: no ROS import. The rclpy node builds its ParameterDescriptors from ``SPECS``;
``validation`` turns values into the typed configuration, ``files`` reads and writes
parameter files, ``docs`` renders the table in README.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Literal

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
    _double("inputs.localization.reference_x", 0.0, "m",
            "Where the localised point (the pose's child frame, base_link) sits along the body "
            "x axis, measured forward from the centre of gravity: 0 when base_link is at the "
            "centre of gravity, minus vehicle.cg_to_rear_axle when it is at the rear-axle centre "
            "(the common convention for cars). Must lie within the vehicle's length, taken as "
            "[-wheelbase, wheelbase] from the centre of gravity.", -20.0, 20.0),
    _string("inputs.imu.topic", "/imu/data", "sensor_msgs/Imu topic; '' disables the IMU.",
            "optional_topic"),
    _string("inputs.gnss.topic", "/gnss/fix",
            "sensor_msgs/NavSatFix topic read from recordings (replay, sweep) to place events "
            "on maps in WGS84; the live node does not use it; '' disables it.",
            "optional_topic"),
    _string("inputs.qos", "sensor_data", "QoS profile of all subscriptions.",
            choices=("sensor_data", "reliable")),
    _double("inputs.reorder_window", 0.25, "s",
            "Longest time a sample waits so that later-arriving messages of other inputs can "
            "be put in stamp order (it is released sooner once every input has passed its "
            "stamp). It must exceed the latency of the slowest input: a localisation "
            "publishes 50-150 ms after its stamp; a message later than this is dropped and "
            "counted.", 0.0, 1.0),
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
    _double("checks.yaw_lag", 0.2, "s",
            "How long the vehicle's yaw rate may trail the kinematic yaw rate while the "
            "steering moves (its yaw response): a difference up to this lag times the rate of "
            "change of the kinematic yaw rate is not counted as slip.", 0.0, 2.0, runtime=True),
    _double("checks.heading_time_constant", 5.0, "s",
            "Time over which the localisation-heading check follows a slowly changing "
            "difference between the localisation yaw and the gyro-integrated heading (a "
            "mounting offset, a slow gyro bias); a heading drift faster than this is reported.",
            0.1, 600, runtime=True),
    _double("checks.heading_tolerance", 0.005, "rad",
            "Heading difference between localisation and gyro-integrated heading, beyond that "
            "slow offset, still taken as agreement.", 0.0, 1.0, runtime=True),
    # timeouts: an input older than this is reported stale
    _double("timeouts.joint_states", 0.5, "s", "Joint states older than this are stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    _double("timeouts.localization", 0.5, "s", "Localisation older than this is stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    _double("timeouts.imu", 0.5, "s", "IMU data older than this is stale.",
            0.0, 60.0, lo_inc=False, runtime=True),
    # output
    _string("output.events_log", "{ros_log_dir}/kinematic_monitor_events_{run}.jsonl",
            "JSON-lines event log, flushed at each event start and end. {ros_log_dir} is the "
            "ROS log directory (ROS_LOG_DIR, else ROS_HOME/log, else ~/.ros/log), {run} this "
            "run's start time and process id; a relative path is relative to the node's "
            "working directory. The node logs the file it writes.", "path"),
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


def is_number(value: Any) -> bool:
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
        if not is_number(value):
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
        if not all(is_number(v) and math.isfinite(v) and _in_range(spec, v) for v in value):
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




_check_schema()
