"""Atomic output directory handling for offline runs.

Every output is first written under a hidden temporary name inside the output directory
and renamed to its final name only when the whole run succeeded (``commit``), so an
interrupted run never leaves a half-written report that looks complete. Output names are
plain file names: a name that would escape the directory is refused.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from types import TracebackType
from typing import IO

PARTIAL_PREFIX = ".partial-"


class OutputDirError(Exception):
    """The output directory cannot be used (exists and is not empty, not writable, ...)."""


def check_name(name: str) -> str:
    """Return ``name`` if it is a plain file name that stays inside the directory.

    Raises ``OutputDirError`` naming the bad name otherwise (separators, ``..``, absolute
    paths, hidden names and empty strings are refused).
    """
    if (
        not name
        or name in (".", "..")
        or name.startswith(".")
        or "/" in name
        or "\\" in name
        or "\x00" in name
        or os.path.isabs(name)
        or Path(name).name != name
    ):
        raise OutputDirError(f"output name {name!r} is not a plain file name inside the directory")
    return name


class OutputDir:
    """An output directory whose files appear only on ``commit``.

    Use as a context manager: leaving the block with an exception (including
    ``KeyboardInterrupt``) removes the temporary files and leaves earlier outputs alone.
    """

    def __init__(self, path: str | os.PathLike[str], force: bool = False,
                 known_outputs: tuple[str, ...] = ()) -> None:
        """Create (or, with ``force``, reuse) the directory ``path``.

        An existing non-empty directory is refused without ``force``. With ``force`` the
        files listed in ``known_outputs`` (our own outputs from an earlier run) are removed
        first, so that stale outputs never mix with new ones; other files are kept.
        """
        self.path = Path(path)
        self._pending: dict[str, Path] = {}
        self._committed = False
        if self.path.exists() and not self.path.is_dir():
            raise OutputDirError(f"output path {str(self.path)!r} exists and is not a directory")
        if self.path.is_dir():
            entries = [e for e in self.path.iterdir()]
            if entries and not force:
                raise OutputDirError(
                    f"output directory {str(self.path)!r} is not empty "
                    "(use --force to write into it anyway)"
                )
            for name in known_outputs:
                old = self.path / check_name(name)
                if old.is_dir() and not old.is_symlink():
                    shutil.rmtree(old)
                elif old.exists() or old.is_symlink():
                    old.unlink()
            for entry in entries:  # leftovers of an interrupted earlier run
                if entry.name.startswith(PARTIAL_PREFIX):
                    if entry.is_dir() and not entry.is_symlink():
                        shutil.rmtree(entry)
                    else:
                        entry.unlink()
        else:
            try:
                self.path.mkdir(parents=True)
            except OSError as exc:
                raise OutputDirError(
                    f"cannot create output directory {str(self.path)!r}: {exc.strerror}"
                ) from exc
        if not os.access(self.path, os.W_OK | os.X_OK):
            raise OutputDirError(f"output directory {str(self.path)!r} is not writable")

    # -- temporary paths -------------------------------------------------------------
    def temp_path(self, name: str) -> Path:
        """The temporary path where output ``name`` is written until ``commit``."""
        check_name(name)
        if name not in self._pending:
            self._pending[name] = self.path / f"{PARTIAL_PREFIX}{os.getpid()}-{name}"
        return self._pending[name]

    def temp_dir_path(self, name: str) -> Path:
        """A not-yet-existing temporary path for a directory output ``name`` (e.g. a bag).

        The path is ``<hidden holder>/<name>`` so that tools naming their files after the
        directory (rosbag2 writers do) see the final name.
        """
        check_name(name)
        if name not in self._pending:
            holder = self.path / f"{PARTIAL_PREFIX}{os.getpid()}-{name}.d"
            holder.mkdir()
            self._pending[name] = holder / name
        return self._pending[name]

    def open_text(self, name: str) -> IO[str]:
        """Open output ``name`` for writing text (UTF-8, ``\\n`` line ends) at its temp path."""
        return open(self.temp_path(name), "w", encoding="utf-8", newline="")

    def write_text(self, name: str, text: str) -> None:
        """Write the whole of output ``name`` at its temporary path."""
        with self.open_text(name) as fh:
            fh.write(text)

    @property
    def pending(self) -> list[str]:
        """Names written so far and not yet committed."""
        return list(self._pending)

    # -- commit / abort --------------------------------------------------------------
    def commit(self) -> list[Path]:
        """Rename every pending output to its final name; returns the final paths.

        Files are synced before the renames so a power loss cannot leave an empty file
        under a final name. Outputs whose temporary file was never created are skipped.
        """
        done: list[Path] = []
        for name, tmp in self._pending.items():
            if not tmp.exists():
                continue
            if tmp.is_file():
                with open(tmp, "rb") as fh:
                    os.fsync(fh.fileno())
            final = self.path / name
            if final.is_dir() and not final.is_symlink():
                shutil.rmtree(final)
            os.replace(tmp, final)
            if tmp.parent != self.path:  # a directory output's holder
                tmp.parent.rmdir()
            done.append(final)
        self._pending.clear()
        self._committed = True
        try:  # make the renames durable (not possible on every file system)
            fd = os.open(self.path, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        except OSError:
            pass
        return done

    def abort(self) -> None:
        """Remove every temporary output; final outputs are not touched."""
        for tmp in self._pending.values():
            if tmp.parent != self.path:  # a directory output: remove its holder
                tmp = tmp.parent
            try:
                if tmp.is_dir() and not tmp.is_symlink():
                    shutil.rmtree(tmp)
                elif tmp.exists() or tmp.is_symlink():
                    tmp.unlink()
            except OSError:
                pass
        self._pending.clear()

    def __enter__(self) -> OutputDir:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        if exc_type is not None or not self._committed:
            self.abort()
