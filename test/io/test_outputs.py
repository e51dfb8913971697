"""Atomic output directory: outputs appear only on commit, names never escape the directory."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from kinematic_monitor.io.outputs import PARTIAL_PREFIX, OutputDir, OutputDirError, check_name


def test_new_directory_is_created_and_outputs_appear_only_on_commit(tmp_path: Path) -> None:
    out = tmp_path / "a" / "b"
    with OutputDir(out) as od:
        od.write_text("events.json", "{}\n")
        with od.open_text("report.html") as fh:
            fh.write("<html></html>")
        # before commit: nothing under a final name (the whole point of the module)
        assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == []
        done = od.commit()
    assert sorted(p.name for p in done) == ["events.json", "report.html"]
    assert sorted(os.listdir(out)) == ["events.json", "report.html"]
    assert (out / "events.json").read_text() == "{}\n"


def test_exception_leaves_no_partial_files(tmp_path: Path) -> None:
    out = tmp_path / "o"
    with pytest.raises(RuntimeError), OutputDir(out) as od:
        od.write_text("events.json", "{}")
        raise RuntimeError("interrupted")
    assert os.listdir(out) == []


def test_keyboard_interrupt_leaves_earlier_outputs_intact(tmp_path: Path) -> None:
    out = tmp_path / "o"
    with OutputDir(out) as od:
        od.write_text("report.html", "old")
        od.commit()
    with pytest.raises(KeyboardInterrupt), OutputDir(out, force=True) as od:
        od.write_text("events.json", "new, half written")
        raise KeyboardInterrupt
    # --force removes our known outputs only when told which they are; here none were named
    assert sorted(os.listdir(out)) == ["report.html"]
    assert (out / "report.html").read_text() == "old"


def test_non_empty_directory_refused_without_force(tmp_path: Path) -> None:
    (tmp_path / "someone_elses.txt").write_text("keep me")
    with pytest.raises(OutputDirError) as err:
        OutputDir(tmp_path)
    assert str(tmp_path) in str(err.value) and "--force" in str(err.value)


def test_force_replaces_known_outputs_and_keeps_other_files(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("keep me")
    (tmp_path / "report.html").write_text("stale report")
    (tmp_path / f"{PARTIAL_PREFIX}123-events.json").write_text("leftover")
    with OutputDir(tmp_path, force=True, known_outputs=("report.html", "events.json")) as od:
        # the stale report is gone at once: it can never be mistaken for this run's
        assert not (tmp_path / "report.html").exists()
        od.write_text("events.json", "{}")
        od.commit()
    assert sorted(os.listdir(tmp_path)) == ["events.json", "notes.txt"]


def test_existing_file_as_directory_is_refused(tmp_path: Path) -> None:
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(OutputDirError, match="not a directory"):
        OutputDir(f, force=True)


@pytest.mark.parametrize("bad", ["", ".", "..", "../x", "a/b", "/etc/passwd", ".hidden",
                                 "a\\b", "x\x00y"])
def test_names_that_would_escape_are_refused(tmp_path: Path, bad: str) -> None:
    # POSIX path resolution: '/' separates components and '..' names the parent, so any
    # name holding them could leave the directory (POSIX.1-2017, 4.13 Pathname Resolution)
    with pytest.raises(OutputDirError):
        check_name(bad)
    od = OutputDir(tmp_path / "o")
    with pytest.raises(OutputDirError):
        od.temp_path(bad)


def test_temp_paths_stay_inside_directory(tmp_path: Path) -> None:
    od = OutputDir(tmp_path / "o")
    p = od.temp_path("timeseries.csv").resolve()
    assert p.parent == (tmp_path / "o").resolve()
    assert p.name.startswith(PARTIAL_PREFIX)
    od.abort()


def test_commit_replaces_an_existing_output_atomically(tmp_path: Path) -> None:
    # os.replace is rename(2): the final name points at the old or the new file, never at
    # a missing or half-written one (POSIX.1-2017 rename())
    out = tmp_path / "o"
    out.mkdir()
    (out / "events.json").write_text("old")
    with OutputDir(out, force=True) as od:
        od.write_text("events.json", "new")
        assert (out / "events.json").read_text() == "old"
        od.commit()
    assert (out / "events.json").read_text() == "new"


def test_uncreatable_directory_gives_clear_error(tmp_path: Path) -> None:
    # a path below a regular file cannot be created (ENOTDIR), even for root
    f = tmp_path / "plain_file"
    f.write_text("x")
    with pytest.raises(OutputDirError, match="cannot create") as err:
        OutputDir(f / "out")
    assert str(f / "out") in str(err.value)
