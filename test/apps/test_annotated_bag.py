"""The annotated bag of ``replay --write-bag`` read by reference readers, not by our own code.

* MCAP: the ``mcap`` library's reader (file structure, summary, CRCs) finds a schema for
  every channel (``ros2msg`` definitions, the form rosbag2 and MCAP viewers decode from),
  and ``mcap-ros2-support`` decodes every message from those embedded definitions.
* sqlite3: rosbags reads the bag; every topic carries its message definition in the
  ``message_definitions`` table (rosbag2 storage version 9), every message deserializes with
  a type store built only from those definitions, and SQLite's own integrity check passes.

The tests read only the files that ``replay`` wrote (the message encoding is the writer's
business); the monitor's topics are the ones README's "Annotated bag" section explains.
"""

from __future__ import annotations

import json
import sqlite3
from collections import Counter
from pathlib import Path
from typing import Any

import pytest

from kinematic_monitor.apps import cli

pytest.importorskip("rosbags")

OUR_TOPICS = {
    "/diagnostics": "diagnostic_msgs/msg/DiagnosticArray",
    "/kinematic_monitor/prediction": "nav_msgs/msg/Odometry",
    "/kinematic_monitor/events": "diagnostic_msgs/msg/DiagnosticStatus",
}
FAULT = "loc-jump:start=3,dx=0,dy=4,duration=1"  # an undeclared 4 m sideways jump at 3 s


def _replay(tmp: Path, storage: str) -> tuple[Path, Path]:
    """(input bag, replay output folder) for a 6 s drive with a localisation jump."""
    bag = tmp / "drive"
    assert cli.main(["simulate", "skidpad_circle", "--duration", "6", "--storage", storage,
                     "--fault", FAULT, "--out", str(bag), "--no-progress"]) == 0
    out = tmp / "replay"
    assert cli.main(["replay", str(bag), "--params", str(bag / "params.yaml"), "--out",
                     str(out), "--no-report", "--write-bag"]) == 0
    return bag, out


def _input_counts(bag: Path) -> dict[str, tuple[str, int]]:
    from rosbags.rosbag2 import Reader

    with Reader(bag) as r:
        return {c.topic: (c.msgtype, c.msgcount) for c in r.connections}


def _events(out: Path) -> list[dict[str, Any]]:
    return list(json.loads((out / "events.json").read_text())["events"])


def _text_of_status(status: Any) -> str:
    return status.name + " " + " ".join(f"{kv.key}={kv.value}" for kv in status.values)


def test_mcap_reader_finds_a_schema_for_every_channel_and_decodes_every_message(
        tmp_path: Path) -> None:
    bag, out = _replay(tmp_path, "mcap")
    mcap_reader = pytest.importorskip("mcap.reader")
    mcap_ros2 = pytest.importorskip("mcap_ros2.decoder")
    files = list((out / "annotated_bag").glob("*.mcap"))
    assert len(files) == 1
    with open(files[0], "rb") as fh:
        reader = mcap_reader.make_reader(fh, validate_crcs=True,
                                         decoder_factories=[mcap_ros2.DecoderFactory()])
        assert reader.get_header().profile == "ros2"
        summary = reader.get_summary()
        assert summary is not None and summary.statistics is not None
        topics = {}
        for channel in summary.channels.values():
            schema = summary.schemas.get(channel.schema_id)
            assert schema is not None, f"{channel.topic} has no schema"
            assert schema.encoding == "ros2msg" and schema.data, channel.topic
            assert channel.message_encoding == "cdr"
            topics[channel.topic] = schema.name
        for topic, msgtype in OUR_TOPICS.items():
            assert topics[topic] == msgtype
        decoded: Counter[str] = Counter()
        events = []
        for _schema, channel, _message, msg in reader.iter_decoded_messages():
            decoded[channel.topic] += 1
            if channel.topic == "/diagnostics":
                for st in msg.status:  # REP 107 levels OK, WARN, ERROR, STALE
                    assert 0 <= st.level <= 3 and st.name.startswith("kinematic_monitor: ")
            elif channel.topic == "/kinematic_monitor/events":
                events.append(msg)
            elif channel.topic == "/kinematic_monitor/prediction":
                q = msg.pose.pose.orientation  # a unit quaternion (REP 103)
                assert abs(q.x**2 + q.y**2 + q.z**2 + q.w**2 - 1.0) < 1e-6
    # every message decoded, as many as the summary counts; every input message copied
    assert sum(decoded.values()) == summary.statistics.message_count
    for topic, (_, count) in _input_counts(bag).items():
        assert decoded[topic] == count
    _check_events_topic(events, _events(out))


def test_sqlite3_bag_carries_definitions_and_every_message_deserializes(
        tmp_path: Path) -> None:
    bag, out = _replay(tmp_path, "sqlite3")
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import get_types_from_msg, get_typestore
    from rosbags.typesys.stores import Stores

    files = list((out / "annotated_bag").glob("*.db3"))
    assert len(files) == 1
    with sqlite3.connect(f"file:{files[0]}?mode=ro", uri=True) as db:
        assert db.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        defs = dict(db.execute(
            "SELECT topic_type, encoded_message_definition FROM message_definitions"))
        topic_types = dict(db.execute("SELECT name, type FROM topics"))
    assert set(topic_types.values()) <= set(defs), "a topic type without its definition"
    for topic, msgtype in OUR_TOPICS.items():
        assert topic_types[topic] == msgtype
    # a type store that knows only what the bag itself says (no built-in definitions)
    store = get_typestore(Stores.EMPTY)
    with Reader(out / "annotated_bag") as r:
        for c in r.connections:
            assert c.msgdef is not None and c.msgdef.data, c.topic
            store.register(get_types_from_msg(c.msgdef.data, c.msgtype))
        decoded: Counter[str] = Counter()
        events = []
        for c, _ts, raw in r.messages():
            msg = store.deserialize_cdr(raw, c.msgtype)
            decoded[c.topic] += 1
            if c.topic == "/kinematic_monitor/events":
                events.append(msg)
            elif c.topic == "/diagnostics":
                for st in msg.status:
                    assert 0 <= st.level <= 3 and st.name.startswith("kinematic_monitor: ")
        assert sum(decoded.values()) == r.message_count
    for topic, (_, count) in _input_counts(bag).items():
        assert decoded[topic] == count
    _check_events_topic(events, _events(out))


def _check_events_topic(messages: list[Any], events: list[dict[str, Any]]) -> None:
    """One status at each event's start and one at its end, naming its kind."""
    assert events, "the jump should give at least one event"
    assert len(messages) == 2 * len(events)
    texts = [_text_of_status(m) for m in messages]
    for ev in events:
        assert sum(ev["kind"] in t for t in texts) >= 2, (ev, texts)
    assert any("localization_fault" in t for t in texts)
