"""The core is plain Python/numpy: importing it must not import rclpy or message packages."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

CORE_MODULES = [
    "kinematic_monitor.geometry",
    "kinematic_monitor.samples",
    "kinematic_monitor.model",
    "kinematic_monitor.filter",
    "kinematic_monitor.params",
    "kinematic_monitor.checks",
    "kinematic_monitor.triage",
    "kinematic_monitor.events",
    "kinematic_monitor.ordering",
    "kinematic_monitor.monitor",
    "kinematic_monitor.convert",
    "kinematic_monitor.cdr",
    "kinematic_monitor.bag",
    "kinematic_monitor.sim",
    "kinematic_monitor.cli",
]

ROS_PREFIXES = ("rclpy", "rcl_interfaces", "sensor_msgs", "nav_msgs", "geometry_msgs",
                "std_msgs", "diagnostic_msgs", "builtin_interfaces")


@pytest.mark.parametrize("module", CORE_MODULES)
def test_core_module_does_not_import_ros(module: str) -> None:
    # run in a fresh interpreter so that other tests' imports cannot hide a leak
    code = (
        "import importlib, json, sys\n"
        f"importlib.import_module({module!r})\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=120)
    if out.returncode != 0 and "ModuleNotFoundError" in out.stderr and module in out.stderr:
        pytest.skip(f"{module} does not exist yet")
    assert out.returncode == 0, out.stderr
    loaded = json.loads(out.stdout.strip().splitlines()[-1])
    leaked = [m for m in loaded if m.split(".")[0] in ROS_PREFIXES]
    assert leaked == [], f"{module} imports ROS modules: {leaked[:5]}"
