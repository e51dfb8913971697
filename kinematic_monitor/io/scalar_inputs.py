"""Single-value inputs: steering [rad] and speed [m/s] from other message types.

``inputs.steering.*`` / ``inputs.speed.*`` name a topic, a message type and a field path
(:mod:`kinematic_monitor.io.fieldpath`) to a number; the message is deserialised into an
object by a generic deserialiser (rosbags in the bag reader, rclpy in the node), the path
is resolved on it and the number scaled. This module is the one home of that: settings
from the parameters, checking a path against a type's definition, message object ->
ChassisSample, and the fieldpath look-up over a rosbags typestore. Pure (no ROS import).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from kinematic_monitor.config.validation import MonitorConfig, SpeedInput, SteeringInput
from kinematic_monitor.core.samples import ChassisSample, Sample
from kinematic_monitor.io import fieldpath
from kinematic_monitor.io.convert import (
    BAD_STAMP,
    NAN_VALUE,
    STEER_OUT_OF_RANGE,
    Rejected,
    stamp_seconds,
)

__all__ = [
    "STANDARD_SCALAR_TYPES",
    "ScalarSettings",
    "ScalarInput",
    "scalar_settings",
    "plan_scalar_input",
    "chassis_from_scalars",
    "scalar_stamp",
    "chassis_from_scalar_msg",
    "typestore_fields",
    "scalar_decoder",
]

_isfinite = math.isfinite


#: message type and field path behind each standard ``inputs.steering.type`` /
#: ``inputs.speed.type`` choice ('field' takes both from the parameters)
STANDARD_SCALAR_TYPES: dict[str, tuple[str, str]] = {
    "float64": ("std_msgs/msg/Float64", "data"),
    "float32": ("std_msgs/msg/Float32", "data"),
    "twist_stamped": ("geometry_msgs/msg/TwistStamped", "twist.linear.x"),
}


@dataclass(frozen=True)
class ScalarSettings:
    """One ``inputs.steering.*`` or ``inputs.speed.*`` group as configured (unchecked paths).

    value = (raw * scale + offset) / divisor: steering in rad (road-wheel, bicycle
    equivalent; ``divisor`` = vehicle.steering_ratio for steering-wheel angles), speed in
    m/s (taken as the speed of the centre of gravity, body x forward).
    """

    role: str  # 'steering' | 'speed'
    topic: str
    type: str  # 'float64' | 'float32' | 'twist_stamped' | 'field'
    type_name: str  # pkg/msg/Name
    field: str
    scale: float = 1.0
    offset: float = 0.0
    divisor: float = 1.0
    max_abs: float = math.inf  # [rad] largest plausible road-wheel angle (steering only)

    @property
    def param_prefix(self) -> str:
        """``inputs.steering`` or ``inputs.speed``."""
        return f"inputs.{self.role}"

    def describe(self) -> str:
        """'topic (type, field path)' for messages."""
        return f"{self.topic} ({self.type_name}, field '{self.field}')"


@dataclass(frozen=True)
class ScalarInput:
    """A checked single-value input: settings plus the field plan (where number and stamp are)."""

    settings: ScalarSettings
    plan: fieldpath.FieldPlan

    @property
    def receive_time_stamped(self) -> bool:
        """True when the message has no header on the path (samples take the receive time)."""
        return self.plan.stamp_path is None


def scalar_settings(cfg: MonitorConfig) -> list[ScalarSettings]:
    """The enabled steering/speed inputs (``inputs.steering.*``, ``inputs.speed.*``) of a
    validated configuration; standard types fill in their message type and field path."""
    out: list[ScalarSettings] = []
    groups: tuple[tuple[str, SteeringInput | SpeedInput], ...] = (
        ("steering", cfg.inputs.steering), ("speed", cfg.inputs.speed))
    for role, g in groups:
        if not g.topic:
            continue
        if g.type == "field":
            type_name, field = g.type_name, g.field
        else:
            type_name, field = STANDARD_SCALAR_TYPES[g.type]
        divisor, max_abs = 1.0, math.inf
        if isinstance(g, SteeringInput):
            max_abs = cfg.vehicle.max_road_wheel_angle
            if g.kind == "steering_wheel":
                divisor = cfg.vehicle.steering_ratio
        out.append(ScalarSettings(role, g.topic, g.type, type_name, field, g.scale, g.offset,
                                  divisor, max_abs))
    return out


def plan_scalar_input(settings: ScalarSettings, fields_of: fieldpath.FieldsOf) -> ScalarInput:
    """Check the field path against the message type (``fields_of``, see fieldpath.plan).

    Raises ValueError naming the parameter group, topic, type and path.
    """
    try:
        path = fieldpath.parse(settings.field)
        plan = fieldpath.plan(settings.type_name, path, fields_of)
    except fieldpath.FieldPathError as exc:
        raise ValueError(
            f"{settings.param_prefix}: topic {settings.topic}, type {settings.type_name}, "
            f"field '{settings.field}': {exc}") from None
    return ScalarInput(settings, plan)


def _scaled(raw: float, s: ScalarSettings) -> float:
    return (raw * s.scale + s.offset) / s.divisor


def chassis_from_scalars(
    stamp: float, values: Sequence[tuple[ScalarSettings, float]]
) -> ChassisSample | Rejected:
    """ChassisSample with ``steer`` [rad] and/or ``speed`` [m/s] from raw input values.

    ``values`` holds (settings, raw value) for each input read from one message (one, or
    two when steering and speed share a topic). A non-finite value rejects ('nan'); a
    steering angle beyond ``max_abs`` rejects ('steer_out_of_range').
    """
    if not (stamp > 0.0 and _isfinite(stamp)):
        return BAD_STAMP
    steer = speed = math.nan
    for settings, raw in values:
        v = _scaled(raw, settings)
        if not _isfinite(v):
            return NAN_VALUE
        if settings.role == "steering":
            if abs(v) > settings.max_abs:
                return STEER_OUT_OF_RANGE
            steer = v
        else:
            speed = v
    return ChassisSample(stamp, steer=steer, speed=speed)


def scalar_stamp(msg: Any, inp: ScalarInput, receive_time: float) -> float:
    """Header stamp [s] found by the plan, else ``receive_time`` [s]."""
    sp = inp.plan.stamp_path
    if sp is None:
        return receive_time
    st = fieldpath.resolve(msg, sp)
    return stamp_seconds(int(st.sec), int(st.nanosec))


def chassis_from_scalar_msg(
    msg: Any, inputs: Sequence[ScalarInput], receive_time: float
) -> ChassisSample | Rejected:
    """Message object (rclpy or rosbags) -> ChassisSample from one or two ScalarInputs.

    The stamp is that of the first input (header stamp, or ``receive_time`` [s] when the
    message has no header). A path that fails on this message (e.g. an index beyond a
    sequence's length) rejects with 'missing_field'.
    """
    try:
        stamp = scalar_stamp(msg, inputs[0], receive_time)
        values = [(i.settings, fieldpath.resolve_number(msg, i.plan.path)) for i in inputs]
    except fieldpath.FieldPathError as exc:
        return Rejected("missing_field", str(exc))
    return chassis_from_scalars(stamp, values)


def typestore_fields(store: Any) -> fieldpath.FieldsOf:
    """fieldpath look-up (type name -> fields) over a rosbags typestore's definitions."""
    from rosbags.interfaces import Nodetype

    def field_type(desc: Any) -> fieldpath.FieldType:
        kind, detail = desc
        if kind == Nodetype.BASE:
            return fieldpath.FieldType(str(detail[0]))
        if kind == Nodetype.NAME:
            return fieldpath.FieldType(str(detail))
        inner, length = detail
        base = field_type(inner).base
        if kind == Nodetype.ARRAY:
            return fieldpath.FieldType(base, "fixed", int(length))
        return fieldpath.FieldType(base, "sequence", int(length or 0))

    def fields_of(name: str) -> dict[str, fieldpath.FieldType] | None:
        entry = store.fielddefs.get(name)
        if entry is None:
            return None
        return {fname: field_type(desc) for fname, desc in entry[1]}

    return fields_of


def scalar_decoder(store: Any, type_name: str, planned: Sequence[ScalarInput]
                   ) -> Callable[[bytes, int], Sample | Rejected]:
    """(CDR bytes, log time [ns]) -> ChassisSample via a rosbags typestore's deserialiser.

    Undecodable bytes give a 'malformed' rejection; the log time stamps messages without a
    header (see :func:`chassis_from_scalar_msg`).
    """
    deserialize = store.deserialize_cdr

    def decode(buf: bytes, log_ns: int) -> Sample | Rejected:
        try:
            msg = deserialize(buf, type_name)
        except Exception as exc:  # noqa: BLE001 - rosbags raises several error types
            return Rejected("malformed", str(exc)[:200])
        return chassis_from_scalar_msg(msg, planned, log_ns * 1e-9)

    return decode
