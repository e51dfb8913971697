"""readahead: the bag read in a forked child gives what reading in-process gives."""

from __future__ import annotations

import math
import multiprocessing
import os
from pathlib import Path

import pytest
from rosbags.rosbag2 import StoragePlugin

from fixtures.bags import STORAGES, T0, write_bag
from kinematic_monitor.core.samples import ChassisSample, GnssSample, ImuSample, LocalizationSample
from kinematic_monitor.io import readahead
from kinematic_monitor.io.bag import BagError, open_bag

pytestmark = pytest.mark.skipif(not readahead.available(),
                                reason="read-ahead needs fork and two usable cores")

CFG = {"inputs": {"gnss": {"topic": ""}}}


def _bookkeeping(src: object) -> dict[str, object]:
    # what iter_samples changes on a source (io/sources.py SampleSource)
    out = {a: getattr(src, a) for a in ("position", "stats", "damage", "out_of_order",
                                        "time_jumps", "warnings")}
    out["stats"] = {t: (s.read, s.accepted, dict(s.rejected), s.receive_time_stamped)
                    for t, s in out["stats"].items()}  # type: ignore[attr-defined]
    d = out["damage"]
    out["damage"] = None if d is None else (d.error, d.expected, d.read, str(d.last_good_stamp))
    return out


def _both(bag: Path, cfg: object = CFG) -> tuple[list[object], dict[str, object],
                                                  list[object], dict[str, object]]:
    with open_bag(bag, cfg) as src:
        here = list(src.iter_samples())
        book_here = _bookkeeping(src)
    with open_bag(bag, cfg) as src:
        ahead = list(readahead.iter_samples(src))
        book_ahead = _bookkeeping(src)
    return here, book_here, ahead, book_ahead


def _same(a: list[object], b: list[object]) -> bool:
    """Equal samples: same types and fields (repr: exact floats, NaN equal to NaN)."""
    return [(type(x), repr(x)) for x in a] == [(type(x), repr(x)) for x in b]


@pytest.mark.parametrize("storage", STORAGES)
def test_same_samples_and_bookkeeping_as_in_process(tmp_path: Path,
                                                    storage: StoragePlugin) -> None:
    bag = write_bag(tmp_path / "b", storage, seconds=4.0)
    here, book_here, ahead, book_ahead = _both(bag)
    assert len(here) == 400 + 400 + 200  # every message of the three topics
    assert _same(ahead, here)
    assert book_ahead == book_here
    assert book_ahead["position"] == 1000


@pytest.mark.parametrize("storage", STORAGES)
def test_truncated_bag_gives_the_same_damage(tmp_path: Path, storage: StoragePlugin) -> None:
    bag = write_bag(tmp_path / "b", storage, seconds=6.0)
    (data,) = [p for p in bag.iterdir() if p.suffix in (".db3", ".mcap")]
    with open(data, "r+b") as fh:
        fh.truncate(int(data.stat().st_size * 0.6) + 13)
    here, book_here, ahead, book_ahead = _both(bag, None)
    assert book_here["damage"] is not None
    assert _same(ahead, here)
    assert book_ahead == book_here


def test_progress_reported_up_to_the_end(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=16.0)
    seen: list[tuple[int, int]] = []
    with open_bag(bag, CFG) as src:
        n = sum(1 for _ in readahead.iter_samples(
            src, progress=lambda a, b: seen.append((a, b)), progress_every=100))
    assert n == 4000
    assert seen[-1] == (4000, 4000)
    positions = [a for a, _ in seen]
    # at least once per batch of readahead.BATCH samples, never backwards
    assert positions == sorted(positions) and len(positions) >= 4000 // readahead.BATCH


def test_error_in_the_child_is_raised_in_the_parent(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3)

    def broken(*_a: object, **_k: object) -> object:
        yield ImuSample(T0, 0.1)
        raise BagError("topic '/imu/data': definition cannot be parsed")

    with open_bag(bag, CFG) as src:
        src.iter_samples = broken  # type: ignore[method-assign]
        got: list[object] = []
        with pytest.raises(BagError, match="cannot be parsed"):
            for s in readahead.iter_samples(src):
                got.append(s)
    assert _same(got, [ImuSample(T0, 0.1)])  # what came before the error is delivered


def test_every_sample_type_and_other_objects_cross(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=0.5)
    sent = [
        ChassisSample(T0, steer=0.1, speed=3.0),
        LocalizationSample(T0 + 0.01, 1.0, 2.0, 0.3, vx=3.0, frame_id="odom",
                           pose_cov=(1e-4, 0.0, 0.0, 0.0, 1e-4, 0.0, 0.0, 0.0, 1e-5)),
        ImuSample(T0 + 0.02, -0.2, ax=math.nan, ay=0.5),
        GnssSample(T0 + 0.03, 48.1, 11.5),
        ("a marker", 7),  # not a sample class: sent pickled
    ]
    with open_bag(bag, CFG) as src:
        src.iter_samples = lambda *_a, **_k: iter(sent)  # type: ignore[method-assign]
        got = list(readahead.iter_samples(src))
    assert _same(got[:4], sent[:4])
    assert math.isnan(got[2].ax)  # type: ignore[attr-defined]
    assert got[4] == ("a marker", 7)


def test_child_stopped_when_the_consumer_stops_early(tmp_path: Path) -> None:
    # long enough that the child is still sending (the pipe holds a few batches only)
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=20.0)
    with open_bag(bag, CFG) as src:
        it = readahead.iter_samples(src)
        next(it)
        children = multiprocessing.active_children()
        assert any(p.name == "kinematic_monitor read-ahead" for p in children)
        it.close()
    assert not any(p.name == "kinematic_monitor read-ahead"
                   for p in multiprocessing.active_children())


def test_child_that_dies_is_an_error(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3)

    def dies(*_a: object, **_k: object) -> object:
        os._exit(3)
        yield  # pragma: no cover

    with open_bag(bag, CFG) as src:
        src.iter_samples = dies  # type: ignore[method-assign]
        with pytest.raises(RuntimeError, match="exit code 3"):
            list(readahead.iter_samples(src))


def test_wanted_modes(monkeypatch: pytest.MonkeyPatch) -> None:
    assert readahead.wanted("on", 10)
    assert not readahead.wanted("off", 10**6)
    assert not readahead.wanted("auto", readahead.MIN_MESSAGES - 1)
    assert readahead.wanted("auto", readahead.MIN_MESSAGES)
    with pytest.raises(ValueError, match="'sometimes'"):
        readahead.wanted("sometimes", 10)
    monkeypatch.setattr(readahead, "usable_cores", lambda: 1)
    assert not readahead.wanted("on", 10**6)  # one core: nothing to overlap


def test_replay_help_names_the_same_threshold() -> None:
    from kinematic_monitor.apps import replay

    assert replay._READ_AHEAD_MIN == readahead.MIN_MESSAGES


def test_fields_that_marshal_cannot_carry_cross_pickled(tmp_path: Path) -> None:
    # a field-path input can give numpy scalars; the batch then goes pickled, same values
    import numpy as np

    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=0.5)
    sent = [ChassisSample(T0, steer=np.float64(0.1), speed=3.0), ImuSample(T0 + 0.01, 0.2)]
    with open_bag(bag, CFG) as src:
        src.iter_samples = lambda *_a, **_k: iter(sent)  # type: ignore[method-assign]
        got = list(readahead.iter_samples(src))
    assert _same(got, sent)
    assert type(got[0].steer) is np.float64  # type: ignore[attr-defined]
    # inside a tuple field too (a covariance read through numpy)
    assert not readahead._plain((2, T0, (0.1, np.float64(0.2))))
    assert readahead._plain((2, T0, 1.0, "map", (0.1, 0.2), ()))


def test_exception_that_does_not_pickle_arrives_by_name(tmp_path: Path) -> None:
    bag = write_bag(tmp_path / "b", StoragePlugin.SQLITE3, seconds=0.5)

    class LocalDecodeError(Exception):  # a local class: pickle cannot name it
        pass

    def broken(*_a: object, **_k: object) -> object:
        raise LocalDecodeError("decoder state lost")
        yield  # pragma: no cover

    with open_bag(bag, CFG) as src:
        src.iter_samples = broken  # type: ignore[method-assign]
        with pytest.raises(RuntimeError, match="LocalDecodeError: decoder state lost"):
            list(readahead.iter_samples(src))
