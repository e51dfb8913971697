"""Which topics the bag reader uses and how: the ``inputs.*`` parameters, checked against
the topics a bag holds."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from kinematic_monitor.config import schema, validation
from kinematic_monitor.config.validation import MonitorConfig
from kinematic_monitor.io import decode
from kinematic_monitor.io.bag.errors import BagError
from kinematic_monitor.io.scalar_inputs import ScalarSettings, scalar_settings

__all__ = ["BagInputs", "LOCALIZATION_TYPES", "as_config", "inputs_from_config", "check_topics"]

LOCALIZATION_TYPES = {"odometry": decode.ODOMETRY,
                      "pose_with_covariance": decode.POSE_WITH_COVARIANCE}


@dataclass(frozen=True)
class BagInputs:
    """Which topics to read and how (the ``inputs.*`` parameters)."""

    joint_states: str = "/joint_states"
    steering_joints: tuple[str, ...] = ("front_left_steer_joint", "front_right_steer_joint")
    front_wheel_joints: tuple[str, ...] = ("front_left_wheel_joint", "front_right_wheel_joint")
    rear_wheel_joints: tuple[str, ...] = ("rear_left_wheel_joint", "rear_right_wheel_joint")
    localization: str = "/localization/odom"
    localization_type: str = "odometry"
    imu: str = "/imu/data"
    gnss: str = "/gnss/fix"
    max_steer: float = math.pi / 2  # [rad] largest physical road-wheel angle
    # steer joints report steering-wheel angles when != 1 (divided at conversion)
    steering_ratio: float = 1.0
    # steering / speed from other message types (inputs.steering.*, inputs.speed.*)
    scalars: tuple[ScalarSettings, ...] = ()


def _lookup(config: Mapping[str, Any], dotted: str) -> Any:
    """Value of a dotted parameter in a nested or flat dict; KeyError if absent."""
    if dotted in config:
        return config[dotted]
    if len(config) == 1:  # ROS parameter-file form: {node: {ros__parameters: {...}}}
        (only,) = config.values()
        if isinstance(only, Mapping) and "ros__parameters" in only:
            return _lookup(only["ros__parameters"], dotted)
    node: Any = config
    for part in dotted.split("."):
        if not isinstance(node, Mapping) or part not in node:
            raise KeyError(dotted)
        node = node[part]
    return node


# The reader reads no vehicle geometry; a dict of reader settings may leave it out, and these
# values (an invented mid-size car) stand in for it so that the rest can be validated.
_GEOMETRY_STAND_IN = {"vehicle.wheelbase": 2.8, "vehicle.cg_to_rear_axle": 1.4,
                      "vehicle.wheel_radius": 0.33, "vehicle.track_width": 1.6}


def as_config(config: MonitorConfig | Mapping[str, Any] | None) -> MonitorConfig:
    """A validated configuration from a MonitorConfig, a dict of parameters (nested, dotted
    or in the ROS parameter-file form; missing names take their defaults, missing vehicle
    geometry a stand-in) or None (all defaults). BagError naming the parameter for a bad
    value."""
    if isinstance(config, MonitorConfig):
        return config
    flat: dict[str, Any] = {}
    if config is not None:
        for name in schema.SPEC_BY_NAME:
            try:
                flat[name] = _lookup(config, name)
            except KeyError:
                continue
    for name, value in _GEOMETRY_STAND_IN.items():
        flat.setdefault(name, value)
    try:
        return validation.validate(flat)
    except schema.ParamError as exc:
        raise BagError(str(exc)) from None


def inputs_from_config(config: MonitorConfig | Mapping[str, Any] | None) -> BagInputs:
    """BagInputs from the configuration (see :func:`as_config`).

    Reads ``inputs.joint_states.{topic,steering_joints,front_wheel_joints,
    rear_wheel_joints}``, ``inputs.localization.{topic,type}``, ``inputs.imu.topic``,
    ``inputs.gnss.topic``, ``vehicle.max_road_wheel_angle`` [rad], ``vehicle.steering_ratio``
    and the single-value inputs ``inputs.steering.*`` / ``inputs.speed.*``: a configured
    steering input replaces the JointState steer joints, a speed input its wheel joints;
    with both, JointState is not read.
    """
    cfg = as_config(config)
    try:
        scalars = tuple(scalar_settings(cfg))
    except ValueError as exc:
        raise BagError(str(exc)) from None
    roles = {sc.role for sc in scalars}
    js, loc = cfg.inputs.joint_states, cfg.inputs.localization
    inputs = BagInputs(
        joint_states=js.topic,
        steering_joints=tuple(js.steering_joints),
        front_wheel_joints=tuple(js.front_wheel_joints),
        rear_wheel_joints=tuple(js.rear_wheel_joints),
        localization=loc.topic,
        localization_type=loc.type,
        imu=cfg.inputs.imu.topic,
        gnss=cfg.inputs.gnss.topic,
        max_steer=cfg.vehicle.max_road_wheel_angle,
        steering_ratio=cfg.vehicle.steering_ratio,
        scalars=scalars,
    )
    if "steering" in roles:
        inputs = dataclasses.replace(inputs, steering_joints=())
    if "speed" in roles:
        inputs = dataclasses.replace(inputs, front_wheel_joints=(), rear_wheel_joints=())
    if roles == {"steering", "speed"}:
        inputs = dataclasses.replace(inputs, joint_states="")
    if inputs.localization_type not in LOCALIZATION_TYPES:
        raise BagError(
            f"inputs.localization.type is {inputs.localization_type!r}; "
            f"allowed: {sorted(LOCALIZATION_TYPES)}"
        )
    return inputs


def check_topics(inp: BagInputs, found: Mapping[str, tuple[str, int]], bag: str,
                 warnings: list[str]) -> dict[str, tuple[str, str]]:
    """Used topic -> (input name, message type); BagError for a missing needed topic or any
    wrong type, a warning for a missing optional one. ``bag`` names the bag in messages.

    Input names are those of the node's inputs (``joint_states``, ``localization``,
    ``imu``, ``gnss``; single-value inputs by role, e.g. ``steering+speed``).
    """
    wanted = [
        ("joint_states", "inputs.joint_states.topic", inp.joint_states, decode.JOINT_STATE,
         True),
        ("localization", "inputs.localization.topic", inp.localization,
         LOCALIZATION_TYPES[inp.localization_type], True),
        ("imu", "inputs.imu.topic", inp.imu, decode.IMU, False),
        ("gnss", "inputs.gnss.topic", inp.gnss, decode.NAVSATFIX, False),
    ]
    used: dict[str, tuple[str, str]] = {}
    available = ", ".join(f"{n} ({t})" for n, (t, _) in sorted(found.items())) or "none"
    for name, param, topic, expected, needed in wanted:
        if not topic:
            continue
        if topic not in found:
            text = (f"topic {topic!r} ({param}, type {expected}) is not in bag {bag!r}; "
                    f"topics there: {available}")
            if needed:
                raise BagError(text)
            warnings.append(text)
            continue
        got = found[topic][0]
        if got != expected:
            hint = ""
            if param == "inputs.localization.topic" and got in LOCALIZATION_TYPES.values():
                other = next(k for k, v in LOCALIZATION_TYPES.items() if v == got)
                hint = f" (set inputs.localization.type to {other!r})"
            raise BagError(f"topic {topic!r} ({param}) has type {got}, expected {expected}{hint}")
        if topic in used:
            raise BagError(f"topic {topic!r} is configured for two inputs")
        used[topic] = (name, expected)
    roles: dict[str, list[str]] = {}
    for sc in inp.scalars:
        roles.setdefault(sc.topic, []).append(sc.role)
    for sc in inp.scalars:
        param = f"{sc.param_prefix}.topic"
        if sc.topic not in found:
            raise BagError(f"topic {sc.topic!r} ({param}, type {sc.type_name}) is not in bag "
                           f"{bag!r}; topics there: {available}")
        got = found[sc.topic][0]
        if got != sc.type_name:
            raise BagError(f"topic {sc.topic!r} ({param}) has type {got}, "
                           f"expected {sc.type_name} ({sc.param_prefix}.type)")
        if used.get(sc.topic, ("", sc.type_name))[1] != sc.type_name:
            raise BagError(f"topic {sc.topic!r} is configured for two inputs")
        used[sc.topic] = ("+".join(roles[sc.topic]), sc.type_name)
    return used
