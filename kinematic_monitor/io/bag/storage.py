"""Storage back-ends behind the bag reader: finding the files, salvaging damaged ones.

A clean bag is read by the rosbags reader whatever its storage. When that reader cannot
open or finish a bag, the back-end of its storage (:data:`SALVAGE`, by storage id) reads
what is readable: :class:`Salvage` is the protocol each one meets.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any, Protocol

import yaml

from kinematic_monitor.io.bag import mcap, sqlite
from kinematic_monitor.io.bag.errors import BagError

__all__ = ["RawRecord", "Salvage", "SALVAGE", "SUFFIXES", "storage_files", "metadata_topics"]

#: raw record stream: (topic, log time [ns], CDR bytes)
RawRecord = tuple[str, int, bytes]


class Salvage(Protocol):
    """Reading what is readable of one damaged storage file."""

    def records(self, path: Path, topics: set[str], err: list[str]) -> Iterator[RawRecord]:
        """Messages of ``topics`` in file order until the damage; what stopped it goes to
        ``err``."""
        ...

    def topics(self, path: Path, err: list[str]) -> dict[str, str]:
        """Topic name -> message type from the file itself (empty if not readable)."""
        ...


#: salvage back-end by rosbag2 storage id
SALVAGE: dict[str, Salvage] = {"sqlite3": sqlite.SALVAGE, "mcap": mcap.SALVAGE}
#: storage id by file suffix
SUFFIXES = {".db3": "sqlite3", ".mcap": "mcap"}


def storage_files(path: Path) -> tuple[str, list[Path], dict[str, Any] | None]:
    """Storage id ('sqlite3' | 'mcap'), storage files and parsed metadata (or None)."""
    meta: dict[str, Any] | None = None
    if path.is_file():
        files = [path]
    else:
        if not path.is_dir():
            raise BagError(f"bag {str(path)!r} does not exist")
        metafile = path / "metadata.yaml"
        if metafile.exists():
            try:
                loaded = yaml.safe_load(metafile.read_text())
                meta = loaded["rosbag2_bagfile_information"]
            except (OSError, yaml.YAMLError, KeyError, TypeError) as exc:
                raise BagError(f"bag metadata {str(metafile)!r} unreadable: {exc}") from None
        files = sorted(p for p in path.iterdir() if p.suffix in SUFFIXES)
    if not files:
        raise BagError(f"no .db3 or .mcap storage file in {str(path)!r}")
    suffixes = {p.suffix for p in files}
    if len(suffixes) > 1:
        raise BagError(f"bag {str(path)!r} mixes storage formats {sorted(suffixes)}")
    storage = SUFFIXES.get(files[0].suffix)
    if storage is None:
        raise BagError(f"{str(files[0])!r} is not a .db3 or .mcap storage file")
    if meta is not None and meta.get("storage_identifier", storage) != storage:
        raise BagError(
            f"bag metadata says storage {meta.get('storage_identifier')!r} "
            f"but the files are {storage}"
        )
    return storage, files, meta


def metadata_topics(meta: dict[str, Any]) -> dict[str, tuple[str, int]]:
    """Topic -> (message type, message count) from parsed rosbag2 metadata."""
    out: dict[str, tuple[str, int]] = {}
    for entry in meta.get("topics_with_message_count", []) or []:
        tm = entry["topic_metadata"]
        out[tm["name"]] = (tm["type"], int(entry.get("message_count", 0)))
    return out
