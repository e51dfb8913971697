"""Replay of a bag cut at random byte offsets (sqlite3 and MCAP) never crashes.

A logger killed mid-write leaves a data file cut anywhere: inside the file header, inside
a record, inside an index. Defined outcome of ``kinematic-monitor replay`` (contract,
docs/interface.md section 4): exit 0 with every output written and the loss reported
(``lost_data`` in the JSON summary, the report), or exit 2 with a message naming the bag
when nothing at all can be read; never an uncaught exception. Expected message counts come
from the bag's own metadata.yaml (the rosbag2 metadata format), which the cut leaves intact.

Offsets: a fixed seed, so a failure reproduces; the file is written by rosbags' Writer
(reference library for both storage formats).
"""

from __future__ import annotations

import json
import random
import shutil
from pathlib import Path

import pytest

pytest.importorskip("rosbags")

from rosbags.rosbag2 import StoragePlugin  # noqa: E402

from fixtures.bags import write_bag  # noqa: E402
from kinematic_monitor.apps import cli  # noqa: E402

PARAMS = """\
kinematic_monitor:
  ros__parameters:
    vehicle: {wheelbase: 2.70, cg_to_rear_axle: 1.35, wheel_radius: 0.31, track_width: 1.55}
    inputs: {gnss: {topic: ""}}
"""
SEED = 20261201
STORAGES = [StoragePlugin.SQLITE3, StoragePlugin.MCAP]


@pytest.fixture(scope="module")
def bags(tmp_path_factory: pytest.TempPathFactory) -> dict[StoragePlugin, Path]:
    root = tmp_path_factory.mktemp("trunc")
    (root / "params.yaml").write_text(PARAMS)
    return {s: write_bag(root / s.name.lower(), s, seconds=4.0) for s in STORAGES}


def _offsets(size: int, n: int, storage: StoragePlugin) -> list[int]:
    rng = random.Random(f"{SEED}-{storage.name}")
    # a few in the first kilobyte (file header, schema), the rest anywhere
    head = [rng.randrange(0, min(size, 1024)) for _ in range(2)]
    return sorted(head + [rng.randrange(0, size) for _ in range(n - 2)])


def _cut(src: Path, dst: Path, offset: int) -> Path:
    shutil.copytree(src, dst)
    (data,) = [p for p in dst.iterdir() if p.suffix in (".db3", ".mcap")]
    with open(data, "r+b") as fh:
        fh.truncate(offset)
    return dst


@pytest.mark.parametrize("storage", STORAGES, ids=lambda s: s.name.lower())
def test_replay_of_cut_bag_never_crashes_and_reports_loss(
        bags: dict[StoragePlugin, Path], tmp_path: Path, storage: StoragePlugin,
        capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("CI", "true")  # no progress bar
    src = bags[storage]
    (data,) = [p for p in src.iterdir() if p.suffix in (".db3", ".mcap")]
    size = data.stat().st_size
    params = src.parent / "params.yaml"
    outcomes = []
    for i, offset in enumerate(_offsets(size, 8, storage)):
        bag = _cut(src, tmp_path / f"cut{i}", offset)
        out = tmp_path / f"out{i}"
        rc = cli.main(["replay", str(bag), "--params", str(params), "--out", str(out),
                       "--json-summary", "--no-report"])
        cap = capsys.readouterr()
        assert "Traceback" not in cap.err, (offset, cap.err)
        assert rc in (0, 2), (offset, rc, cap.err)
        if rc == 2:  # nothing readable: the message names the bag
            assert str(bag) in cap.err or bag.name in cap.err, (offset, cap.err)
            outcomes.append("refused")
            continue
        summary = json.loads(cap.out.strip().splitlines()[-1])
        assert summary["lost_data"], (offset, "a cut bag must report what it lost")
        assert any("read up to stamp" in s or "damaged" in s for s in summary["lost_data"])
        events = json.loads((out / "events.json").read_text())
        assert events["schema"] == "kinematic_monitor.events/1"
        outcomes.append("read")
    # most cuts fall after the header: the data before the cut is used
    assert outcomes.count("read") >= 4, outcomes


@pytest.mark.parametrize("storage", STORAGES, ids=lambda s: s.name.lower())
def test_cut_in_the_middle_keeps_the_data_before_it(
        bags: dict[StoragePlugin, Path], tmp_path: Path, storage: StoragePlugin) -> None:
    from kinematic_monitor.io.bag import open_bag

    src = bags[storage]
    (data,) = [p for p in src.iterdir() if p.suffix in (".db3", ".mcap")]
    bag = _cut(src, tmp_path / "cut", int(data.stat().st_size * 0.6) + 7)
    reader = open_bag(bag, None)
    samples = list(reader.iter_samples())
    damage = reader.damage
    assert damage is not None
    # metadata.yaml counts (4 s: JointState 100 Hz, Imu 100 Hz, Odometry 50 Hz)
    assert damage.expected == {"/joint_states": 400, "/imu/data": 400,
                               "/localization/odom": 200}
    lost = sum(damage.expected.values()) - sum(damage.read.values())
    assert lost > 0
    assert len(samples) > 0.2 * 1000  # a cut at 60 % keeps a good part
    stamps = [s.stamp for s in samples]
    assert stamps == sorted(stamps)


@pytest.mark.parametrize("storage", STORAGES, ids=lambda s: s.name.lower())
def test_cut_bag_without_metadata_names_its_topics_from_the_file(
        bags: dict[StoragePlugin, Path], tmp_path: Path, storage: StoragePlugin) -> None:
    # no metadata.yaml: the topics come from the storage file itself (sqlite3 topics table;
    # MCAP schema and channel records, MCAP format specification), then the data before
    # the cut is read as above
    from kinematic_monitor.io.bag import open_bag

    src = bags[storage]
    (data,) = [p for p in src.iterdir() if p.suffix in (".db3", ".mcap")]
    bag = _cut(src, tmp_path / "cut", int(data.stat().st_size * 0.6) + 7)
    (bag / "metadata.yaml").unlink()
    (data,) = [p for p in bag.iterdir() if p.suffix in (".db3", ".mcap")]
    reader = open_bag(data, {"inputs.gnss.topic": ""})
    assert reader.topics == {"/joint_states": "sensor_msgs/msg/JointState",
                             "/imu/data": "sensor_msgs/msg/Imu",
                             "/localization/odom": "nav_msgs/msg/Odometry"}
    samples = [s for s in reader.iter_samples()]
    assert reader.damage is not None and len(samples) > 200
