"""Hostile parameter files: refused with a clear message; outputs never leave their directory.

What test_params.py already covers (not repeated here): wrong types and ranges per value,
non-finite numbers, a 100 000-entry joint list, YAML bombs, oversized/binary files. Added
here:
* every timeout negative, zero, huge or of the wrong type, from a file, names the parameter
  (schema ranges in params.SPECS; docs/interface.md section 2: "a bad value stops start-up with a
  message naming the parameter, the value and the allowed range");
* every spelling of a '..' path component in output.events_log is refused, POSIX and
  Windows separators alike (the path rule of params.SPECS: "a file path without '..'
  components");
* the same files through both front ends: ``kinematic-monitor replay`` exits 2 naming the
  parameter and writes nothing (docs/interface.md section 4), the node process exits 2 naming it
  without a Python traceback;
* ``replay --force`` into a directory holding a symlink under an output's name replaces
  the link and never writes through it (outputs.check_name / OutputDir contract).
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import pytest

from kinematic_monitor.apps import cli
from kinematic_monitor.config.files import load_params_file
from kinematic_monitor.config.schema import ParamError
from kinematic_monitor.config.validation import validate

REPO = Path(__file__).resolve().parents[2]
GEOM = "vehicle: {wheelbase: 2.7, cg_to_rear_axle: 1.35, wheel_radius: 0.31, track_width: 1.55}"


def _file(tmp: Path, body: str, name: str = "p.yaml") -> Path:
    p = tmp / name
    p.write_text("kinematic_monitor:\n  ros__parameters:\n    " + GEOM + "\n"
                 + textwrap.indent(textwrap.dedent(body), "    "), encoding="utf-8")
    return p


TIMEOUT_ROWS = [
    ("timeouts.joint_states", "-0.5"),
    ("timeouts.localization", "-1.0e+9"),
    ("timeouts.imu", "0.0"),
    ("timeouts.imu", "1.0e+300"),
    ("timeouts.joint_states", "'0.5'"),
    ("timeouts.localization", "[0.5, 0.5]"),
    ("timeouts.imu", "{a: 1}"),
    ("timeouts.joint_states", "true"),
    ("inputs.reorder_window", "-0.05"),
    ("output.diagnostics_period", "-1.0"),
]


@pytest.mark.parametrize(("name", "text"), TIMEOUT_ROWS)
def test_bad_timeouts_from_a_file_name_the_parameter(tmp_path: Path, name: str,
                                                     text: str) -> None:
    p = _file(tmp_path, f"{name}: {text}\n")
    with pytest.raises(ParamError) as err:
        validate(load_params_file(p))
    # a mapping is read as nested names (ROS 2 file form): refused as unknown 'timeouts.imu.a'
    assert err.value.name == name or err.value.name.startswith(name + ".")
    msg = str(err.value)
    assert err.value.name in msg and ("allowed" in msg or "unknown" in msg), msg


DOTDOT = ["..", "../x.jsonl", "logs/../../x.jsonl", "logs/..", "./../x.jsonl",
          "..\\x.jsonl", "logs\\..\\..\\x.jsonl", "/var/log/../../etc/x.jsonl", "a/b/../../.."]


@pytest.mark.parametrize("path", DOTDOT)
def test_events_log_with_dotdot_refused(tmp_path: Path, path: str) -> None:
    p = _file(tmp_path, f"output: {{events_log: '{path}'}}\n")
    with pytest.raises(ParamError) as err:
        validate(load_params_file(p))
    assert err.value.name == "output.events_log"
    assert "'..'" in str(err.value)


@pytest.mark.parametrize("path", ["events.jsonl", "logs/events.jsonl", "a..b.jsonl",
                                  "..hidden.jsonl"])
def test_plain_relative_log_paths_accepted(tmp_path: Path, path: str) -> None:
    # '..' only as a whole path component climbs out; inside a name it is harmless
    cfg = validate(load_params_file(_file(tmp_path, f"output: {{events_log: '{path}'}}\n")))
    assert cfg.output.events_log == path


@pytest.mark.parametrize(("name", "text"), [
    ("output.events_log", "'" + "x" * 5000 + ".jsonl'"),
    ("output.events_log", '"a\\0b.jsonl"'),
    ("inputs.joint_states.rear_wheel_joints", "[" + ", ".join(["w"] * 20000) + "]"),
    ("checks.nis_window", "123456789012345678901234567890"),
    ("checks.nis_window", "-3"),
])
def test_huge_or_odd_values_refused_briefly(tmp_path: Path, name: str, text: str) -> None:
    p = _file(tmp_path, f"{name}: {text}\n")
    with pytest.raises(ParamError) as err:
        validate(load_params_file(p))
    assert err.value.name == name
    assert len(str(err.value)) < 600  # the bad value is not echoed in full


# --- through the command line -----------------------------------------------------------------

HOSTILE_FILES = [
    ("output.events_log", "output: {events_log: '../../escape.jsonl'}\n"),
    ("timeouts.imu", "timeouts: {imu: -2.0}\n"),
    ("vehicle.wheelbase", "vehicle.wheelbase: 'long'\n"),
    ("checks.min_speed", "checks: {min_speed: [1.0, 2.0]}\n"),
]


def _bag(tmp: Path) -> Path:
    from rosbags.rosbag2 import StoragePlugin

    from fixtures.bags import write_bag

    return write_bag(tmp / "bag", StoragePlugin.SQLITE3, seconds=1.0)


@pytest.mark.parametrize(("name", "body"), HOSTILE_FILES, ids=[r[0] for r in HOSTILE_FILES])
def test_replay_refuses_hostile_file_and_writes_nothing(
        tmp_path: Path, name: str, body: str, capsys: pytest.CaptureFixture[str]) -> None:
    if name == "vehicle.wheelbase":  # replace the geometry's wheelbase, not add a second
        p = tmp_path / "p.yaml"
        p.write_text("kinematic_monitor:\n  ros__parameters:\n    vehicle: {wheelbase: long, "
                     "cg_to_rear_axle: 1.35, wheel_radius: 0.31, track_width: 1.55}\n")
    else:
        p = _file(tmp_path, body)
    out = tmp_path / "out"
    rc = cli.main(["replay", str(_bag(tmp_path)), "--params", str(p), "--out", str(out)])
    err = capsys.readouterr().err
    assert rc == 2, err  # docs/interface.md section 4: 2 = bad parameters
    assert name in err and "Traceback" not in err, err
    assert not out.exists() or not any(out.iterdir())
    assert not (tmp_path.parent / "escape.jsonl").exists()


def test_replay_force_never_writes_through_a_symlink(tmp_path: Path) -> None:
    outside = tmp_path / "outside.json"
    outside.write_text("precious\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / "events.json").symlink_to(outside)
    (out / "notes.txt").write_text("kept\n")
    p = _file(tmp_path, "")
    rc = cli.main(["replay", str(_bag(tmp_path)), "--params", str(p), "--out", str(out),
                   "--force", "--no-report"])
    assert rc == 0
    assert outside.read_text() == "precious\n"
    assert not (out / "events.json").is_symlink()
    assert (out / "events.json").read_text().lstrip().startswith("{")
    assert (out / "notes.txt").read_text() == "kept\n"
    for f in out.rglob("*"):  # everything written is inside the chosen directory
        assert f.resolve().is_relative_to(out.resolve()), f


# --- through the node process (rclpy parses the file first) ------------------------------------

def _node(params: Path, cwd: Path) -> subprocess.CompletedProcess[str]:
    from dds_helpers import new_domain_id, ros_env

    env = ros_env(new_domain_id())
    return subprocess.run(
        [sys.executable, "-m", "kinematic_monitor.ros.node", "--ros-args", "--params-file",
         str(params)], env=env, cwd=cwd, capture_output=True, text=True, timeout=30)


NODE_ROWS: list[tuple[str, str, Any]] = [
    ("output.events_log", "output: {events_log: '../escape.jsonl'}\n", "'..'"),
    ("timeouts.localization", "timeouts: {localization: -0.5}\n", "-0.5"),
    ("checks.nis_window", "checks: {nis_window: 'many'}\n", "many"),
    ("inputs.joint_states.steering_joints",
     "inputs: {joint_states: {steering_joints: [" + ", ".join(["s"] * 5000) + "]}}\n",
     "exactly 2"),
]


@pytest.mark.dds
@pytest.mark.parametrize(("name", "body", "words"), NODE_ROWS, ids=[r[0] for r in NODE_ROWS])
def test_node_refuses_hostile_file_with_exit_2(tmp_path: Path, name: str, body: str,
                                               words: str) -> None:
    pytest.importorskip("rclpy")
    work = tmp_path / "work"
    work.mkdir()
    res = _node(_file(tmp_path, body), work)
    out = res.stdout + res.stderr
    assert res.returncode == 2, out
    assert name in out and words in out, out[-2000:]
    assert "Traceback" not in out, out[-2000:]
    assert len(out) < 20000  # a huge value is not echoed in full
    assert not (tmp_path / "escape.jsonl").exists() and not any(work.iterdir())


@pytest.mark.dds
def test_node_relative_log_stays_in_its_working_directory(tmp_path: Path) -> None:
    # the node writes its log relative to the directory it was started in (the launch
    # file's working directory) and nowhere else
    pytest.importorskip("rclpy")
    from dds_helpers import Proc, new_domain_id, ros_env

    work = tmp_path / "work"
    work.mkdir()
    p = _file(tmp_path, "output: {events_log: 'km_events.jsonl'}\n")
    proc = Proc([sys.executable, "-m", "kinematic_monitor.ros.node", "--ros-args",
                 "--params-file", str(p)], ros_env(new_domain_id()), work, name="node")
    try:
        import time

        deadline = time.monotonic() + 20
        while time.monotonic() < deadline and "running (" not in proc.output():
            time.sleep(0.05)
        assert "running (" in proc.output(), proc.output()
    finally:
        assert proc.stop(grace=2.0) == 0
    made = {f.name for f in work.iterdir()}
    assert "km_events.jsonl" in made
    assert not (tmp_path / "km_events.jsonl").exists()
    assert os.path.getsize(work / "km_events.jsonl") == 0  # nothing happened: no event
