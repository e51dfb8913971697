"""Validation: parameter values in, the typed configuration (``MonitorConfig``) out.

Every value is checked against its ``schema.SPECS`` entry and the cross-field rules; a bad
value raises ``schema.ParamError`` naming the parameter, the value and what is allowed.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, TypeVar, get_type_hints

from kinematic_monitor.config.schema import (
    MISSING,
    SPEC_BY_NAME,
    SPECS,
    ParamError,
    check_value,
    is_ros_reserved,
)
from kinematic_monitor.core.model import VehicleParams


# ---------------------------------------------------------------------------------------------
# The typed configuration
# ---------------------------------------------------------------------------------------------
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
    reference_x: float


@dataclass(frozen=True)
class TopicInput:
    """An optional input given by its topic ('' = disabled)."""

    topic: str

    @property
    def enabled(self) -> bool:
        """False when the topic is ''."""
        return self.topic != ""


@dataclass(frozen=True)
class SteeringInput:
    """``inputs.steering.*``: a single-value steering angle replacing the steer joints."""

    topic: str
    type: str
    type_name: str
    field: str
    scale: float
    offset: float
    kind: str


@dataclass(frozen=True)
class SpeedInput:
    """``inputs.speed.*``: a single vehicle speed replacing the wheel joints."""

    topic: str
    type: str
    type_name: str
    field: str
    scale: float
    offset: float


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
    steering: SteeringInput
    speed: SpeedInput


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
    yaw_lag: float
    heading_time_constant: float
    heading_tolerance: float


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
    """Validated parameters as typed groups (``cfg.vehicle.wheelbase``), the one way any
    code reads them.

    ``values`` holds every schema parameter by dotted name (arrays as tuples); ``ros``
    holds ROS-reserved parameters that were given (e.g. ``use_sim_time``).
    """

    vehicle: VehicleParams
    inputs: InputsConfig
    noise: NoiseConfig
    checks: ChecksConfig
    timeouts: TimeoutsConfig
    output: OutputConfig
    values: Mapping[str, Any] = field(repr=False, compare=True)
    ros: Mapping[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def as_dict(self) -> dict[str, Any]:
        """All schema parameters by dotted name, arrays as lists (ready for YAML/JSON)."""
        return {k: list(v) if isinstance(v, tuple) else v for k, v in self.values.items()}


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
    ref_x = v["inputs.localization.reference_x"]
    if not abs(ref_x) <= wheelbase:
        raise ParamError("inputs.localization.reference_x", ref_x,
                         f"[-vehicle.wheelbase, vehicle.wheelbase] = [{-wheelbase:g}, "
                         f"{wheelbase:g}] m (a point on the vehicle; -vehicle.cg_to_rear_axle "
                         "for a rear-axle base_link)")
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


