"""Salvage of a damaged sqlite3 rosbag2 storage file (cut short or corrupt)."""

from __future__ import annotations

import shutil
import sqlite3
import struct
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["SqliteSalvage", "SALVAGE"]

_HEAD_BYTES = 1 << 20  # the topics table sits at the start of the file


@contextmanager
def _readable_copy(db: Path, limit: int | None, err: list[str]
                   ) -> Iterator[sqlite3.Connection | None]:
    """An immutable connection to a temporary copy of ``db`` (its first ``limit`` bytes)
    whose header page count is set to what is there: SQLite refuses a file shorter than
    that count. None (and a note in ``err``) when the copy is not an SQLite file."""
    with tempfile.TemporaryDirectory(prefix="km_bag_") as tmp:
        copy = Path(tmp) / db.name
        if limit is None:
            shutil.copyfile(db, copy)
        else:
            with open(db, "rb") as src, open(copy, "wb") as dst:
                dst.write(src.read(limit))
        size = copy.stat().st_size
        with open(copy, "r+b") as fh:
            head = fh.read(100)
            if len(head) < 100 or not head.startswith(b"SQLite format 3\0"):
                err.append("sqlite3 header missing")
                yield None
                return
            (page,) = struct.unpack(">H", head[16:18])
            page = 65536 if page == 1 else page
            fh.seek(28)
            fh.write(struct.pack(">I", size // page))
        con = sqlite3.connect(f"file:{copy}?immutable=1", uri=True)
        try:
            yield con
        finally:
            con.close()


class SqliteSalvage:
    """Rows of a cut-short sqlite3 file, in insertion order, until the damage."""

    def records(self, path: Path, topics: set[str], err: list[str]
                ) -> Iterator[tuple[str, int, bytes]]:
        """(topic, log time [ns], bytes) of ``topics``; what stopped the scan goes to ``err``."""
        with _readable_copy(path, None, err) as con:
            if con is None:
                return
            try:
                ids = {tid: name for tid, name in con.execute("SELECT id, name FROM topics")
                       if name in topics}
                for tid, stamp, data in con.execute(
                        "SELECT topic_id, timestamp, data FROM messages ORDER BY id"):
                    name = ids.get(tid)
                    if name is not None:
                        yield name, int(stamp), bytes(data)
            except sqlite3.DatabaseError as exc:
                err.append(f"sqlite3: {exc}")

    def topics(self, path: Path, err: list[str]) -> dict[str, str]:
        """Topic -> type from the topics table at the start of the file."""
        names: dict[str, str] = {}
        try:
            with _readable_copy(path, _HEAD_BYTES, err) as con:
                if con is not None:
                    for name, msgtype in con.execute("SELECT name, type FROM topics"):
                        names[name] = msgtype
        except (sqlite3.DatabaseError, struct.error, OSError) as exc:
            err.append(str(exc))
        return names


SALVAGE = SqliteSalvage()
