"""Salvage of a damaged MCAP rosbag2 storage file: records read front to back until one is
incomplete (MCAP format: magic, then records of opcode u8, length u64, body)."""

from __future__ import annotations

import mmap
import struct
from collections.abc import Iterator
from pathlib import Path

__all__ = ["McapSalvage", "SALVAGE"]

_MAGIC = b"\x89MCAP0\r\n"
_OP_CHANNEL, _OP_MESSAGE, _OP_CHUNK, _OP_DATA_END = 0x04, 0x05, 0x06, 0x0F
_OP_CUT_CHUNK = 0x106  # not an MCAP opcode: the readable start of a chunk cut short
_MAP_FROM = 1 << 26  # files from this size on are mapped instead of read in
_u64 = struct.Struct("<Q").unpack_from

Buffer = bytes | mmap.mmap


def _records(buf: Buffer, pos: int, end: int) -> Iterator[tuple[int, bytes]]:
    """(opcode, body) of each record in ``buf[pos:end]``; EOFError at a cut record."""
    while pos < end:
        if pos + 9 > end:
            raise EOFError(f"record header cut at byte {pos}")
        op = buf[pos]
        (length,) = _u64(buf, pos + 1)
        pos += 9
        if pos + length > end:
            if op == _OP_CHUNK:  # a cut chunk: its complete records are still usable
                yield _OP_CUT_CHUNK, bytes(buf[pos:end])
            raise EOFError(f"record (op 0x{op:02x}) cut at byte {pos}")
        yield op, bytes(buf[pos : pos + length])
        pos += length


class _Scan:
    """Channel table and message records of one file, chunks opened."""

    def __init__(self, topics: set[str] | None) -> None:
        self.topics = topics  # None: every topic
        self.channels: dict[int, str] = {}
        self.types: dict[str, str] = {}
        self.schemas: dict[int, str] = {}

    def handle(self, op: int, rec: bytes) -> Iterator[tuple[str, int, bytes]]:
        if op == 0x03:  # schema: id u16, name string, ...
            sid, nlen = struct.unpack_from("<HI", rec, 0)
            self.schemas[sid] = rec[6 : 6 + nlen].decode()
        elif op == _OP_CHANNEL:  # channel: id u16, schema u16, topic string, ...
            cid, schema, tlen = struct.unpack_from("<HHI", rec, 0)
            name = rec[8 : 8 + tlen].decode()
            self.channels[cid] = name
            if schema in self.schemas:
                self.types[name] = self.schemas[schema]
        elif op == _OP_MESSAGE:  # message: channel u16, seq u32, log_time u64, publish u64
            cid, _seq, log_time, _pub = struct.unpack_from("<HIQQ", rec, 0)
            topic = self.channels.get(cid)
            if topic is not None and (self.topics is None or topic in self.topics):
                yield topic, log_time, rec[22:]
        elif op == _OP_CHUNK:
            from rosbags.rosbag2.storage_mcap import decompress  # the reader's codecs

            _s, _e, usize, crc, clen = struct.unpack_from("<QQQII", rec, 0)
            comp = rec[32 : 32 + clen].decode()
            (rlen,) = _u64(rec, 32 + clen)
            inner = decompress(rec[40 + clen : 40 + clen + rlen], comp, usize, crc)
            for iop, irec in _records(inner, 0, len(inner)):
                yield from self.handle(iop, irec)
        elif op == _OP_CUT_CHUNK and len(rec) > 40:  # readable only if uncompressed
            clen = struct.unpack_from("<I", rec, 28)[0]
            if rec[32 : 32 + clen] == b"":
                for iop, irec in _records(rec, 40 + clen, len(rec)):
                    yield from self.handle(iop, irec)

    def run(self, path: Path, err: list[str]) -> Iterator[tuple[str, int, bytes]]:
        try:
            with open(path, "rb") as fh:
                buf: Buffer
                if path.stat().st_size < _MAP_FROM:
                    buf = fh.read()
                else:
                    buf = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ)
            if buf[:8] != _MAGIC:
                err.append("MCAP magic missing")
                return
            for op, rec in _records(buf, 8, len(buf)):
                if op == _OP_DATA_END:  # the summary follows
                    return
                yield from self.handle(op, rec)
            err.append("MCAP ends without footer")
        except EOFError as exc:
            err.append(f"MCAP {exc}")
        except Exception as exc:  # noqa: BLE001 - any damage: say what, keep what was read
            err.append(f"MCAP: {exc}")


class McapSalvage:
    """Records of an MCAP file read front to back until a record is incomplete."""

    def records(self, path: Path, topics: set[str], err: list[str]
                ) -> Iterator[tuple[str, int, bytes]]:
        """(topic, log time [ns], bytes) of ``topics``; what stopped the scan goes to ``err``."""
        return _Scan(topics).run(path, err)

    def topics(self, path: Path, err: list[str]) -> dict[str, str]:
        """Topic -> type from the schema and channel records before the damage."""
        scan = _Scan(set())
        for _ in scan.run(path, err):
            pass
        return {name: scan.types.get(name, "?") for name in scan.channels.values()}


SALVAGE = McapSalvage()
