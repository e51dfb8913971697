"""End-to-end tests of ``kinematic-monitor calibrate`` on simulated rosbag2 drives.

The acceptance case of the calibration issue: a 5-minute gentle drive on our handling loop
with the steering reading 1.0 deg high and the wheel radius in the file 2 % small must give
a steering offset of -1.0 deg within +-0.05 deg and a wheel-speed scale of 1/0.98 within
+-0.2 % (the simulator injects the faults as measured = true + 1 deg and
measured wheel speed = 0.98 * true; the parameter file's convention is
delta_true = delta_measured + steering_offset, effective radius = radius * scale).
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

import pytest
import yaml

from kinematic_monitor.apps import calibrate as calcmd
from kinematic_monitor.apps.cli import UsageError
from kinematic_monitor.config import files


def _run(argv: list[str]) -> int:
    parser = argparse.ArgumentParser()
    calcmd.add_arguments(parser)
    return calcmd.run(parser.parse_args(argv))


GYRO_BIAS = 0.004  # [rad/s] 0.23 deg/s, the simulator's ImuConfig.gyro_bias


def _simulate(out: Path, duration: float, faults: list[object], seed: int = 1) -> Path:
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate
    from kinematic_monitor.sim.sensors import SensorConfig

    cfg = SensorConfig()
    cfg.gnss.rate_hz = 0.0
    cfg.imu.rate_hz = 50.0  # fewer messages: the calibration uses the localisation twist
    cfg.imu.gyro_bias = GYRO_BIAS
    trace = simulate(SCENARIOS["mixed_loop"](v_max=15.0, a_lat=2.0), duration=duration,
                     seed=seed)
    write_simulation(out, trace, seed=seed, config=cfg, faults=faults)  # type: ignore[arg-type]
    return out


@pytest.fixture(scope="module")
def gentle_bag(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from kinematic_monitor.sim.faults import SteeringOffset, WheelRadiusError

    root = tmp_path_factory.mktemp("cal")
    return _simulate(root / "gentle", 300.0,
                     [SteeringOffset(offset=math.radians(1.0)), WheelRadiusError(error=-0.02)])


def test_five_minute_drive_recovers_offset_and_scale(gentle_bag: Path, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "new.yaml"
    rep = tmp_path / "rep"
    rc = _run([str(gentle_bag), "--params", str(gentle_bag / "params.yaml"), "--out", str(out),
               "--report", str(rep)])
    assert rc == 0
    cfg = files.load_config(out)  # the written file validates against the node's schema
    assert abs(math.degrees(cfg.vehicle.steering_offset) - (-1.0)) < 0.05
    assert abs(cfg.vehicle.wheel_speed_scale * 0.98 - 1.0) < 0.002
    text = out.read_text()
    # each calibrated value carries its uncertainty and the data used, as a YAML comment
    line = next(ln for ln in text.splitlines() if "steering_offset:" in ln)
    assert "# calibrated +-" in line and "s usable driving" in line
    k_line = next(ln for ln in text.splitlines() if "understeer_gradient:" in ln)
    assert "deg/g" in k_line
    doc = yaml.safe_load(text)
    assert "kinematic_monitor" in doc
    report = (rep / "calibration_report.txt").read_text()
    assert "before" in report and "after" in report
    figures = json.loads((rep / "calibration.json").read_text())
    assert figures["usable_seconds"] >= 60.0
    yaw = figures["residuals"][0]
    assert abs(yaw["mean_after"]) < abs(yaw["mean_before"])
    assert "wrote" in capsys.readouterr().out


def test_out_in_missing_folders_creates_them(gentle_bag: Path, tmp_path: Path) -> None:
    out = tmp_path / "a" / "b" / "calibrated_params.yaml"
    assert _run([str(gentle_bag), "--params", str(gentle_bag / "params.yaml"), "--out",
                 str(out)]) == 0
    files.load_config(out)  # written and valid


def test_report_only_estimates_reported_not_written(gentle_bag: Path, tmp_path: Path) -> None:
    out = tmp_path / "new.yaml"
    rep = tmp_path / "rep"
    _run([str(gentle_bag), "--params", str(gentle_bag / "params.yaml"), "--out", str(out),
          "--report", str(rep)])
    figures = json.loads((rep / "calibration.json").read_text())
    gyro = figures["estimates"]["imu_gyro_bias"]
    assert gyro["parameter"] is False and gyro["unit"] == "rad/s" and gyro["observable"]
    sigma = max(gyro["se_fit"], gyro["se_bootstrap"])
    assert abs(gyro["value"] - GYRO_BIAS) < 4 * sigma
    for name in ("imu_gyro_bias_drift", "imu_yaw_misalignment", "rear_left_wheel_speed_scale",
                 "rear_right_wheel_speed_scale"):
        e = figures["estimates"][name]
        assert e["parameter"] is False and e["se_fit"] is not None, name
    assert figures["estimates"]["vehicle.steering_offset"]["parameter"] is True
    report = (rep / "calibration_report.txt").read_text()
    assert "report-only estimates (no parameter yet" in report
    line = next(ln for ln in report.splitlines() if ln.startswith("  imu_gyro_bias "))
    assert "deg/s" in line and "+-" in line
    # the parameter file keeps only declared parameters (the node loads it); report-only
    # estimates are comments in its header
    text = out.read_text()
    files.load_config(out)
    doc = yaml.safe_load(text)["kinematic_monitor"]["ros__parameters"]
    assert "imu_gyro_bias" not in json.dumps(doc)
    assert "#  imu_gyro_bias" in text and "# report only (no parameter yet" in text


def test_short_drive_is_refused_with_reason(tmp_path: Path) -> None:
    bag = _simulate(tmp_path / "short", 25.0, [])
    with pytest.raises(UsageError, match=r"only \d+ s of usable driving; need at least 60 s"):
        _run([str(bag), "--params", str(bag / "params.yaml"), "--out",
              str(tmp_path / "new" / "x.yaml")])
    assert not (tmp_path / "new").exists()  # a refused run creates no folder either


def test_existing_out_refused_and_bad_params_named(tmp_path: Path) -> None:
    out = tmp_path / "exists.yaml"
    out.write_text("x")
    with pytest.raises(UsageError, match="exists already"):
        _run([str(tmp_path), "--params", "p.yaml", "--out", str(out)])
    bad = tmp_path / "bad.yaml"
    bad.write_text("kinematic_monitor:\n  ros__parameters:\n    vehicle:\n      wheelbase: -1.0\n")
    with pytest.raises(UsageError, match="vehicle.wheelbase"):
        _run([str(tmp_path), "--params", str(bad), "--out", str(tmp_path / "n.yaml")])


def test_missing_bag_named(tmp_path: Path) -> None:
    p = tmp_path / "p.yaml"
    files.dump_params_yaml({"vehicle.wheelbase": 2.7, "vehicle.cg_to_rear_axle": 1.35,
                             "vehicle.wheel_radius": 0.31, "vehicle.track_width": 1.55}, p)
    with pytest.raises(UsageError, match="nope"):
        _run([str(tmp_path / "nope"), "--params", str(p), "--out", str(tmp_path / "n.yaml")])


def test_events_file_errors_are_named(tmp_path: Path) -> None:
    ev = tmp_path / "events.json"
    ev.write_text("{not json")
    with pytest.raises(UsageError, match="events.json"):
        calcmd._event_windows([str(ev)])
    ev.write_text(json.dumps({"schema": "kinematic_monitor.events/1", "source": "b",
                              "events": [{"start": 10.0, "end": 12.0}]}))
    assert calcmd._event_windows([str(ev)]) == [(9.0, 13.0)]


def test_out_help_names_the_sweep_file() -> None:
    # the fleet sweep looks for this file name (kinematic_monitor.apps.sweep.CALIBRATION_FILE)
    from kinematic_monitor.apps.sweep import CALIBRATION_FILE

    parser = argparse.ArgumentParser()
    calcmd.add_arguments(parser)
    assert CALIBRATION_FILE in " ".join(parser.format_help().split())
