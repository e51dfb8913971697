"""``kinematic-monitor demo``: offline quickly, live over DDS, clean errors, nothing left running.

What is checked and against what:
* the outputs the interface contract names (docs/interface.md section 4: events.json with schema
  ``kinematic_monitor.events/1`` and report.html in the output folder; exit codes 0 / 2);
* the demo drive's ice patch gives a lateral_slip event near the simulator's truth onset
  (detection_eval's matching window: start within [onset - 0.5 s, end + 1.0 s]);
* the live/offline comparison rule (issue 7: same kinds, start and detected_at within
  0.2 s), on worked examples computed by hand;
* Ctrl-C / the end of the demo leaves no process of the run behind (project brief).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from kinematic_monitor.apps import cli
from kinematic_monitor.apps.demo import CAUTION, compare_events, events_from_log

EPOCH = 1_800_000_000.0  # sim.sensors.DEFAULT_EPOCH_NS, header stamp at simulated time 0


def _ev(kind: str, start: float, detected: float, level: str = "ERROR") -> dict[str, object]:
    return {"kind": kind, "start": start, "detected_at": detected, "end": start + 1.0,
            "level": level, "summary": ""}


# --- comparison and log reading (worked examples by hand) ----------------------------------

def test_compare_events_agree_within_tolerance() -> None:
    live = [_ev("lateral_slip", 10.00, 10.30), _ev("localization_fault", 27.0, 27.0)]
    off = [_ev("localization_fault", 27.05, 27.1), _ev("lateral_slip", 10.19, 10.11)]
    assert compare_events(live, off, tolerance=0.2) == []


def test_compare_events_reports_time_and_count_differences() -> None:
    live = [_ev("lateral_slip", 10.00, 10.30)]
    off = [_ev("lateral_slip", 10.00, 10.55)]  # detected 0.25 s apart: beyond 0.2 s
    diffs = compare_events(live, off, tolerance=0.2)
    assert len(diffs) == 1 and "detected_at" in diffs[0] and "-0.250" in diffs[0]
    diffs = compare_events(live + [_ev("input_stale", 8.6, 8.7)], off[:0] + live)
    assert diffs == ["input_stale: 1 live vs 0 offline (live starts [8.60], offline starts [])"]


def test_events_from_log_merges_start_and_end_and_keeps_open_events() -> None:
    start = {"type": "start", **_ev("lateral_slip", 5.0, 5.2), "end": None}
    end = {"type": "end", **_ev("lateral_slip", 5.0, 5.2)}
    still_open = {"type": "start", **_ev("input_stale", 9.0, 9.5), "end": None}
    evs = events_from_log([start, still_open, end])
    assert [(e["kind"], e["end"]) for e in evs] == [("lateral_slip", 6.0), ("input_stale", None)]
    assert all("type" not in e for e in evs)


# --- the subcommand, offline -------------------------------------------------------------

def test_offline_demo_writes_report_and_finds_the_ice(tmp_path: Path,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "demo"
    code = cli.main(["demo", "--offline", "--out", str(out), "--duration", "20"])
    text = capsys.readouterr().out
    assert code == 0, text
    assert text.splitlines()[0] == CAUTION
    assert "summary of the offline replay" in text
    doc = json.loads((out / "report" / "events.json").read_text())
    assert doc["schema"] == "kinematic_monitor.events/1"  # docs/interface.md section 4
    assert (out / "report" / "report.html").stat().st_size > 0
    truth = json.loads((out / "drive" / "truth.json").read_text())
    ice = [t for t in truth["truth"] if t["kind"] == "lateral_slip"
           and t["detail"].get("min_mu", 1.0) < 0.1]
    assert ice, truth["truth"]
    hits = [e for e in doc["events"] if e["kind"] == "lateral_slip"
            and ice[0]["start"] - 0.5 <= e["start"] <= ice[0]["end"] + 1.0]
    assert hits, doc["events"]
    assert "truth lateral_slip: 1/1 detected" in text


def test_existing_output_needs_force_and_foreign_files_are_refused(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "demo"
    (out / "drive").mkdir(parents=True)
    assert cli.main(["demo", "--offline", "--out", str(out), "--duration", "6"]) == 2
    assert "--force" in capsys.readouterr().err
    (out / "thesis.txt").write_text("mine")
    assert cli.main(["demo", "--offline", "--out", str(out), "--force",
                     "--duration", "6"]) == 2
    assert "thesis.txt" in capsys.readouterr().err
    assert (out / "thesis.txt").read_text() == "mine"


@pytest.mark.parametrize(("option", "value"), [("--duration", "0"), ("--duration", "nan"),
                                               ("--rate", "-1"), ("--domain-id", "300")])
def test_bad_option_is_named(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                             option: str, value: str) -> None:
    code = cli.main(["demo", "--offline", "--out", str(tmp_path / "d"), option, value])
    assert code == 2
    assert option in capsys.readouterr().err


# --- the subcommand, live over DDS --------------------------------------------------------

def _processes_mentioning(text: str) -> list[str]:
    found = []
    for pid in os.listdir("/proc"):
        if not pid.isdigit() or int(pid) == os.getpid():
            continue
        try:
            cmd = Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
        except OSError:
            continue
        if text in cmd:
            found.append(f"{pid}: {cmd}")
    return found


def _demo_argv(out: Path, domain: int) -> list[str]:
    return [sys.executable, "-m", "kinematic_monitor", "demo", "--out", str(out),
            "--duration", "16", "--rate", "2", "--domain-id", str(domain)]


@pytest.mark.dds
def test_live_demo_prints_operator_lines_and_summary_and_cleans_up(tmp_path: Path) -> None:
    pytest.importorskip("rclpy")
    from dds_helpers import new_domain_id, ros_env

    out = tmp_path / "live"
    domain = new_domain_id()
    proc = subprocess.run(_demo_argv(out, domain), env=ros_env(domain),
                          capture_output=True, text=True, timeout=120)
    text = proc.stdout
    assert proc.returncode == 0, text + proc.stderr
    assert "  LIVE | [" in text and "lateral_slip" in text, text
    assert "summary of the live run:" in text
    assert "live and offline events" in text
    assert (out / "report" / "report.html").exists()
    assert (out / "live_events.jsonl").read_text().strip()
    assert _processes_mentioning(str(out)) == []


@pytest.mark.dds
def test_live_demo_interrupted_leaves_nothing_running(tmp_path: Path) -> None:
    pytest.importorskip("rclpy")
    from dds_helpers import new_domain_id, ros_env

    out = tmp_path / "live"
    domain = new_domain_id()
    p = subprocess.Popen(_demo_argv(out, domain), env=ros_env(domain),
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        deadline = time.monotonic() + 60
        assert p.stdout is not None
        for line in p.stdout:  # wait until the drive plays, then press Ctrl-C
            if "playing the drive" in line or time.monotonic() > deadline:
                break
        time.sleep(1.0)
        p.send_signal(signal.SIGINT)
        assert p.wait(timeout=20) == 130  # cli: interrupted
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    assert _processes_mentioning(str(out)) == []


# --- the player's errors (no DDS traffic: they happen before any node is made) -------------

@pytest.mark.dds  # rclpy in this process: run under every tested ROS release
def test_player_names_a_missing_bag_unknown_topic_and_bad_type(tmp_path: Path) -> None:
    pytest.importorskip("rclpy")
    from kinematic_monitor.ros.player import PlayerError, message_class, play

    with pytest.raises(PlayerError, match="does not exist"):
        play(tmp_path / "nope")
    with pytest.raises(PlayerError, match="rate"):
        play(tmp_path / "nope", rate=0.0)
    from sensor_msgs.msg import Imu

    # type names as rosbag2 stores them (pkg/msg/Type) -> the message package's own class
    assert message_class("sensor_msgs/msg/Imu") is Imu
    with pytest.raises(PlayerError, match="not_a_pkg/msg/Foo"):
        message_class("not_a_pkg/msg/Foo")
    from kinematic_monitor.apps.demo import simulate_drive

    sim = simulate_drive(tmp_path / "bag", duration=6.0)
    with pytest.raises(PlayerError, match="/no/such/topic"):
        play(sim.bag, topics=["/no/such/topic"])
