"""The package's layering, read from the code's own imports (ast), and the parameter names
the code reads (each declared in the schema).

Rules (DEVELOPERS.md, "Layout"): ``core`` imports only ``core`` (a configuration type may be
imported for type checking only); ``io`` and ``config`` import neither ``ros`` nor ``apps``;
``sim`` imports no ``apps``; only ``ros`` imports rclpy or ROS message packages.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

from kinematic_monitor.config.schema import SPEC_BY_NAME

PKG = Path(__file__).resolve().parents[1] / "kinematic_monitor"
ROS_TOP = {"rclpy", "rcl_interfaces", "sensor_msgs", "nav_msgs", "geometry_msgs", "std_msgs",
           "diagnostic_msgs", "builtin_interfaces", "launch", "launch_ros"}
FILES = sorted(PKG.rglob("*.py"))


def _layer(path: Path) -> str:
    rel = path.relative_to(PKG).parts
    return rel[0] if len(rel) > 1 else "(top)"


def _imports(path: Path) -> list[tuple[str, bool]]:
    """(module imported, only under ``if TYPE_CHECKING:``) for every import in ``path``."""
    tree = ast.parse(path.read_text(), str(path))
    typing_only: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for sub in node.body:
                for inner in ast.walk(sub):
                    typing_only.add(id(inner))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, id(node) in typing_only) for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out.append((node.module, id(node) in typing_only))
    return out


def _violations(path: Path) -> list[str]:
    layer = _layer(path)
    bad = []
    for mod, typing_only in _imports(path):
        top = mod.split(".")[0]
        parts = mod.split(".")
        sub = parts[1] if top == "kinematic_monitor" and len(parts) > 1 else ""
        if top in ROS_TOP and layer != "ros":
            bad.append(f"{mod} (only ros/ imports ROS)")
        if top != "kinematic_monitor":
            continue
        if layer == "core" and sub not in ("core", "") and not (typing_only and sub == "config"):
            bad.append(f"{mod} (core imports only core)")
        if layer in ("io", "config") and sub in ("ros", "apps"):
            bad.append(f"{mod} ({layer} imports no ros or apps)")
        if layer == "sim" and sub == "apps":
            bad.append(f"{mod} (sim imports no apps)")
    return bad


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(PKG)))
def test_layer_rules(path: Path) -> None:
    assert _violations(path) == []


def test_the_rules_catch_a_violation(tmp_path: Path) -> None:
    # a check that cannot fail is no check: a core module importing io is found
    fake = PKG / "core" / "_probe_never_committed.py"
    try:
        fake.write_text("from kinematic_monitor.io import cdr\nimport rclpy\n")
        assert len(_violations(fake)) == 2
    finally:
        fake.unlink()


NAME = re.compile(r"^(vehicle|inputs|noise|checks|timeouts|output)\.[a-z_]+(\.[a-z_]+)*$")


def _parameter_names(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), str(path))
    return {n.value for n in ast.walk(tree)
            if isinstance(n, ast.Constant) and isinstance(n.value, str) and NAME.match(n.value)}


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(PKG)))
def test_every_parameter_name_the_code_reads_is_declared(path: Path) -> None:
    undeclared = {n for n in _parameter_names(path) if n not in SPEC_BY_NAME
                  and not any(s.startswith(n + ".") for s in SPEC_BY_NAME)}
    assert undeclared == set(), f"read but not declared in config/schema.py SPECS: {undeclared}"


def test_the_name_scan_finds_names() -> None:
    names = set().union(*(_parameter_names(p) for p in FILES))
    assert "vehicle.wheelbase" in names and "checks.false_alarm_rate" in names
