"""``node``, ``replay`` and ``demo`` write nothing into the working directory unless asked.

Each runs as its own process in an empty temporary working directory; inputs, outputs and
the process's console capture live elsewhere, and afterwards the working directory must
still be empty (project rule: nothing is written to the working directory unless asked).
The node runs briefly over DDS (localhost discovery, its own domain id) with the default
event log, which must appear in the ROS log directory instead.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from dds_helpers import new_domain_id, ros_env, start_publisher, write_params


def _dirs(tmp_path: Path) -> tuple[Path, Path]:
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    other = tmp_path / "elsewhere"
    other.mkdir()
    return cwd, other


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _cli(*argv: str) -> list[str]:
    return [sys.executable, "-m", "kinematic_monitor", *argv]


@pytest.mark.dds
def test_node_writes_its_event_log_to_the_ros_log_directory_not_the_cwd(
        tmp_path: Path) -> None:
    pytest.importorskip("rclpy")
    cwd, other = _dirs(tmp_path)
    params = write_params(other / "params.yaml", extra="    inputs:\n      gnss:\n"
                                                       "        topic: \"\"\n")
    ros_log = other / "ros_log"
    domain = new_domain_id()
    env = ros_env(domain, ROS_LOG_DIR=str(ros_log))
    console = other / "node.out"
    with open(console, "w") as out:
        node = subprocess.Popen(_cli("node", "--params", str(params)), cwd=cwd, env=env,
                                stdout=out, stderr=subprocess.STDOUT, start_new_session=True)
    pub_dir = other / "publisher"
    pub_dir.mkdir()
    pub = None
    try:
        deadline = time.monotonic() + 30.0
        while "running (" not in console.read_text() and time.monotonic() < deadline:
            assert node.poll() is None, console.read_text()
            time.sleep(0.05)
        assert "running (" in console.read_text()
        # a short drive, then silence: the inputs go stale, so an event is logged
        pub = start_publisher(domain, pub_dir, "--duration", "1.0")
        assert pub.wait(timeout=20.0) == 0, pub.output()
        deadline = time.monotonic() + 10.0
        while "input_stale" not in console.read_text() and time.monotonic() < deadline:
            time.sleep(0.05)
        node.send_signal(signal.SIGINT)
        assert node.wait(timeout=10.0) == 0, console.read_text()
    finally:
        if pub is not None:
            pub.stop()
        if node.poll() is None:
            os.killpg(node.pid, signal.SIGKILL)
            node.wait()
    text = console.read_text()
    assert _listing(cwd) == [], text
    logs = sorted(ros_log.glob("kinematic_monitor_events_*.jsonl"))
    assert len(logs) == 1, (text, _listing(ros_log))
    # the per-run name: start time and process id (kinematic_monitor/io/log_location.py)
    assert re.fullmatch(rf"kinematic_monitor_events_\d{{8}}-\d{{6}}-{node.pid}\.jsonl",
                        logs[0].name), logs[0].name
    assert f"event log: {logs[0]}" in text  # the node says where it writes
    assert "input_stale" in logs[0].read_text()


def test_replay_writes_only_into_out(tmp_path: Path) -> None:
    cwd, other = _dirs(tmp_path)
    bag = other / "drive"
    sim = subprocess.run(_cli("simulate", "skidpad_circle", "--duration", "6",
                              "--out", str(bag)), cwd=other, capture_output=True, text=True,
                         timeout=300)
    assert sim.returncode == 0, sim.stderr
    out = other / "replay"
    run = subprocess.run(_cli("replay", str(bag), "--params", str(bag / "params.yaml"),
                              "--out", str(out), "--write-bag"),
                         cwd=cwd, capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert (out / "events.json").is_file() and (out / "report.html").is_file()
    assert _listing(cwd) == [], run.stdout


def test_demo_without_out_writes_into_a_new_temporary_folder(tmp_path: Path) -> None:
    cwd, other = _dirs(tmp_path)
    env = dict(os.environ, TMPDIR=str(other))  # tempfile's folder for this process
    run = subprocess.run(_cli("demo", "--offline", "--duration", "6"), cwd=cwd, env=env,
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert _listing(cwd) == [], run.stdout
    made = [p for p in other.iterdir() if p.name.startswith("kinematic_monitor_demo_")]
    assert len(made) == 1, _listing(other)
    assert f"writing the demo into {made[0]}" in run.stdout
    assert (made[0] / "report" / "report.html").is_file()
