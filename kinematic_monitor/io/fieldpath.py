"""Field paths into ROS messages, e.g. ``report.road_wheel_angle`` or ``a.b[2].c``.

Pure (no ROS import). A path is parsed once (:func:`parse`), checked once against the
message type's structure (:func:`plan`, with a ``fields_of`` look-up supplied by the
adapter: rclpy classes in the node, the rosbags typestore in the bag reader), then
resolved per message by attribute access and indexing (:func:`resolve`), which works on
rclpy and rosbags message objects alike.

The plan also finds the stamp: the ``header.stamp`` of the nearest message on the path
(the leaf's parent first, the root last) that has a ``std_msgs/msg/Header header`` field.
Without one, samples take the receive time and are counted as receive-time stamped.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, Literal

__all__ = [
    "FieldPathError",
    "FieldPath",
    "FieldType",
    "FieldPlan",
    "FieldsOf",
    "HEADER_TYPE",
    "NUMERIC_TYPES",
    "parse",
    "resolve",
    "resolve_number",
    "plan",
    "normalize_type_name",
]

HEADER_TYPE = "std_msgs/msg/Header"
#: primitive types (ROS 2 .msg names) that give a number
NUMERIC_TYPES = frozenset({
    "float32", "float64", "int8", "uint8", "int16", "uint16", "int32", "uint32",
    "int64", "uint64", "byte", "char", "bool",
})

_IDENT = r"[A-Za-z][A-Za-z0-9_]*"
_SEGMENT_RE = re.compile(rf"^({_IDENT})((?:\[\d+\])*)$")
_INDEX_RE = re.compile(r"\[(\d+)\]")
_TYPE_RE = re.compile(rf"^({_IDENT})/(?:msg/)?([A-Za-z][A-Za-z0-9_]*)$")
MAX_PATH_LENGTH = 256
MAX_INDEX = 1_000_000


class FieldPathError(ValueError):
    """A field path that is malformed, names no field, or does not lead to a number."""


Step = str | int


@dataclass(frozen=True)
class FieldPath:
    """A parsed path: field names (str) and indices (int) in order."""

    text: str
    steps: tuple[Step, ...]

    def __str__(self) -> str:
        return self.text

    def prefix(self, n: int) -> FieldPath:
        """The first ``n`` steps as a path."""
        return FieldPath(_text(self.steps[:n]), self.steps[:n])

    def extend(self, *steps: Step) -> FieldPath:
        """This path followed by ``steps``."""
        full = self.steps + tuple(steps)
        return FieldPath(_text(full), full)


def _text(steps: tuple[Step, ...]) -> str:
    out = ""
    for s in steps:
        out += f"[{s}]" if isinstance(s, int) else (f".{s}" if out else s)
    return out


def parse(text: str) -> FieldPath:
    """Parse ``'a.b[2].c'``; FieldPathError (naming the bad part) if malformed."""
    if not isinstance(text, str) or not text.strip():
        raise FieldPathError(f"field path {text!r}: empty; expected e.g. 'report.angle'")
    if len(text) > MAX_PATH_LENGTH:
        raise FieldPathError(f"field path of {len(text)} characters: at most {MAX_PATH_LENGTH}")
    steps: list[Step] = []
    for part in text.split("."):
        m = _SEGMENT_RE.match(part)
        if m is None:
            raise FieldPathError(
                f"field path {text!r}: bad part {part!r}; expected name or name[index] "
                "(names start with a letter; indices are non-negative integers)")
        steps.append(m.group(1))
        for idx in _INDEX_RE.findall(m.group(2)):
            i = int(idx)
            if i > MAX_INDEX:
                raise FieldPathError(f"field path {text!r}: index {i} is too large")
            steps.append(i)
    return FieldPath(text, tuple(steps))


def resolve(msg: Any, path: FieldPath) -> Any:
    """The value at ``path`` in ``msg``; FieldPathError naming the step that failed."""
    obj = msg
    for k, step in enumerate(path.steps):
        if isinstance(step, int):
            try:
                obj = obj[step]
            except (IndexError, TypeError, KeyError):
                n = _len(obj)
                raise FieldPathError(
                    f"'{path.prefix(k)}' has no element [{step}]"
                    + (f" (length {n})" if n is not None else "")) from None
        else:
            try:
                obj = getattr(obj, step)
            except AttributeError:
                where = f"'{path.prefix(k)}'" if k else "the message"
                raise FieldPathError(f"{where} has no field '{step}'") from None
    return obj


def _len(obj: Any) -> int | None:
    try:
        return len(obj)
    except TypeError:
        return None


def resolve_number(msg: Any, path: FieldPath) -> float:
    """The number at ``path`` as float (bools as 0/1); FieldPathError if not a number."""
    value = resolve(msg, path)
    if isinstance(value, float | int):
        return float(value)
    try:  # numpy scalars and other number-likes
        return float(value.__float__())
    except (AttributeError, TypeError, ValueError):
        raise FieldPathError(
            f"'{path}' holds {type(value).__name__}, not a number") from None


# ---- static check against a type structure --------------------------------------------


@dataclass(frozen=True)
class FieldType:
    """Type of one field: ``base`` is a primitive (``float64``...) or ``pkg/msg/Name``.

    ``array``: 'no' for a single value, 'fixed' for ``T[n]`` (``length`` = n), 'sequence'
    for ``T[]`` or ``T[<=n]`` (length known only per message).
    """

    base: str
    array: Literal["no", "fixed", "sequence"] = "no"
    length: int = 0

    @property
    def is_message(self) -> bool:
        """True when ``base`` is a message type (``pkg/msg/Name``)."""
        return "/" in self.base


#: message type name -> its fields (name -> FieldType), or None when the type is unknown
FieldsOf = Callable[[str], Mapping[str, FieldType] | None]


@dataclass(frozen=True)
class FieldPlan:
    """A path checked against ``type_name``: where the number is and where the stamp is.

    ``stamp_path`` leads to a ``builtin_interfaces/msg/Time``; None means the message
    carries no header on the path (use the receive time).
    """

    type_name: str
    path: FieldPath
    leaf: FieldType
    stamp_path: FieldPath | None


def normalize_type_name(name: str) -> str:
    """``pkg/Name`` or ``pkg/msg/Name`` -> ``pkg/msg/Name``; FieldPathError if neither."""
    m = _TYPE_RE.match(name.strip()) if isinstance(name, str) else None
    if m is None:
        raise FieldPathError(f"message type {name!r}: expected 'package/msg/Name'")
    return f"{m.group(1)}/msg/{m.group(2)}"


def plan(type_name: str, path: FieldPath, fields_of: FieldsOf) -> FieldPlan:
    """Check that ``path`` leads to a single number in ``type_name``; find the stamp.

    Raises FieldPathError naming the type, the path and the step that fails (with the
    fields available there). Indices into fixed arrays are range-checked here; indices
    into sequences can only be checked per message.
    """
    root = normalize_type_name(type_name)

    def fail(why: str) -> FieldPathError:
        return FieldPathError(f"field '{path}' in {root}: {why}")

    fields = fields_of(root)
    if fields is None:
        raise fail(f"message type {root} is unknown")
    # message type at each prefix length (None where the prefix is not a message)
    msg_at: list[str | None] = [root]
    current = FieldType(root)
    for k, step in enumerate(path.steps):
        here = f"'{path.prefix(k)}'" if k else root
        if isinstance(step, int):
            if current.array == "no":
                raise fail(f"{here} is not an array, cannot take [{step}]")
            if current.array == "fixed" and step >= current.length:
                raise fail(f"index [{step}] beyond {here}'s fixed length {current.length}")
            current = FieldType(current.base)
        else:
            if current.array != "no":
                raise fail(f"{here} is an array: index it, e.g. '{path.prefix(k)}[0]'")
            if not current.is_message:
                raise fail(f"{here} is a {current.base}, it has no field '{step}'")
            fields = fields_of(current.base)
            if fields is None:
                raise fail(f"message type {current.base} (at {here}) is unknown")
            if step not in fields:
                have = ", ".join(sorted(fields)) or "none"
                raise fail(f"{current.base} (at {here}) has no field '{step}' "
                           f"(fields: {have})")
            current = fields[step]
        msg_at.append(current.base if current.is_message and current.array == "no" else None)
    if current.array != "no":
        raise fail(f"leads to an array of {current.base}; index it to pick one number")
    if current.base not in NUMERIC_TYPES:
        raise fail(f"leads to a {current.base}, not a number")
    stamp: FieldPath | None = None
    for k in range(len(path.steps) - 1, -1, -1):
        mtype = msg_at[k]
        if mtype is None:
            continue
        fields = fields_of(mtype) or {}
        header = fields.get("header")
        if header is not None and header.base == HEADER_TYPE and header.array == "no":
            stamp = path.prefix(k).extend("header", "stamp")
            break
    return FieldPlan(root, path, current, stamp)
