"""The core is plain Python/numpy: importing it must not import rclpy or message packages."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

CORE_MODULES = [
    "kinematic_monitor.core.geometry",
    "kinematic_monitor.core.samples",
    "kinematic_monitor.core.model",
    "kinematic_monitor.core.ekf",
    "kinematic_monitor.config.schema",
    "kinematic_monitor.config.validation",
    "kinematic_monitor.config.files",
    "kinematic_monitor.core.checks.base",
    "kinematic_monitor.core.triage",
    "kinematic_monitor.core.events",
    "kinematic_monitor.core.ordering",
    "kinematic_monitor.core.monitor",
    "kinematic_monitor.core.calibration",
    "kinematic_monitor.io.convert",
    "kinematic_monitor.io.cdr",
    "kinematic_monitor.io.bag",
    "kinematic_monitor.sim",
    "kinematic_monitor.apps.cli",
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
