"""`kinematic-monitor replay`: outputs, exit codes and bad input (docs/interface.md section 4).

Bags come from the project's simulator (short drives, written once per session) or are
written directly with rosbags for malformed cases. The contract checked here is
docs/interface.md section 4 (command, exit codes, events.json schema).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import shutil
from pathlib import Path
from typing import Any

import pytest

from kinematic_monitor.apps import cli, replay
from kinematic_monitor.io import readahead
from kinematic_monitor.io.timeseries import DEFAULT_MIN_INTERVAL, TimeseriesWriter, read_timeseries

# docs/interface.md section 4: the exact keys of an events.json entry and the allowed values
EVENT_KEYS = {"start", "end", "detected_at", "kind", "level", "position", "peak", "summary"}
KINDS = {"lateral_slip", "longitudinal_slip", "localization_fault", "calibration_bias",
         "input_stale"}


@pytest.fixture(autouse=True)
def _replay_registered(monkeypatch: pytest.MonkeyPatch) -> None:
    # until the line is in cli.SUBCOMMANDS; a no-op afterwards
    monkeypatch.setitem(cli.SUBCOMMANDS, "replay", "kinematic_monitor.apps.replay")
    monkeypatch.setenv("CI", "true")


def _simulate(out: Path, faults: list[str], duration: float = 8.0,
              storage: str = "sqlite3") -> Path:
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.faults import parse_fault
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS["skidpad_circle"](duration=duration), duration=duration, seed=3)
    write_simulation(out, trace, seed=3, storage=storage,
                     faults=[parse_fault(f) for f in faults])
    return out


@pytest.fixture(scope="session")
def jump_bag(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """8 s circle at constant speed; localisation steps 4 m sideways at 5 s (undeclared)."""
    return _simulate(tmp_path_factory.mktemp("bags") / "jump",
                     ["loc-jump:start=5,dx=0,dy=4,duration=1.5"])


def _main(*argv: str) -> int:
    return cli.main(["replay", *argv])


def _replay(bag: Path, out: Path, *extra: str) -> int:
    return _main(str(bag), "--params", str(bag / "params.yaml"), "--out", str(out), *extra)


# ---------------------------------------------------------------------------------------
# the whole command


def test_replay_writes_contract_outputs(jump_bag: Path, tmp_path: Path,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "out"
    rc = _replay(jump_bag, out, "--json-summary")
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    assert sorted(os.listdir(out)) == ["events.csv", "events.json", "report.html",
                                       "timeseries.csv"]
    doc = json.loads((out / "events.json").read_text())
    # docs/interface.md section 4: schema name, source = the bag path, event keys and value sets
    assert doc["schema"] == "kinematic_monitor.events/1"
    assert doc["source"] == str(jump_bag)
    assert set(doc) == {"schema", "source", "events"}
    assert doc["events"], "an undeclared 4 m localisation jump must raise an event"
    for ev in doc["events"]:
        assert set(ev) == EVENT_KEYS
        assert ev["kind"] in KINDS and ev["level"] in ("WARN", "ERROR")
        assert ev["start"] <= ev["detected_at"] and ev["start"] <= ev["end"]
        assert len(ev["position"]) == 2
    assert "localization_fault" in {ev["kind"] for ev in doc["events"]}
    rows = list(csv.DictReader(io.StringIO((out / "events.csv").read_text())))
    assert len(rows) == len(doc["events"])
    # --json-summary: exactly one line of JSON on stdout, agreeing with events.json
    lines = [ln for ln in captured.out.splitlines() if ln.strip()]
    assert len(lines) == 1
    summary = json.loads(lines[0])
    assert summary["events"]["total"] == len(doc["events"])
    by_level = summary["events"]["by_level"]
    assert by_level["WARN"] + by_level["ERROR"] == len(doc["events"])
    assert summary["duration_s"] == pytest.approx(8.0, abs=0.3)
    # distance of a circle drive ramping 0 -> 10 m/s in 6 s then holding: 30 m + 20 m
    # (kinematics of uniform acceleration, s = v t / 2), within the simulated speed tracking
    assert summary["distance_m"] == pytest.approx(50.0, rel=0.2)
    # the node's reorder buffer (50 ms) drops simulated GNSS fixes logged 50 ms + jitter late
    # (GNSS holds no other input back, core/ordering.py); nothing else is lost
    assert all("too late" in line and "(dropped; /gnss/fix:" in line
               for line in summary["lost_data"]), summary["lost_data"]
    assert summary["exit_code"] == 0
    # time series: header columns and a row every DEFAULT_MIN_INTERVAL of stamp time
    series = read_timeseries(out / "timeseries.csv")
    assert len(series) == pytest.approx(8.0 / DEFAULT_MIN_INTERVAL, rel=0.05)
    assert series.residual_channels and series.checks
    html = (out / "report.html").read_text()
    assert html.count("class='event-card") == len(doc["events"])


@pytest.mark.parametrize(("fail_on", "expected"), [("never", 0), ("warn", 1), ("error", 1)])
def test_fail_on_exit_codes(jump_bag: Path, tmp_path: Path, fail_on: str, expected: int) -> None:
    # docs/interface.md section 4: 1 when the --fail-on condition was met; the jump bag gives an
    # ERROR event (checked in the test above), which meets both 'warn' and 'error'
    assert _replay(jump_bag, tmp_path / "o", "--no-report", "--fail-on", fail_on) == expected
    assert not (tmp_path / "o" / "report.html").exists()


@pytest.mark.parametrize(("levels", "fail_on", "met"), [
    ([], "warn", False), (["WARN"], "warn", True), (["WARN"], "error", False),
    (["ERROR"], "error", True), (["ERROR", "WARN"], "never", False),
])
def test_fail_on_rule(levels: list[str], fail_on: str, met: bool) -> None:
    # docs/interface.md section 4: warn -> any WARN or ERROR event, error -> any ERROR event
    assert replay.fail_on_met([{"level": lv} for lv in levels], fail_on) is met


def test_replay_does_not_change_the_core_result(jump_bag: Path, tmp_path: Path) -> None:
    # docs/interface.md section 4: replay must give the events the core gives on the same samples
    # (reading statuses and predictions for the time series may not change decisions)
    from kinematic_monitor.config.files import load_config
    from kinematic_monitor.core.monitor import Monitor
    from kinematic_monitor.io.bag import open_bag
    from kinematic_monitor.io.event_files import events_to_json

    config = load_config(jump_bag / "params.yaml")
    mon = Monitor(config)
    last = math.nan
    with open_bag(jump_bag, config) as src:
        for s in src.iter_samples():
            mon.process(s)
            last = s.stamp
    mon.flush(last)
    direct = events_to_json(str(jump_bag), mon.events)
    assert _replay(jump_bag, tmp_path / "o", "--no-report") == 0
    assert json.loads((tmp_path / "o" / "events.json").read_text()) == direct


@pytest.mark.skipif(not readahead.available(),
                    reason="read-ahead needs fork and two usable cores")
def test_read_ahead_gives_byte_identical_outputs(jump_bag: Path, tmp_path: Path) -> None:
    # --read-ahead only moves the reading into a second process: every output file and
    # the summary stay the same byte for byte
    summaries = {}
    for mode in ("off", "on"):
        out = tmp_path / mode
        assert _replay(jump_bag, out, "--no-report", "--read-ahead", mode) == 0
        summaries[mode] = {p.name: p.read_bytes() for p in sorted(out.iterdir())}
    assert summaries["on"] == summaries["off"]
    assert set(summaries["on"]) == {"events.json", "events.csv", "timeseries.csv"}


@pytest.mark.parametrize("storage", ["sqlite3", "mcap"])
def test_write_bag_adds_node_outputs(jump_bag: Path, tmp_path_factory: pytest.TempPathFactory,
                                     tmp_path: Path, storage: str) -> None:
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore

    bag = jump_bag if storage == "sqlite3" else _simulate(
        tmp_path_factory.mktemp("mcap") / "jump", ["loc-jump:start=5,dx=0,dy=4,duration=1.5"],
        storage="mcap")
    out = tmp_path / "o"
    assert _replay(bag, out, "--no-report", "--write-bag") == 0
    n_events = len(json.loads((out / "events.json").read_text())["events"])
    with Reader(bag) as r:
        original = {c.topic: (c.msgtype, c.msgcount) for c in r.connections}
    annotated = out / "annotated_bag"
    # same storage as the input (the file extension names the storage plugin)
    assert list(annotated.glob("*.mcap" if storage == "mcap" else "*.db3"))
    store = get_typestore(Stores.ROS2_JAZZY)
    with Reader(annotated) as r:
        topics = {c.topic: (c.msgtype, c.msgcount) for c in r.connections}
        for topic, value in original.items():
            assert topics[topic] == value  # every input message copied
        # docs/interface.md section 3: output topics and types
        assert topics["/diagnostics"][0] == "diagnostic_msgs/msg/DiagnosticArray"
        assert topics["/kinematic_monitor/prediction"][0] == "nav_msgs/msg/Odometry"
        assert topics["/kinematic_monitor/events"] == ("diagnostic_msgs/msg/DiagnosticStatus",
                                                       2 * n_events)  # a start and an end
        diag_times = []
        conns = [c for c in r.connections if c.topic == "/diagnostics"]
        for c, ts, raw in r.messages(connections=conns):
            msg = store.deserialize_cdr(raw, c.msgtype)
            diag_times.append(ts * 1e-9)
            for st in msg.status:
                # REP 107: levels OK..STALE; names 'component: ...' with our prefix
                assert 0 <= st.level <= 3
                assert st.name.startswith("kinematic_monitor: ")
        # docs/interface.md section 3: /diagnostics at >= 1 Hz (slack: one IMU sample, 5 ms)
        assert max(b - a for a, b in zip(diag_times, diag_times[1:], strict=False)) <= 1.006
        log_times = [ts for _, ts, _ in r.messages()]
        assert log_times == sorted(log_times)


# ---------------------------------------------------------------------------------------
# output directory


def test_non_empty_out_dir_refused_then_forced(jump_bag: Path, tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "o"
    out.mkdir()
    (out / "report.html").write_text("stale")
    (out / "mine.txt").write_text("keep")
    assert _replay(jump_bag, out, "--no-report") == 2
    err = capsys.readouterr().err
    assert str(out) in err and "--force" in err
    assert (out / "report.html").read_text() == "stale"
    assert _replay(jump_bag, out, "--no-report", "--force") == 0
    # the stale report of an earlier run is gone: it must not pass for this run's
    assert sorted(os.listdir(out)) == ["events.csv", "events.json", "mine.txt",
                                       "timeseries.csv"]


def test_interrupted_run_leaves_no_outputs(jump_bag: Path, tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    from kinematic_monitor.core import monitor as monitor_module

    real = monitor_module.Monitor.process
    calls = {"n": 0}

    def interrupted(self: Any, sample: Any) -> None:
        calls["n"] += 1
        if calls["n"] > 2000:
            raise KeyboardInterrupt
        real(self, sample)

    monkeypatch.setattr(monitor_module.Monitor, "process", interrupted)
    out = tmp_path / "o"
    assert _replay(jump_bag, out) == 130  # cli.main: interrupted
    assert os.listdir(out) == []  # neither final names nor temporary files remain


# ---------------------------------------------------------------------------------------
# bad input -> exit 2 with a message naming the problem


def test_bad_parameter_named(jump_bag: Path, tmp_path: Path,
                             capsys: pytest.CaptureFixture[str]) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text((jump_bag / "params.yaml").read_text().replace("wheelbase: 2.7",
                                                                   "wheelbase: -1.0"))
    assert "wheelbase: -1.0" in bad.read_text()
    rc = _main(str(jump_bag), "--params", str(bad), "--out", str(tmp_path / "o"))
    assert rc == 2
    assert "vehicle.wheelbase" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()  # nothing created for a bad run


def test_missing_params_file(jump_bag: Path, tmp_path: Path,
                             capsys: pytest.CaptureFixture[str]) -> None:
    rc = _main(str(jump_bag), "--params", str(tmp_path / "nope.yaml"), "--out",
               str(tmp_path / "o"))
    assert rc == 2
    assert "nope.yaml" in capsys.readouterr().err


def test_missing_bag(jump_bag: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc = _main(str(tmp_path / "no_bag"), "--params", str(jump_bag / "params.yaml"), "--out",
               str(tmp_path / "o"))
    assert rc == 2
    assert "no_bag" in capsys.readouterr().err


def test_missing_topic_named(jump_bag: Path, tmp_path: Path,
                            capsys: pytest.CaptureFixture[str]) -> None:
    from rosbags.rosbag2 import Writer
    from rosbags.typesys import Stores, get_typestore

    store = get_typestore(Stores.ROS2_HUMBLE)
    Imu = store.types["sensor_msgs/msg/Imu"]  # noqa: N806 - a message class
    bag = tmp_path / "imu_only"
    with Writer(bag, version=9) as w:
        conn = w.add_connection("/imu/data", Imu.__msgtype__, typestore=store)
        t = store.types
        hdr = t["std_msgs/msg/Header"](stamp=t["builtin_interfaces/msg/Time"](sec=5, nanosec=0),
                                       frame_id="base_link")
        v3 = t["geometry_msgs/msg/Vector3"]
        q = t["geometry_msgs/msg/Quaternion"](x=0.0, y=0.0, z=0.0, w=1.0)
        import numpy as np

        msg = Imu(header=hdr, orientation=q, orientation_covariance=np.zeros(9),
                  angular_velocity=v3(x=0.0, y=0.0, z=0.0),
                  angular_velocity_covariance=np.zeros(9),
                  linear_acceleration=v3(x=0.0, y=0.0, z=0.0),
                  linear_acceleration_covariance=np.zeros(9))
        w.write(conn, 5_000_000_000, store.serialize_cdr(msg, Imu.__msgtype__))
    rc = _main(str(bag), "--params", str(jump_bag / "params.yaml"), "--out",
               str(tmp_path / "o"))
    assert rc == 2
    err = capsys.readouterr().err
    assert "/joint_states" in err or "/localization/odom" in err


def test_truncated_bag_reports_lost_data(jump_bag: Path, tmp_path: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    bag = tmp_path / "cut"
    shutil.copytree(jump_bag, bag)
    db = next(bag.glob("*.db3"))
    data = db.read_bytes()
    db.write_bytes(data[: len(data) // 2])
    rc = _replay(bag, tmp_path / "o", "--json-summary")
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    summary = json.loads(captured.out.strip().splitlines()[-1])
    assert summary["lost_data"], "a bag cut in half must report what was lost"
    assert "damaged" in captured.err
    html = (tmp_path / "o" / "report.html").read_text()
    assert "bag damaged" in html


# ---------------------------------------------------------------------------------------
# helpers


def test_progress_bar_quiet_under_ci(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("CI", "true")
    assert replay.progress_wanted() is False
    monkeypatch.delenv("CI")
    # under pytest stderr is captured, not a terminal
    assert replay.progress_wanted() is False


def test_bicycle_steer_follows_ackermann() -> None:
    # docs/interface.md section 1: cot(d) = (cot(dl) + cot(dr)) / 2 for the bicycle-equivalent
    # angle; the time series shows the very angle the monitor used (model.ackermann_to_bicycle)
    from kinematic_monitor.core.samples import ChassisSample

    dl, dr = 0.20, 0.17
    expected = math.atan(1.0 / (0.5 * (1.0 / math.tan(dl) + 1.0 / math.tan(dr))))
    got = replay._bicycle_steer(ChassisSample(1.0, steer_left=dl, steer_right=dr))
    assert got == pytest.approx(expected, rel=1e-12)
    assert replay._bicycle_steer(ChassisSample(1.0, steer_left=0.0, steer_right=0.0)) == 0.0
    # toe noise around straight ahead (opposite signs): the monitor takes 0, and so does the
    # time series (it used to show the plain mean)
    assert replay._bicycle_steer(ChassisSample(1.0, steer_left=0.004, steer_right=-0.002)) == 0.0


def test_timeseries_keeps_peaks_and_streams(tmp_path: Path) -> None:
    path = tmp_path / "ts.csv"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = TimeseriesWriter(fh, ["r"], ["c"], min_interval=0.1)
        t0 = 1.8e9  # large stamps: 0.01 s steps are not exact in binary floating point
        for k in range(1000):  # 10 s at 100 Hz
            spike = -5.0 if k == 437 else 0.01 * (k % 7)
            w.add(t0 + 0.01 * k, x=float(k), residuals={"r": spike},
                  levels={"c": 2 if k == 512 else 0})
            if k == 500:
                fh.flush()
                assert path.stat().st_size > 1000  # rows are on disk before the end
        w.add(math.nan)
        w.close()
    assert w.ignored == 1
    s = read_timeseries(path)
    assert len(s) == 100  # one row per 0.1 s window
    r = s["res:r"]
    # the spike survives decimation with its sign; the level-2 moment too
    assert r.min() == -5.0
    assert s["level:c"].max() == 2.0 and s["level_max"].max() == 2.0
    assert s["x"][-1] == 999.0  # pose is the latest of its window


def test_timeseries_row_text_format(tmp_path: Path) -> None:
    # time with 6 decimals, other values with 6 significant digits, non-finite as "nan",
    # levels and level_max as integers (the CSV the report and other tools read back)
    path = tmp_path / "ts.csv"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = TimeseriesWriter(fh, ["a", "b", "c"], ["k"], min_interval=0.1)
        w.add(1.8e9 + 0.25, x=1234.56789, y=-math.inf, yaw=math.inf, speed=1e-7,
              residuals={"a": -0.000123456789, "b": math.inf, "c": math.nan}, levels={"k": 3})
        w.close()
    lines = path.read_text().splitlines()
    assert lines[0] == ("time,x,y,yaw,speed,steering,accel,res:a,res:b,res:c,level:k,"
                        "level_max")
    assert lines[1] == ("1800000000.250000,1234.57,nan,nan,1e-07,nan,nan,-0.000123457,nan,nan,"
                        "3,3")
