"""The bag reader's front: rosbag2 folders (sqlite3 or MCAP) into samples in stamp order.

``open_bag(path, config)`` checks the configured input topics and their types and returns a
:class:`BagSource` (a :class:`~kinematic_monitor.io.sources.SampleSource`);
``BagSource.iter_samples()`` streams samples (memory does not grow with the bag). Message
bytes become samples through the one decoder per type (:mod:`kinematic_monitor.io.decode`);
rejected messages are counted per topic and reason in :attr:`BagSource.stats`.

Ordering: a bag lists messages in receive (log) time order, the order in which the live
node would have received them; they go through the node's own reorder buffer
(``core.ordering.input_buffer``, configured from the same parameters), so replay gives the
monitor exactly the stream the node would: samples in header-stamp order, a ``TimeReset``
marker where the stamps jump back (a new timeline, counted in ``time_jumps``). A sample too
late for stamp order is dropped and counted ('out_of_order'), a repeated one too
('duplicate').

Damage: a bag whose storage file is cut short or corrupt is read up to the damage by the
salvage back-end of its storage (:mod:`kinematic_monitor.io.bag.storage`); the loss is
reported in :attr:`BagSource.damage` (counts per topic expected from the metadata versus
read, last good stamp) instead of raising.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path
from typing import Any

from kinematic_monitor.config.validation import MonitorConfig
from kinematic_monitor.core import ordering
from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import GnssSample, Sample
from kinematic_monitor.io import decode
from kinematic_monitor.io.bag.errors import BagError
from kinematic_monitor.io.bag.inputs import as_config, check_topics, inputs_from_config
from kinematic_monitor.io.bag.storage import (
    SALVAGE,
    RawRecord,
    metadata_topics,
    storage_files,
)
from kinematic_monitor.io.convert import JointMap, Rejected
from kinematic_monitor.io.scalar_inputs import (
    ScalarInput,
    ScalarSettings,
    plan_scalar_input,
    scalar_decoder,
    typestore_fields,
)
from kinematic_monitor.io.sources import BagDamage, Progress, TopicStats

__all__ = ["BagSource", "open_bag"]


class BagSource:
    """An opened bag: topic check done, samples streamed by :meth:`iter_samples`.

    Attributes: ``path``, ``storage`` ('sqlite3' | 'mcap'), ``topics`` (name -> type of
    every topic in the bag), ``message_count`` (messages on the used topics, for a
    progress bar), ``position`` (used messages read so far), ``start`` / ``duration``
    [s] (log clock), ``stats`` (per used topic), ``warnings``, ``damage`` (None if
    the bag read cleanly), ``out_of_order`` and ``time_jumps`` counts.
    """

    def __init__(self, path: str | os.PathLike[str], config: MonitorConfig) -> None:
        self.path = Path(path)
        self.config = config
        self.inputs = inputs = inputs_from_config(config)
        self.warnings: list[str] = []
        self.damage: BagDamage | None = None
        self.out_of_order = 0
        self.time_jumps = 0
        self.fixes: list[GnssSample] = []
        self.late_by = 0.0  # [s] largest lateness of a message dropped as too late
        self.position = 0
        self.scalar_inputs: dict[str, list[ScalarInput]] = {}
        self.storage, self._files, meta = storage_files(self.path)
        self._reader: Any = None  # rosbags.rosbag2.Reader while open and readable
        self._open_error = ""
        self.start = math.nan
        self.duration = math.nan
        found = self._open(meta)
        self.topics = {name: t for name, (t, _) in found.items()}
        # used topic -> (input name, message type)
        self._used = check_topics(inputs, found, str(self.path), self.warnings)
        self.stats = {
            name: TopicStats(name, msgtype, expected=found[name][1])
            for name, (_, msgtype) in self._used.items()
        }
        self.message_count = sum(s.expected for s in self.stats.values())

    # -- set-up ---------------------------------------------------------------------------

    def _open(self, meta: dict[str, Any] | None) -> dict[str, tuple[str, int]]:
        """Open the rosbags reader; on failure, the topics from the metadata or salvage.

        Returns topic -> (type, message count).
        """
        found: dict[str, tuple[str, int]] = {}
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
            return found
        except Exception as exc:  # noqa: BLE001 - any reader failure means damage
            self._open_error = str(exc) or type(exc).__name__
        if meta is not None:
            ns = meta.get("starting_time", {}).get("nanoseconds_since_epoch")
            dur = meta.get("duration", {}).get("nanoseconds")
            if ns is not None and dur is not None:
                self.start, self.duration = ns * 1e-9, dur * 1e-9
            return metadata_topics(meta)
        err: list[str] = []
        names = SALVAGE[self.storage].topics(self._files[0], err)
        if not names:
            detail = "; ".join([self._open_error, *err])
            raise BagError(f"bag {str(self.path)!r} unreadable ({detail}) and has no "
                           "metadata.yaml naming its topics")
        return {name: (msgtype, 0) for name, msgtype in names.items()}

    # -- decoding -------------------------------------------------------------------------

    def _decoders(self) -> dict[str, decode.Decoder]:
        """Topic -> decoder of its CDR bytes, for the topics of standard types."""
        inp = self.inputs
        jmap = JointMap(inp.steering_joints, inp.front_wheel_joints, inp.rear_wheel_joints,
                        steering_ratio=inp.steering_ratio) if inp.joint_states else None
        scalar_topics = {sc.topic for sc in inp.scalars}
        return {topic: decode.decoder_for(msgtype, jmap, inp.max_steer)
                for topic, (_, msgtype) in self._used.items() if topic not in scalar_topics}

    def _scalar_decoders(self) -> dict[str, Callable[[bytes, int], Sample | Rejected]]:
        """Topic -> decoder of (CDR bytes, log time [ns]) for the single-value inputs.

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
            fields_of = typestore_fields(store)
            try:
                planned = [plan_scalar_input(sc, fields_of) for sc in group]
            except ValueError as exc:
                raise BagError(str(exc)) from None
            self.scalar_inputs[topic] = planned
            out[topic] = scalar_decoder(store, group[0].type_name, planned)
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
        salvage = SALVAGE[self.storage]
        for f in self._files:
            yield from salvage.records(f, topics, err)

    # -- the stream -----------------------------------------------------------------------

    def iter_samples(self, progress: Progress | None = None, progress_every: int = 5000
                     ) -> Iterator[Sample | TimeReset]:
        """Samples of all used topics in header-stamp order (see module docstring).

        ``progress(position, message_count)`` is called every ``progress_every`` messages.
        """
        decoders = self._decoders()
        scalar = self._scalar_decoders()
        receive_stamped = {t for t, ins in self.scalar_inputs.items()
                           if ins[0].receive_time_stamped}
        stats = self.stats
        buf = ordering.input_buffer(self.config)
        push = buf.push
        err: list[str] = []
        # topic -> (stats, decoder of the bytes or None, receive-time stamped, stream name)
        table = {t: (stats[t], decoders.get(t), t in receive_stamped, self._used[t][0])
                 for t in stats}
        rejected = Rejected
        for topic, log_ns, data in self._raw(err):
            self.position += 1
            st, fn, rstamped, stream = table[topic]
            st.read += 1
            if progress is not None and self.position % progress_every == 0:
                progress(self.position, self.message_count)
            got = fn(data) if fn is not None else scalar[topic](data, log_ns)
            if isinstance(got, rejected):
                st.rejected[got.reason] += 1
                continue
            st.accepted += 1
            if rstamped:
                st.receive_time_stamped += 1
            if type(got) is GnssSample:  # map placement only: not the monitor's stream
                self.fixes.append(got)
                continue
            late, repeated = buf.late_dropped, buf.duplicates
            released = push(got, stream)
            if buf.late_dropped != late or buf.duplicates != repeated:
                # dropped at once by the buffer: it is this sample
                st.accepted -= 1
                if buf.late_dropped != late:
                    self.out_of_order += 1
                    st.rejected["out_of_order"] += 1
                else:
                    st.rejected["duplicate"] += 1
            if released:
                self.time_jumps = buf.resets
                yield from released
        yield from buf.flush()
        self.time_jumps = buf.resets
        self.late_by = buf.late_by
        last_out = buf.last_released
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


def open_bag(path: str | os.PathLike[str],
             config: MonitorConfig | Mapping[str, Any] | None = None) -> BagSource:
    """Open a rosbag2 folder (or a single .db3/.mcap file) for the configured inputs.

    ``config``: a MonitorConfig, a dict of parameters (nested, dotted or in the ROS
    parameter-file form) or None for the defaults; the inputs and the reorder buffer
    (``inputs.reorder_window``, ``timeouts.*``) come from it. Raises BagError naming the
    problem (missing needed topic, wrong type, unreadable bag, bad parameter).
    """
    return BagSource(path, as_config(config))
