"""The package builds with colcon as a ROS 2 user builds it, and the installed node runs.

``colcon build --base-paths <repo>`` (colcon-core, colcon-ros, colcon-python-setup-py from
the test extra) in a temporary workspace; then the install tree is checked where ROS 2's
tools look (``ros2 run`` finds executables in ``lib/<package>``, the ament resource index
marks the package, the launch file finds ``share/<package>``), through
``ament_index_python`` after sourcing the workspace's ``local_setup.sh``, and the installed
``kinematic_monitor`` executable is started with the installed parameter file over DDS
(localhost discovery, its own domain id) until it publishes ``/diagnostics``.

References: the ament_python package layout (ROS 2 "Creating a package" guide: setup.cfg's
``script_dir``/``install_scripts`` = ``$base/lib/<package>``, the marker in
``resource/<package>`` installed to ``share/ament_index/resource_index/packages``);
ament_index_python's ``get_package_prefix`` / ``get_package_share_directory``.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from dds_helpers import Listener, new_domain_id, ros_env

REPO = Path(__file__).resolve().parents[1]
PKG = "kinematic_monitor"

pytest.importorskip("colcon_core")
pytest.importorskip("colcon_ros")
pytest.importorskip("colcon_python_setup_py")


def _colcon() -> str:
    exe = shutil.which("colcon", path=os.path.dirname(sys.executable))
    assert exe is not None, "colcon is not installed next to this Python (test extra)"
    return exe


@pytest.fixture(scope="module")
def workspace(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    ws = tmp_path_factory.mktemp("colcon_ws")
    env = dict(os.environ, COLCON_HOME=str(ws / "colcon_home"))  # no user configuration
    env.pop("COLCON_DEFAULTS_FILE", None)
    out = subprocess.run(
        [_colcon(), "--log-base", str(ws / "log"), "build", "--base-paths", str(REPO),
         "--build-base", str(ws / "build"), "--install-base", str(ws / "install")],
        cwd=ws, env=env, capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stdout + out.stderr
    assert f"Finished <<< {PKG}" in out.stdout, out.stdout
    yield ws


def _in_workspace(ws: Path, *argv: str) -> list[str]:
    """argv run by sh after sourcing the workspace's local_setup.sh (as a user does)."""
    return ["sh", "-c", '. "$0/local_setup.sh" && exec "$@"', str(ws / "install"), *argv]


def test_install_tree_has_what_ros2_tools_look_for(workspace: Path) -> None:
    prefix = workspace / "install" / PKG
    exe = prefix / "lib" / PKG / PKG
    assert exe.is_file() and os.access(exe, os.X_OK), sorted(map(str, prefix.rglob("*")))
    assert (prefix / "lib" / PKG / "kinematic-monitor").is_file()
    assert (prefix / "share" / "ament_index" / "resource_index" / "packages" / PKG).is_file()
    share = prefix / "share" / PKG
    assert (share / "package.xml").read_bytes() == (REPO / "package.xml").read_bytes()
    assert (share / "launch" / "kinematic_monitor.launch.py").is_file()
    for name in ("kinematic_monitor.yaml", "example_shuttle.yaml"):
        assert (share / "config" / name).read_bytes() == (REPO / "config" / name).read_bytes()
    # colcon-ros read the run dependencies from package.xml
    deps = (prefix / "share" / "colcon-core" / "packages" / PKG).read_text().split(":")
    assert {"rclpy", "diagnostic_msgs", "sensor_msgs", "nav_msgs"} <= set(deps)


def test_ament_index_finds_the_installed_package(workspace: Path) -> None:
    code = ("from ament_index_python.packages import get_package_prefix as p, "
            "get_package_share_directory as s; import kinematic_monitor as k; "
            f"print(p('{PKG}')); print(s('{PKG}')); print(k.__file__)")
    out = subprocess.run(_in_workspace(workspace, sys.executable, "-c", code),
                         capture_output=True, text=True, timeout=60, cwd=workspace)
    assert out.returncode == 0, out.stderr
    prefix, share, module = out.stdout.split()
    install = workspace / "install" / PKG
    assert Path(prefix) == install
    assert Path(share) == install / "share" / PKG
    # the installed copy is imported, not the source tree
    assert Path(module).is_relative_to(install / "lib"), module


@pytest.mark.dds
def test_installed_executable_runs_with_installed_params_and_publishes_diagnostics(
        workspace: Path) -> None:
    pytest.importorskip("rclpy")
    install = workspace / "install" / PKG
    params = install / "share" / PKG / "config" / "kinematic_monitor.yaml"
    run_dir = workspace / "run"
    run_dir.mkdir(exist_ok=True)
    domain = new_domain_id()
    env = ros_env(domain, ROS_LOG_DIR=str(workspace / "ros_log"))
    console = workspace / "node.out"
    with open(console, "w") as out:
        node = subprocess.Popen(
            _in_workspace(workspace, str(install / "lib" / PKG / PKG), "--ros-args",
                          "--params-file", str(params)),
            cwd=run_dir, env=env, stdout=out, stderr=subprocess.STDOUT,
            start_new_session=True)
    lis = Listener(domain)
    try:
        def ours() -> bool:
            return any(s.name.startswith(f"{PKG}: ") for a in lis.diagnostics
                       for s in a.status)

        assert lis.spin_until(ours, timeout=30.0, alive=lambda: node.poll() is None), \
            console.read_text()
        node.send_signal(signal.SIGINT)
        assert node.wait(timeout=10.0) == 0, console.read_text()
    finally:
        lis.close()
        if node.poll() is None:
            os.killpg(node.pid, signal.SIGKILL)
            node.wait()
    text = console.read_text()
    assert "running (" in text
    # the installed default: the event log in the ROS log directory, nothing in the cwd
    assert f"event log: {workspace / 'ros_log' / 'kinematic_monitor_events_'}" in text, text
    assert list(run_dir.iterdir()) == []
