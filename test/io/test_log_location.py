"""Where the event log goes: the ROS log directory rule and the per-run file name.

Reference for the directory rule: ROS 2's own ``rcl_logging_get_logging_directory``, reached
through ``rclpy.logging.get_logging_directory()`` in a fresh process per environment (run
under every ROS distribution the suite is run with, hence the ``dds`` marker).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from kinematic_monitor.config.schema import SPEC_BY_NAME
from kinematic_monitor.io.log_location import events_log_path, ros_log_dir, run_id

HOME = "/home/tester"
# environment cases: (ROS_LOG_DIR, ROS_HOME); None = unset
CASES = [
    ("/var/log/ros", None),
    ("/var/log/ros", "/opt/roshome"),   # ROS_LOG_DIR wins
    ("~/logs", None),                   # leading ~ expanded
    ("~", None),
    ("relative/logs", None),            # used as given
    ("", "/opt/roshome"),               # empty counts as unset
    (None, "/opt/roshome"),
    (None, "~/roshome"),
    ("", ""),
    (None, None),
]


def _env(log_dir: str | None, ros_home: str | None) -> dict[str, str]:
    env = {"HOME": HOME}
    if log_dir is not None:
        env["ROS_LOG_DIR"] = log_dir
    if ros_home is not None:
        env["ROS_HOME"] = ros_home
    return env


def test_rule_in_order_log_dir_then_ros_home_then_home() -> None:
    assert ros_log_dir(_env("/var/log/ros", "/opt/roshome")) == "/var/log/ros"
    assert ros_log_dir(_env("", "/opt/roshome")) == "/opt/roshome/log"
    assert ros_log_dir(_env(None, None)) == "/home/tester/.ros/log"
    assert ros_log_dir(_env("~/logs", None)) == "/home/tester/logs"


def test_ros_log_dir_reads_os_environ_by_default(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("ROS_LOG_DIR", "/tmp/somewhere")
    assert ros_log_dir() == "/tmp/somewhere"


def test_explicit_path_is_kept_as_given() -> None:
    for setting in ("events.jsonl", "logs/run1.jsonl", "/data/drive7/events.jsonl"):
        assert events_log_path(setting, _env("/var/log/ros", None)) == Path(setting)


def test_default_is_a_per_run_file_in_the_ros_log_directory() -> None:
    default = SPEC_BY_NAME["output.events_log"].default
    start = time.mktime((2031, 5, 6, 7, 8, 9, 0, 0, -1))  # local time, invented date
    a = events_log_path(default, _env("/var/log/ros", None), start=start, pid=4242)
    assert a == Path("/var/log/ros/kinematic_monitor_events_20310506-070809-4242.jsonl")
    # another process or another second: another file
    assert events_log_path(default, _env("/var/log/ros", None), start=start, pid=4243) != a
    assert events_log_path(default, _env("/var/log/ros", None), start=start + 1,
                           pid=4242) != a
    # not in the working directory
    assert a.is_absolute()


def test_placeholders_work_in_an_explicit_path_too() -> None:
    got = events_log_path("{ros_log_dir}/shuttle/{run}.jsonl", _env(None, "/opt/roshome"),
                          start=0.0, pid=7)
    assert got == Path("/opt/roshome/log/shuttle") / f"{run_id(0.0, 7)}.jsonl"


def test_run_id_defaults_to_now_and_this_process() -> None:
    before = time.time()
    name = events_log_path("{run}", {"HOME": HOME}).name
    stamp, pid = name.rsplit("-", 1)
    assert int(pid) == os.getpid()
    assert time.mktime(time.strptime(stamp, "%Y%m%d-%H%M%S")) >= int(before) - 1


_RCLPY_DIR = ("import json, rclpy.logging as l; "
              "print(json.dumps(str(l.get_logging_directory())))")


@pytest.mark.dds
@pytest.mark.parametrize(("log_dir", "ros_home"), CASES)
def test_rule_matches_rclpy(tmp_path: Path, log_dir: str | None, ros_home: str | None) -> None:
    # reference: rcl_logging_get_logging_directory (rcl_logging_interface) via rclpy
    pytest.importorskip("rclpy.logging")
    env = {k: v for k, v in os.environ.items() if k not in ("ROS_LOG_DIR", "ROS_HOME")}
    env.update(_env(log_dir, ros_home))
    env["HOME"] = str(tmp_path)
    out = subprocess.run([sys.executable, "-c", _RCLPY_DIR], env=env, capture_output=True,
                         text=True, timeout=60, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert ros_log_dir(env) == json.loads(out.stdout.strip().splitlines()[-1])
