"""ROS 2 parameter files: read (``<node>: ros__parameters: ...``) and write."""

from __future__ import annotations

import io
import json
import re
from collections.abc import Mapping
from pathlib import Path
from typing import IO, Any

import yaml

from kinematic_monitor.config.schema import (
    MAX_ENTRIES,
    MAX_FILE_BYTES,
    MAX_NESTING,
    NODE_NAME,
    ROS_PARAMETERS_KEY,
    SPEC_BY_NAME,
    SPECS,
    ParamError,
    ParamSpec,
    check_value,
    is_number,
    is_ros_reserved,
)
from kinematic_monitor.config.validation import MonitorConfig, validate


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
def yaml_scalar(value: Any) -> str:
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
        return "[" + ", ".join(yaml_scalar(_as_type(spec, v)) for v in value) + "]"
    return yaml_scalar(_as_type(spec, value))


def _as_type(spec: ParamSpec | None, value: Any) -> Any:
    """Doubles always written with a decimal point, so ROS reads them as doubles."""
    if spec is not None and spec.type in ("double", "double_array") and is_number(value):
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


