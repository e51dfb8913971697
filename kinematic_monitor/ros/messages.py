"""Helpers of the node that need ROS types or rclpy: levels, event console lines, message
classes by type name (inputs of vehicle-specific types).

The node's outgoing messages are built as CDR bytes by ``kinematic_monitor.io.outgoing``;
incoming messages become samples in ``kinematic_monitor.io.decode``. Diagnostic levels
follow REP 107 (OK=0, WARN=1, ERROR=2, STALE=3).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from kinematic_monitor.core.levels import LEVEL_BY_NAME as _LEVEL_FROM_NAME
from kinematic_monitor.core.levels import LEVEL_NAMES


def stamp_to_sec(stamp: Any) -> float:
    """Seconds [s] from a header stamp (``sec`` + ``nanosec``)."""
    return float(stamp.sec) + 1e-9 * float(stamp.nanosec)


def level_byte(level: Any) -> bytes:
    """REP 107 level as the single byte DiagnosticStatus.level wants (int, name or bytes)."""
    if isinstance(level, bytes):
        return level[:1] or b"\x00"
    if isinstance(level, str):
        value = _LEVEL_FROM_NAME.get(level.upper())
        if value is None:
            raise ValueError(f"diagnostic level {level!r} is not one of {list(_LEVEL_FROM_NAME)}")
        return bytes([value])
    value = int(level)
    if value not in LEVEL_NAMES:
        raise ValueError(f"diagnostic level {level!r} is not one of 0..3 (REP 107)")
    return bytes([value])


def level_int(level: Any) -> int:
    """REP 107 level as an int (0..3) from int, name or byte."""
    return level_byte(level)[0]


def format_value(value: Any) -> str:
    """Key-value text: floats to 6 significant digits, everything else ``str``."""
    return _fmt(value)


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return "nan" if math.isnan(value) else f"{value:.6g}"
    return str(value)


def event_fields(record: Any) -> dict[str, Any]:
    """Plain dict view of an event start/end record (dataclass, mapping or object)."""
    if isinstance(record, Mapping):
        return dict(record)
    if hasattr(record, "to_dict"):
        return dict(record.to_dict())
    if hasattr(record, "__dataclass_fields__"):
        return {k: getattr(record, k) for k in record.__dataclass_fields__}
    return {k: v for k, v in vars(record).items() if not k.startswith("_")}


def event_phase(fields: Mapping[str, Any]) -> str:
    """'start' or 'end' for an event transition record."""
    phase = fields.get("phase", fields.get("transition", fields.get("type")))
    if isinstance(phase, str) and phase.lower() in ("start", "end"):
        return phase.lower()
    end = fields.get("end")
    return "end" if end is not None and _is_num(end) and math.isfinite(float(end)) else "start"


def _is_num(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def event_console_line(record: Any, t0: float = 0.0) -> str:
    """One operator line, e.g. ``[12.31 s] ERROR lateral_slip: understeer ... (start)``.

    The time is the event start (or end) stamp minus ``t0`` [s].
    """
    f = event_fields(record)
    phase = event_phase(f)
    t: Any = f.get("end") if phase == "end" else f.get("detected_at", f.get("start"))
    if not (_is_num(t) and math.isfinite(float(t))):
        t = f.get("start", math.nan)
    rel = float(t) - t0 if _is_num(t) else math.nan
    level = LEVEL_NAMES.get(level_int(f.get("level", 1)), "WARN")
    kind = f.get("kind", "unknown")
    summary = f.get("summary", "") or ""
    tail = "ended" if phase == "end" else "started"
    return f"[{rel:.2f} s] {level} {kind}: {summary} ({tail})".replace(":  (", ": (")


# --- message classes by type name (inputs of vehicle-specific types) ----------------------

_RCL_PRIMITIVES = {
    "double": "float64", "float": "float32", "boolean": "bool", "octet": "byte",
    "long double": "float64",
}


def import_message_class(type_name: str) -> Any:
    """The rclpy message class for ``pkg/msg/Name`` (importlib, no rosidl_runtime_py).

    Raises ImportError naming the type when its package is not installed or has no such
    message.
    """
    import importlib

    from kinematic_monitor.io.fieldpath import FieldPathError, normalize_type_name

    try:
        full = normalize_type_name(type_name)
    except FieldPathError as exc:
        raise ImportError(str(exc)) from None
    pkg, _, name = full.split("/")
    try:
        module = importlib.import_module(f"{pkg}.msg")
    except ImportError as exc:
        raise ImportError(f"message type {full}: package '{pkg}' is not installed for this "
                          f"Python ({exc})") from None
    cls = getattr(module, name, None)
    if cls is None or not hasattr(cls, "get_fields_and_field_types"):
        raise ImportError(f"message type {full}: package '{pkg}' has no message '{name}'")
    return cls


def _rcl_field_type(text: str) -> Any:
    """rclpy field type string ('double', 'sequence<double, 3>', 'pkg/Name[2]') -> FieldType."""
    from kinematic_monitor.io.fieldpath import FieldType, normalize_type_name

    text = text.strip()
    if text.startswith("sequence<") and text.endswith(">"):
        inner = text[len("sequence<"):-1].split(",")[0]
        return FieldType(_rcl_field_type(inner).base, "sequence")
    if text.endswith("]") and "[" in text:
        base, _, n = text[:-1].rpartition("[")
        if n.startswith("<="):
            return FieldType(_rcl_field_type(base).base, "sequence")
        return FieldType(_rcl_field_type(base).base, "fixed", int(n))
    if "/" in text:
        return FieldType(normalize_type_name(text))
    base = text.split("<")[0]  # bounded strings: string<10>
    return FieldType(_RCL_PRIMITIVES.get(base, base))


def rclpy_fields_of(type_name: str) -> Any:
    """fieldpath look-up over installed rclpy message classes (None if not importable)."""
    try:
        cls = import_message_class(type_name)
    except ImportError:
        return None
    return {name: _rcl_field_type(t) for name, t in cls.get_fields_and_field_types().items()}
