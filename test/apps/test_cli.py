"""Command-line entry points: help works from the console script and ``python -m``."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

from kinematic_monitor import __version__
from kinematic_monitor.apps import cli


def test_python_m_help_lists_subcommands() -> None:
    out = subprocess.run([sys.executable, "-m", "kinematic_monitor", "--help"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert "usage: kinematic-monitor" in out.stdout
    for name in cli.SUBCOMMANDS:
        assert name in out.stdout


def test_console_script_help() -> None:
    exe = shutil.which("kinematic-monitor", path=os.path.dirname(sys.executable))
    assert exe is not None, "console script kinematic-monitor is not installed in the venv"
    out = subprocess.run([exe, "--help"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert "kinematic bicycle model" in out.stdout


def test_version_flag(capsys) -> None:  # type: ignore[no-untyped-def]
    try:
        cli.main(["--version"])
    except SystemExit as exc:
        assert exc.code == 0
    assert __version__ in capsys.readouterr().out


def test_console_script_version_is_the_installed_distribution_version() -> None:
    # the version pip recorded for the install (importlib.metadata), printed by the command
    from importlib.metadata import version

    exe = shutil.which("kinematic-monitor", path=os.path.dirname(sys.executable))
    assert exe is not None
    out = subprocess.run([exe, "--version"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == f"kinematic-monitor {version('kinematic_monitor')}"
    assert version("kinematic_monitor") == __version__


def test_no_subcommand_is_usage_error(capsys) -> None:  # type: ignore[no-untyped-def]
    assert cli.main([]) == cli.EXIT_USAGE


def test_unknown_subcommand_exits_2() -> None:
    out = subprocess.run([sys.executable, "-m", "kinematic_monitor", "no-such-command"],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2
    assert "invalid choice" in out.stderr


def test_ros_args_reach_the_node_subcommand(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    # ROS 2 command-line arguments (--ros-args ...) follow the node's own options
    # unchanged, as rcl's argument parser expects them (ROS 2 design: ROS command line
    # arguments); the node module is replaced here so no DDS is touched
    import types

    seen: dict[str, object] = {}

    def fake_main(argv, executor=None):  # type: ignore[no-untyped-def]
        seen["argv"] = argv
        return 0

    fake = types.ModuleType("kinematic_monitor.ros.node")
    fake.main = fake_main  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "kinematic_monitor.ros.node", fake)
    import kinematic_monitor.ros

    monkeypatch.setattr(kinematic_monitor.ros, "node", fake, raising=False)
    params = os.path.join(os.path.dirname(__file__), "..", "..", "config",
                          "kinematic_monitor.yaml")
    rc = cli.main(["node", "--params", params, "--ros-args", "-p", "use_sim_time:=true"])
    assert rc == 0
    assert seen["argv"] == ["kinematic_monitor", "--ros-args", "--params-file", params,
                            "--ros-args", "-p", "use_sim_time:=true"]


def test_ros_args_refused_for_other_subcommands() -> None:
    out = subprocess.run([sys.executable, "-m", "kinematic_monitor", "simulate", "--list",
                          "--ros-args"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 2
    assert "--ros-args is only understood" in out.stderr
