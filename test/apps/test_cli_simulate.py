"""``kinematic-monitor simulate``: listing, short runs, refusals and determinism."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from rosbags.rosbag2 import Reader

from kinematic_monitor.apps import cli
from kinematic_monitor.sim.scenarios import SCENARIOS

SCENARIO = "skidpad_circle"


def raw_messages(bag: Path) -> list[tuple[str, int, bytes]]:
    with Reader(bag) as reader:
        return [(c.topic, t, bytes(raw)) for c, t, raw in reader.messages()]


def test_list_prints_scenario_names(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main(["simulate", "--list"]) == 0
    assert capsys.readouterr().out.splitlines() == list(SCENARIOS)


@pytest.mark.parametrize("storage", ["sqlite3", "mcap"])
def test_short_run_writes_bag_truth_and_params(
    tmp_path: Path, storage: str, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "drive"
    argv = [
        "simulate",
        SCENARIO,
        "--out",
        str(out),
        "--storage",
        storage,
        "--duration",
        "2",
        "--fault",
        "loc-jump:start=1,dx=3",
    ]
    assert cli.main(argv) == 0
    captured = capsys.readouterr()
    assert captured.err == ""  # no progress bar when stderr is not a terminal
    assert f"wrote {out}" in captured.out
    assert f"storage_identifier: {storage}" in (out / "metadata.yaml").read_text()
    topics = {t for t, _, _ in raw_messages(out)}
    assert topics == {"/joint_states", "/localization/odom", "/imu/data", "/gnss/fix"}
    doc = json.loads((out / "truth.json").read_text())
    assert doc["scenario"] == SCENARIO and doc["duration"] == pytest.approx(2.0)
    jump = [iv for iv in doc["truth"] if iv["kind"] == "localization_fault"]
    assert len(jump) == 1 and jump[0]["start"] == pytest.approx(1_800_000_001.0)
    assert "wheelbase" in (out / "params.yaml").read_text()


def test_unknown_scenario_exits_2_listing_names(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert cli.main(["simulate", "no_such_drive", "--out", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert "unknown scenario 'no_such_drive'" in err
    assert all(name in err for name in SCENARIOS)
    assert not (tmp_path / "x").exists()


def test_bad_inputs_exit_2_naming_the_problem(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = str(tmp_path / "x")
    assert cli.main(["simulate", SCENARIO, "--out", out, "--fault", "loc-jump:dz=1"]) == 2
    assert "bad setting 'dz=1'" in capsys.readouterr().err
    assert cli.main(["simulate", SCENARIO, "--out", out, "--duration", "-1"]) == 2
    assert "--duration" in capsys.readouterr().err
    assert cli.main(["simulate", SCENARIO]) == 2
    assert "--out" in capsys.readouterr().err
    assert (
        cli.main(
            ["simulate", SCENARIO, "--out", out, "--duration", "1", "--fault", "loc-jump:start=5"]
        )
        == 2
    )
    assert "after the drive's end" in capsys.readouterr().err
    assert not (tmp_path / "x").exists()


def test_existing_output_refused_unless_force(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "bag"
    args = ["simulate", SCENARIO, "--out", str(out), "--duration", "0.5", "--storage", "sqlite3"]
    assert cli.main(args) == 0
    assert cli.main(args) == 2
    assert "exists already" in capsys.readouterr().err
    assert cli.main([*args, "--force"]) == 0
    # --force never deletes a folder that is not a bag
    other = tmp_path / "notes"
    other.mkdir()
    (other / "keep.txt").write_text("mine")
    assert cli.main(["simulate", SCENARIO, "--out", str(other), "--force"]) == 2
    assert (other / "keep.txt").read_text() == "mine"


def test_same_seed_gives_identical_message_bytes(tmp_path: Path) -> None:
    def run(name: str, seed: int) -> list[tuple[str, int, bytes]]:
        out = tmp_path / name
        argv = [
            "simulate",
            SCENARIO,
            "--out",
            str(out),
            "--duration",
            "1.5",
            "--seed",
            str(seed),
            "--storage",
            "mcap",
            "--fault",
            "steer-offset:offset=0.01",
        ]
        assert cli.main(argv) == 0
        return raw_messages(out)

    a, b, c = run("a", 7), run("b", 7), run("c", 8)
    assert a == b
    assert a != c
    assert (
        json.loads((tmp_path / "a" / "truth.json").read_text())["truth"]
        == json.loads((tmp_path / "b" / "truth.json").read_text())["truth"]
    )


def test_out_in_missing_folders_creates_them(tmp_path: Path) -> None:
    out = tmp_path / "a" / "b" / "bag"
    assert cli.main(["simulate", SCENARIO, "--out", str(out), "--duration", "1",
                     "--no-progress"]) == 0
    assert (out / "metadata.yaml").is_file() and (out / "truth.json").is_file()


def test_out_under_a_file_is_refused_naming_it(tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "a").write_text("a file, not a folder")
    out = tmp_path / "a" / "bag"
    assert cli.main(["simulate", SCENARIO, "--out", str(out), "--duration", "1",
                     "--no-progress"]) == cli.EXIT_USAGE
    err = capsys.readouterr().err
    assert "--out" in err and str(tmp_path / "a") in err
    assert (tmp_path / "a").read_text() == "a file, not a folder"


def test_refused_run_creates_no_folders(tmp_path: Path) -> None:
    out = tmp_path / "new" / "bag"
    assert cli.main(["simulate", SCENARIO, "--out", str(out), "--duration", "-1"]) == 2
    assert not (tmp_path / "new").exists()
