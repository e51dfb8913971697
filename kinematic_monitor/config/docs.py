"""Parameter documentation: ROS descriptor data and the README parameter table."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from kinematic_monitor.config.files import yaml_scalar
from kinematic_monitor.config.schema import SPECS, ParamSpec

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
        return "[" + ", ".join(yaml_scalar(v) for v in value) + "]"
    return yaml_scalar(value)


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


