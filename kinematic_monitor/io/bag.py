"""Read rosbag2 folders (sqlite3 or MCAP) into samples in header-stamp order.

``open_bag(path, config)`` checks the configured input topics and their types and
returns a :class:`BagSource`; ``BagSource.iter_samples()`` streams samples (memory
does not grow with the bag). Message bytes are decoded (only the used fields) and
converted in one step by :mod:`kinematic_monitor.io.fastpath`, with the rules and rejection
reasons of :mod:`kinematic_monitor.io.convert`; rejected messages are counted per topic and
reason in :attr:`BagSource.stats`.

Ordering: a bag lists messages in receive (log) time order; header stamps of each topic
are nearly in that order. Samples wait in a heap keyed by header stamp until the log
clock has moved ``reorder_window`` seconds past their own log time, then leave in stamp
order. A sample that would still go backwards is dropped and counted ('out_of_order');
a stamp more than ``reset_threshold`` behind the newest one starts a new timeline
(buffer flushed, counted in ``time_jumps``).

Damage: a bag whose storage file is cut short or corrupt is read up to the damage; the
loss is reported in :attr:`BagSource.damage` (counts per topic expected from the
metadata versus read, last good stamp) instead of raising.
"""

from __future__ import annotations

import dataclasses
import heapq
import math
import os
import shutil
import sqlite3
import struct
import tempfile
from collections import Counter
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from kinematic_monitor.core.samples import Sample
from kinematic_monitor.io import cdr, fastpath, fieldpath
from kinematic_monitor.io.convert import (
    JointMap,
    Rejected,
    ScalarInput,
    ScalarSettings,
    chassis_from_scalar_msg,
)
from kinematic_monitor.io.convert import scalar_settings as convert_scalar_settings

__all__ = [
    "BagError",
    "BagInputs",
    "BagDamage",
    "TopicStats",
    "BagSource",
    "inputs_from_config",
    "open_bag",
]

JOINT_STATE = "sensor_msgs/msg/JointState"
ODOMETRY = "nav_msgs/msg/Odometry"
POSE_COV = "geometry_msgs/msg/PoseWithCovarianceStamped"
IMU = "sensor_msgs/msg/Imu"
NAVSATFIX = "sensor_msgs/msg/NavSatFix"

LOCALIZATION_TYPES = {"odometry": ODOMETRY, "pose_with_covariance": POSE_COV}


class BagError(Exception):
    """The bag cannot be used: unreadable, or a needed topic missing or mistyped."""


@dataclass(frozen=True)
class BagInputs:
    """Which topics to read and how (the ``inputs.*`` parameters)."""

    joint_states: str = "/joint_states"
    steering_joints: tuple[str, ...] = ("front_left_steer_joint", "front_right_steer_joint")
    front_wheel_joints: tuple[str, ...] = ("front_left_wheel_joint", "front_right_wheel_joint")
    rear_wheel_joints: tuple[str, ...] = ("rear_left_wheel_joint", "rear_right_wheel_joint")
    localization: str = "/localization/odom"
    localization_type: str = "odometry"
    imu: str = "/imu/data"
    gnss: str = "/gnss/fix"
    max_steer: float = math.pi / 2  # [rad] largest physical road-wheel angle
    # steer joints report steering-wheel angles when != 1 (divided at conversion)
    steering_ratio: float = 1.0
    # steering / speed from other message types (inputs.steering.*, inputs.speed.*)
    scalars: tuple[ScalarSettings, ...] = ()


def _lookup(config: Any, dotted: str) -> Any:
    """Value of a dotted parameter in a MonitorConfig, nested or flat dict; KeyError if absent."""
    if config is None:
        raise KeyError(dotted)
    getter = getattr(config, "get", None)
    if not isinstance(config, Mapping) and callable(getter):
        return getter(dotted)  # MonitorConfig.get(name)
    if not isinstance(config, Mapping):
        raise KeyError(dotted)
    if dotted in config:
        return config[dotted]
    if len(config) == 1:  # ROS parameter-file form: {node: {ros__parameters: {...}}}
        (only,) = config.values()
        if isinstance(only, Mapping) and "ros__parameters" in only:
            return _lookup(only["ros__parameters"], dotted)
    node: Any = config
    for part in dotted.split("."):
        if not isinstance(node, Mapping) or part not in node:
            raise KeyError(dotted)
        node = node[part]
    return node


def inputs_from_config(config: Any) -> BagInputs:
    """BagInputs from a MonitorConfig or a dict (missing names take their defaults).

    Reads ``inputs.joint_states.{topic,steering_joints,front_wheel_joints,
    rear_wheel_joints}``, ``inputs.localization.{topic,type}``, ``inputs.imu.topic``,
    ``inputs.gnss.topic``, ``vehicle.max_road_wheel_angle`` [rad] and the single-value
    inputs ``inputs.steering.*`` / ``inputs.speed.*``: a configured steering input replaces
    the JointState steer joints, a speed input its wheel joints; with both, JointState is
    not read.
    """
    from kinematic_monitor.config.schema import SPEC_BY_NAME

    base = BagInputs()

    def get(name: str, default: Any) -> Any:
        try:
            return _lookup(config, name)
        except KeyError:
            return default

    try:
        scalars = tuple(convert_scalar_settings(lambda n: get(n, SPEC_BY_NAME[n].default)))
    except ValueError as exc:
        raise BagError(str(exc)) from None
    roles = {sc.role for sc in scalars}

    inputs = BagInputs(
        joint_states=str(get("inputs.joint_states.topic", base.joint_states)),
        steering_joints=tuple(get("inputs.joint_states.steering_joints", base.steering_joints)),
        front_wheel_joints=tuple(
            get("inputs.joint_states.front_wheel_joints", base.front_wheel_joints)
        ),
        rear_wheel_joints=tuple(
            get("inputs.joint_states.rear_wheel_joints", base.rear_wheel_joints)
        ),
        localization=str(get("inputs.localization.topic", base.localization)),
        localization_type=str(get("inputs.localization.type", base.localization_type)),
        imu=str(get("inputs.imu.topic", base.imu)),
        gnss=str(get("inputs.gnss.topic", base.gnss)),
        max_steer=float(get("vehicle.max_road_wheel_angle", base.max_steer)),
        steering_ratio=float(get("vehicle.steering_ratio", base.steering_ratio)),
        scalars=scalars,
    )
    if "steering" in roles:
        inputs = dataclasses.replace(inputs, steering_joints=())
    if "speed" in roles:
        inputs = dataclasses.replace(inputs, front_wheel_joints=(), rear_wheel_joints=())
    if roles == {"steering", "speed"}:
        inputs = dataclasses.replace(inputs, joint_states="")
    if inputs.localization_type not in LOCALIZATION_TYPES:
        raise BagError(
            f"inputs.localization.type is {inputs.localization_type!r}; "
            f"allowed: {sorted(LOCALIZATION_TYPES)}"
        )
    return inputs


@dataclass
class TopicStats:
    """Per-topic counters: messages read, samples produced, rejections by reason."""

    topic: str
    msgtype: str
    expected: int = 0  # from the bag's metadata
    read: int = 0
    accepted: int = 0
    rejected: Counter[str] = field(default_factory=Counter)
    # samples stamped with the log (receive) time: the message has no header
    receive_time_stamped: int = 0


@dataclass
class BagDamage:
    """What a truncated or corrupt bag lost."""

    error: str
    expected: dict[str, int]  # per topic, from the metadata (0 when unknown)
    read: dict[str, int]  # per topic, messages actually read
    last_good_stamp: float  # [s] newest header stamp released before the damage (NaN: none)
    recovered_with: str  # how the readable part was read

    def summary(self) -> str:
        """One line: what was lost and where it stopped."""
        lost = ", ".join(
            f"{t}: {self.read.get(t, 0)}/{n if n else '?'}" for t, n in self.expected.items()
        )
        return (
            f"bag damaged ({self.error}); read up to stamp {self.last_good_stamp:.3f} s; "
            f"messages read/expected per topic: {lost}"
        )


# raw record stream: (topic, log time [ns], CDR bytes)
RawRecord = tuple[str, int, bytes]


def _storage_files(path: Path) -> tuple[str, list[Path], dict[str, Any] | None]:
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
        files = sorted(p for p in path.iterdir() if p.suffix in (".db3", ".mcap"))
    if not files:
        raise BagError(f"no .db3 or .mcap storage file in {str(path)!r}")
    suffixes = {p.suffix for p in files}
    if len(suffixes) > 1:
        raise BagError(f"bag {str(path)!r} mixes storage formats {sorted(suffixes)}")
    storage = "sqlite3" if files[0].suffix == ".db3" else "mcap"
    if meta is not None and meta.get("storage_identifier", storage) != storage:
        raise BagError(
            f"bag metadata says storage {meta.get('storage_identifier')!r} "
            f"but the files are {storage}"
        )
    return storage, files, meta


def _meta_topics(meta: dict[str, Any]) -> dict[str, tuple[str, int]]:
    out: dict[str, tuple[str, int]] = {}
    for entry in meta.get("topics_with_message_count", []) or []:
        tm = entry["topic_metadata"]
        out[tm["name"]] = (tm["type"], int(entry.get("message_count", 0)))
    return out


# ---- damaged storage: read what is readable --------------------------------------------


def _sqlite_salvage(db: Path, topics: set[str], err: list[str]) -> Iterator[RawRecord]:
    """Rows of a cut-short sqlite3 file, in insertion order, until the damage.

    SQLite refuses a file shorter than its header's page count, so a temporary copy with
    the page count set to what is there is read instead.
    """
    with tempfile.TemporaryDirectory(prefix="km_bag_") as tmp:
        copy = Path(tmp) / db.name
        shutil.copyfile(db, copy)
        size = copy.stat().st_size
        with open(copy, "r+b") as fh:
            head = fh.read(100)
            if len(head) < 100 or not head.startswith(b"SQLite format 3\0"):
                err.append("sqlite3 header missing")
                return
            (page,) = struct.unpack(">H", head[16:18])
            page = 65536 if page == 1 else page
            fh.seek(28)
            fh.write(struct.pack(">I", size // page))
        con = sqlite3.connect(f"file:{copy}?immutable=1", uri=True)
        try:
            ids = {
                tid: name
                for tid, name in con.execute("SELECT id, name FROM topics")
                if name in topics
            }
            for tid, stamp, data in con.execute(
                "SELECT topic_id, timestamp, data FROM messages ORDER BY id"
            ):
                name = ids.get(tid)
                if name is not None:
                    yield name, int(stamp), bytes(data)
        except sqlite3.DatabaseError as exc:
            err.append(f"sqlite3: {exc}")
        finally:
            con.close()


def _mcap_salvage(path: Path, topics: set[str], err: list[str]) -> Iterator[RawRecord]:
    """Message records of an MCAP file read front to back until a record is incomplete."""
    from rosbags.rosbag2.storage_mcap import decompress  # same codecs as the reader

    channels: dict[int, str] = {}
    u64 = struct.Struct("<Q").unpack_from

    def records(buf: bytes, pos: int, end: int) -> Iterator[tuple[int, bytes]]:
        while pos < end:
            if pos + 9 > end:
                raise EOFError(f"record header cut at byte {pos}")
            op = buf[pos]
            (length,) = u64(buf, pos + 1)
            pos += 9
            if pos + length > end:
                if op == 0x06:  # a cut chunk: its complete records are still usable
                    yield 0x106, buf[pos:end]
                raise EOFError(f"record (op 0x{op:02x}) cut at byte {pos}")
            yield op, buf[pos : pos + length]
            pos += length

    def handle(op: int, rec: bytes) -> Iterator[RawRecord]:
        if op == 0x04:  # channel: id u16, schema u16, topic string, ...
            cid, _schema, tlen = struct.unpack_from("<HHI", rec, 0)
            channels[cid] = rec[8 : 8 + tlen].decode()
        elif op == 0x05:  # message: channel u16, seq u32, log_time u64, publish u64, data
            cid, _seq, log_time, _pub = struct.unpack_from("<HIQQ", rec, 0)
            name = channels.get(cid)
            if name in topics:
                yield name, log_time, rec[22:]
        elif op == 0x06:  # chunk
            _s, _e, usize, crc, clen = struct.unpack_from("<QQQII", rec, 0)
            comp = rec[32 : 32 + clen].decode()
            (rlen,) = u64(rec, 32 + clen)
            data = rec[40 + clen : 40 + clen + rlen]
            inner = decompress(data, comp, usize, crc)
            for iop, irec in records(inner, 0, len(inner)):
                yield from handle(iop, irec)
        elif op == 0x106 and len(rec) > 40:  # cut chunk, readable only if uncompressed
            clen = struct.unpack_from("<I", rec, 28)[0]
            if rec[32 : 32 + clen] == b"":
                for iop, irec in records(rec, 40 + clen, len(rec)):
                    yield from handle(iop, irec)

    try:
        with open(path, "rb") as fh:
            buf = fh.read() if path.stat().st_size < (1 << 26) else b""
            if not buf:  # large file: map it instead of reading it in
                import mmap

                buf = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ)  # type: ignore[assignment]
        if buf[:8] != b"\x89MCAP0\r\n":
            err.append("MCAP magic missing")
            return
        for op, rec in records(buf, 8, len(buf)):
            if op == 0x0F:  # data end: summary follows
                return
            yield from handle(op, rec)
        err.append("MCAP ends without footer")
    except EOFError as exc:
        err.append(f"MCAP {exc}")
    except (struct.error, UnicodeDecodeError, ValueError, Exception) as exc:  # noqa: BLE001
        err.append(f"MCAP: {exc}")


# ---- the source --------------------------------------------------------------------------


class BagSource:
    """An opened bag: topic check done, samples streamed by :meth:`iter_samples`.

    Attributes: ``path``, ``storage`` ('sqlite3' | 'mcap'), ``topics`` (name -> type of
    every topic in the bag), ``message_count`` (messages on the used topics, for a
    progress bar), ``position`` (used messages read so far), ``start`` / ``duration``
    [s] (log clock), ``stats`` (per used topic), ``warnings``, ``damage`` (None if
    the bag read cleanly), ``out_of_order`` and ``time_jumps`` counts.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        inputs: BagInputs,
        *,
        reorder_window: float = 0.5,
        reset_threshold: float = 5.0,
    ) -> None:
        self.path = Path(path)
        self.inputs = inputs
        self.reorder_window = float(reorder_window)
        self.reset_threshold = float(reset_threshold)
        self.warnings: list[str] = []
        self.damage: BagDamage | None = None
        self.out_of_order = 0
        self.time_jumps = 0
        self.position = 0
        self.scalar_inputs: dict[str, list[ScalarInput]] = {}
        self.storage, self._files, meta = _storage_files(self.path)
        self._reader: Any = None
        self._open_error = ""
        found: dict[str, tuple[str, int]] = {}
        self.start = math.nan
        self.duration = math.nan
        try:
            from rosbags.rosbag2 import Reader

            target = self.path if meta is not None or self.path.is_file() else self._files[0]
            reader = Reader(target)
            reader.open()
            self._reader = reader
            for name, info in reader.topics.items():
                found[name] = (info.msgtype or "?", int(info.msgcount))
            if reader.message_count:
                self.start = reader.start_time * 1e-9
                self.duration = reader.duration * 1e-9
        except Exception as exc:  # noqa: BLE001 - any reader failure means damage
            self._open_error = str(exc) or type(exc).__name__
            if meta is not None:
                found = _meta_topics(meta)
                ns = meta.get("starting_time", {}).get("nanoseconds_since_epoch")
                dur = meta.get("duration", {}).get("nanoseconds")
                if ns is not None and dur is not None:
                    self.start, self.duration = ns * 1e-9, dur * 1e-9
            elif self.storage == "sqlite3":
                found = self._sqlite_topics_salvage()
            else:
                raise BagError(
                    f"bag {str(self.path)!r} unreadable ({self._open_error}) and has no "
                    "metadata.yaml naming its topics"
                ) from None
        self.topics = {name: t for name, (t, _) in found.items()}
        self._used = self._check_topics(found)
        self.stats = {
            name: TopicStats(name, msgtype, expected=found[name][1])
            for name, msgtype in self._used.items()
        }
        self.message_count = sum(s.expected for s in self.stats.values())

    # -- set-up ---------------------------------------------------------------------------

    def _sqlite_topics_salvage(self) -> dict[str, tuple[str, int]]:
        err: list[str] = []
        names: dict[str, tuple[str, int]] = {}
        # topics table sits at the start of the file; a salvage pass over zero topics reads it
        with tempfile.TemporaryDirectory(prefix="km_bag_") as tmp:
            copy = Path(tmp) / "head.db3"
            with open(self._files[0], "rb") as src, open(copy, "wb") as dst:
                dst.write(src.read(1 << 20))
            size = copy.stat().st_size
            try:
                with open(copy, "r+b") as fh:
                    head = fh.read(100)
                    (page,) = struct.unpack(">H", head[16:18])
                    page = 65536 if page == 1 else page
                    fh.seek(28)
                    fh.write(struct.pack(">I", size // page))
                con = sqlite3.connect(f"file:{copy}?immutable=1", uri=True)
                try:
                    for name, msgtype in con.execute("SELECT name, type FROM topics"):
                        names[name] = (msgtype, 0)
                finally:
                    con.close()
            except (sqlite3.DatabaseError, struct.error, OSError) as exc:
                err.append(str(exc))
        if not names:
            raise BagError(
                f"bag {str(self.path)!r} unreadable ({self._open_error}; {'; '.join(err)})"
            )
        return names

    def _check_topics(self, found: dict[str, tuple[str, int]]) -> dict[str, str]:
        """Used topic -> type; BagError for a missing needed topic or any wrong type."""
        inp = self.inputs
        wanted = [
            ("inputs.joint_states.topic", inp.joint_states, JOINT_STATE, True),
            (
                "inputs.localization.topic",
                inp.localization,
                LOCALIZATION_TYPES[inp.localization_type],
                True,
            ),
            ("inputs.imu.topic", inp.imu, IMU, False),
            ("inputs.gnss.topic", inp.gnss, NAVSATFIX, False),
        ]
        used: dict[str, str] = {}
        available = ", ".join(f"{n} ({t})" for n, (t, _) in sorted(found.items())) or "none"
        for param, topic, expected, needed in wanted:
            if not topic:
                continue
            if topic not in found:
                text = (
                    f"topic {topic!r} ({param}, type {expected}) is not in bag "
                    f"{str(self.path)!r}; topics there: {available}"
                )
                if needed:
                    raise BagError(text)
                self.warnings.append(text)
                continue
            got = found[topic][0]
            if got != expected:
                hint = ""
                if param == "inputs.localization.topic" and got in LOCALIZATION_TYPES.values():
                    other = next(k for k, v in LOCALIZATION_TYPES.items() if v == got)
                    hint = f" (set inputs.localization.type to {other!r})"
                raise BagError(
                    f"topic {topic!r} ({param}) has type {got}, expected {expected}{hint}"
                )
            if topic in used:
                raise BagError(f"topic {topic!r} is configured for two inputs")
            used[topic] = expected
        for sc in inp.scalars:
            param = f"{sc.param_prefix}.topic"
            if sc.topic not in found:
                raise BagError(
                    f"topic {sc.topic!r} ({param}, type {sc.type_name}) is not in bag "
                    f"{str(self.path)!r}; topics there: {available}")
            got = found[sc.topic][0]
            if got != sc.type_name:
                raise BagError(f"topic {sc.topic!r} ({param}) has type {got}, "
                               f"expected {sc.type_name} ({sc.param_prefix}.type)")
            if used.get(sc.topic, sc.type_name) != sc.type_name:
                raise BagError(f"topic {sc.topic!r} is configured for two inputs")
            used[sc.topic] = sc.type_name
        return used

    # -- decoding -------------------------------------------------------------------------

    def _converters(self) -> dict[str, Callable[[bytes], Sample | Rejected]]:
        """Topic -> fused decode + convert of its CDR bytes (see :mod:`.fastpath`)."""
        inp = self.inputs
        jmap = JointMap(inp.steering_joints, inp.front_wheel_joints, inp.rear_wheel_joints,
                        steering_ratio=inp.steering_ratio) if inp.joint_states else None
        scalar_topics = {sc.topic for sc in inp.scalars}
        return {topic: fastpath.converter_for(t, jmap, inp.max_steer)
                for topic, t in self._used.items() if topic not in scalar_topics}

    def _scalar_converters(self) -> dict[str, Callable[[bytes, int], Sample | Rejected]]:
        """Topic -> converter of (CDR bytes, log time [ns]) for the single-value inputs.

        Messages are decoded by the rosbags generic deserialiser with the message
        definitions stored in the bag (standard definitions when the bag has none); the
        field path is checked against that definition here (BagError naming topic, type
        and path when it does not lead to a number).
        """
        by_topic: dict[str, list[ScalarSettings]] = {}
        for sc in self.inputs.scalars:
            by_topic.setdefault(sc.topic, []).append(sc)
        out: dict[str, Callable[[bytes, int], Sample | Rejected]] = {}
        self.scalar_inputs = {}
        for topic, group in by_topic.items():
            store = self._typestore_for(topic, group[0].type_name)
            fields_of = _typestore_fields(store)
            try:
                planned = [plan_scalar(sc, fields_of) for sc in group]
            except ValueError as exc:
                raise BagError(str(exc)) from None
            self.scalar_inputs[topic] = planned
            out[topic] = _scalar_converter(store, group[0].type_name, planned)
        return out

    def _typestore_for(self, topic: str, type_name: str) -> Any:
        """A rosbags typestore knowing ``type_name`` as defined in the bag."""
        from rosbags.interfaces import MessageDefinitionFormat
        from rosbags.typesys import Stores, get_types_from_idl, get_types_from_msg, get_typestore

        conns = [c for c in self._reader.connections if c.topic == topic] \
            if self._reader is not None else []
        typs: dict[str, Any] = {}
        try:
            for c in conns:
                fmt, data = c.msgdef.format, c.msgdef.data
                if fmt == MessageDefinitionFormat.MSG and data:
                    typs.update(get_types_from_msg(data, c.msgtype))
                elif fmt == MessageDefinitionFormat.IDL and data:
                    sep = "=" * 80 + "\n"
                    parts = data.split(sep)[1:] if data.startswith(f"{sep}IDL: ") else [data]
                    for part in parts:
                        typs.update(get_types_from_idl(part.split("\n", 1)[1]
                                                       if part.startswith("IDL: ") else part))
        except Exception as exc:  # noqa: BLE001 - any parser error: say which definition
            raise BagError(f"topic {topic!r}: message definition of {type_name} in the bag "
                           f"cannot be parsed: {exc}") from None
        if type_name in typs:
            store = get_typestore(Stores.EMPTY)
            store.register(typs)
            return store
        store = get_typestore(Stores.LATEST)
        if type_name not in store.fielddefs:
            raise BagError(f"topic {topic!r}: bag {str(self.path)!r} carries no message "
                           f"definition for {type_name} and it is not a standard type")
        return store

    def _raw(self, err: list[str]) -> Iterator[RawRecord]:
        """(topic, log ns, bytes) of the used topics in log order; errors go to ``err``."""
        topics = set(self._used)
        if self._reader is not None:
            reader = self._reader
            conns = [c for c in reader.connections if c.topic in topics]
            try:
                for conn, log_ns, data in reader.messages(connections=conns):
                    yield conn.topic, log_ns, data
            except Exception as exc:  # noqa: BLE001 - damage found while reading
                err.append(str(exc) or type(exc).__name__)
            return
        err.append(self._open_error)
        for f in self._files:
            if self.storage == "sqlite3":
                yield from _sqlite_salvage(f, topics, err)
            else:
                yield from _mcap_salvage(f, topics, err)

    # -- the stream -----------------------------------------------------------------------

    def iter_samples(
        self, progress: Callable[[int, int], None] | None = None, progress_every: int = 5000
    ) -> Iterator[Sample]:
        """Samples of all used topics in header-stamp order (see module docstring).

        ``progress(position, message_count)`` is called every ``progress_every`` messages.
        """
        convert = self._converters()
        sconvert = self._scalar_converters()
        receive_stamped = {t for t, ins in self.scalar_inputs.items()
                           if ins[0].receive_time_stamped}
        stats = self.stats
        window_ns = int(self.reorder_window * 1e9)
        jump = self.reset_threshold
        heap: list[tuple[float, int, int, str, Sample]] = []
        push, pop = heapq.heappush, heapq.heappop
        seq = 0
        newest = -math.inf
        last_out = -math.inf
        err: list[str] = []
        # topic -> (stats, fused converter of the bytes or None, receive-time stamped)
        table = {t: (stats[t], convert.get(t), t in receive_stamped) for t in stats}
        for topic, log_ns, data in self._raw(err):
            self.position += 1
            st, fn, rstamped = table[topic]
            st.read += 1
            if progress is not None and self.position % progress_every == 0:
                progress(self.position, self.message_count)
            try:
                got = fn(data) if fn is not None else sconvert[topic](data, log_ns)
            except cdr.CdrError:
                st.rejected["malformed"] += 1
                continue
            if isinstance(got, Rejected):
                st.rejected[got.reason] += 1
                continue
            st.accepted += 1
            if rstamped:
                st.receive_time_stamped += 1
            stamp = got.stamp
            if stamp < newest - jump:
                # a new timeline (bag restarted, simulated time reset): release the old one
                self.time_jumps += 1
                while heap:
                    yield pop(heap)[4]
                newest = last_out = -math.inf
            if stamp > newest:
                newest = stamp
            seq += 1
            push(heap, (stamp, seq, log_ns, topic, got))
            release = log_ns - window_ns
            while heap and heap[0][2] <= release:
                s, _, _, t, sample = pop(heap)
                if s < last_out:
                    self._late(t)
                    continue
                last_out = s
                yield sample
        while heap:
            s, _, _, t, sample = pop(heap)
            if s < last_out:
                self._late(t)
                continue
            last_out = s
            yield sample
        if progress is not None:
            progress(self.position, self.message_count)
        errors = [e for e in err if e]
        if errors:
            self.damage = BagDamage(
                error="; ".join(errors),
                expected={t: s.expected for t, s in stats.items()},
                read={t: s.read for t, s in stats.items()},
                last_good_stamp=last_out if last_out > -math.inf else math.nan,
                recovered_with="rosbags reader" if self._reader is not None else "salvage scan",
            )

    def _late(self, topic: str) -> None:
        self.out_of_order += 1
        st = self.stats[topic]
        st.accepted -= 1
        st.rejected["out_of_order"] += 1

    # -- life cycle -----------------------------------------------------------------------

    def close(self) -> None:
        """Release the storage files."""
        reader, self._reader = self._reader, None
        if reader is not None:
            reader.close()

    def __enter__(self) -> BagSource:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_bag(
    path: str | os.PathLike[str],
    config: Any = None,
    *,
    reorder_window: float = 0.5,
    reset_threshold: float = 5.0,
) -> BagSource:
    """Open a rosbag2 folder (or a single .db3/.mcap file) for the configured inputs.

    ``config``: a MonitorConfig, a dict of parameters (nested, dotted or in the ROS
    parameter-file form) or None for the defaults. ``reorder_window`` [s of log time]
    bounds how long a sample waits for earlier-stamped ones; ``reset_threshold`` [s]
    is the backwards stamp jump taken as a new timeline. Raises BagError naming the
    problem (missing needed topic, wrong type, unreadable bag).
    """
    return BagSource(
        path,
        inputs_from_config(config),
        reorder_window=reorder_window,
        reset_threshold=reset_threshold,
    )


# ---- single-value inputs (generic deserialiser + field paths) ---------------------------

def _typestore_fields(store: Any) -> fieldpath.FieldsOf:
    """fieldpath look-up (type name -> fields) over a rosbags typestore's definitions."""
    from rosbags.interfaces import Nodetype

    def field_type(desc: Any) -> fieldpath.FieldType:
        kind, detail = desc
        if kind == Nodetype.BASE:
            return fieldpath.FieldType(str(detail[0]))
        if kind == Nodetype.NAME:
            return fieldpath.FieldType(str(detail))
        inner, length = detail
        base = field_type(inner).base
        if kind == Nodetype.ARRAY:
            return fieldpath.FieldType(base, "fixed", int(length))
        return fieldpath.FieldType(base, "sequence", int(length or 0))

    def fields_of(name: str) -> dict[str, fieldpath.FieldType] | None:
        entry = store.fielddefs.get(name)
        if entry is None:
            return None
        return {fname: field_type(desc) for fname, desc in entry[1]}

    return fields_of


def plan_scalar(settings: ScalarSettings, fields_of: fieldpath.FieldsOf) -> ScalarInput:
    """convert.plan_scalar_input (kept here so tests can patch the look-up)."""
    from kinematic_monitor.io.convert import plan_scalar_input

    return plan_scalar_input(settings, fields_of)


def _scalar_converter(store: Any, type_name: str, planned: list[ScalarInput]
                      ) -> Callable[[bytes, int], Sample | Rejected]:
    deserialize = store.deserialize_cdr

    def convert(buf: bytes, log_ns: int) -> Sample | Rejected:
        try:
            msg = deserialize(buf, type_name)
        except Exception as exc:  # noqa: BLE001 - rosbags raises several error types
            raise cdr.CdrError(str(exc)) from None
        return chassis_from_scalar_msg(msg, planned, log_ns * 1e-9)

    return convert
