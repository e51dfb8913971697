"""Event records and writers against the contract (docs/interface.md section 4, schema
``kinematic_monitor.events/1``) and RFC 8259 JSON (no NaN: ``allow_nan=False``)."""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import pytest

from kinematic_monitor.core.events import SCHEMA, Event, Transition
from kinematic_monitor.core.levels import ERROR, WARN
from kinematic_monitor.io.event_files import (
    EventLogWriter,
    events_to_csv,
    events_to_json,
    read_event_log,
    write_events_json,
)

CONTRACT_KEYS = {"start", "end", "detected_at", "kind", "level", "position", "peak", "summary"}


def _event(**kw: object) -> Event:
    base: dict[str, object] = dict(
        start=1800000012.31, detected_at=1800000012.52, kind="lateral_slip", level=ERROR,
        position=(12.3, -4.5), peak={"yaw_rate_residual_rad_s": 0.21},
        summary="understeer on low grip: yaw rate 38 % below kinematic at 0.31 g",
        end=1800000014.02)
    base.update(kw)
    return Event(**base)  # type: ignore[arg-type]


def test_json_document_matches_contract_example() -> None:
    doc = events_to_json("/data/run1", [_event()])
    # the example in docs/interface.md section 4, key for key
    assert doc == {
        "schema": "kinematic_monitor.events/1",
        "source": "/data/run1",
        "events": [{
            "start": 1800000012.31, "end": 1800000014.02, "detected_at": 1800000012.52,
            "kind": "lateral_slip", "level": "ERROR", "position": [12.3, -4.5],
            "peak": {"yaw_rate_residual_rad_s": 0.21},
            "summary": "understeer on low grip: yaw rate 38 % below kinematic at 0.31 g",
        }],
    }
    assert SCHEMA == "kinematic_monitor.events/1"
    json.dumps(doc, allow_nan=False)


def test_open_event_and_nan_become_null() -> None:
    d = _event(end=math.nan, position=(math.nan, 1.0), peak={"x": math.inf}).to_dict()
    assert set(d) == CONTRACT_KEYS
    assert d["end"] is None and d["position"] == [None, 1.0] and d["peak"] == {"x": None}
    json.dumps(d, allow_nan=False)


def test_bad_kind_or_level_named() -> None:
    with pytest.raises(ValueError, match="wheel_fell_off"):
        _event(kind="wheel_fell_off")
    with pytest.raises(ValueError, match="level"):
        _event(level=3)


def test_write_events_json(tmp_path: Path) -> None:
    p = tmp_path / "events.json"
    write_events_json(p, "bag", [_event(level=WARN)])
    doc = json.loads(p.read_text())
    assert doc["events"][0]["level"] == "WARN" and set(doc["events"][0]) == CONTRACT_KEYS


def test_csv_round_trip() -> None:
    buf = io.StringIO()
    text = events_to_csv([_event(), _event(end=math.nan, summary='with "quotes", commas')], buf)
    assert buf.getvalue() == text
    rows = list(csv.DictReader(io.StringIO(text)))
    assert rows[0]["kind"] == "lateral_slip" and float(rows[0]["x"]) == 12.3
    assert rows[1]["end"] == "" and rows[1]["summary"] == 'with "quotes", commas'
    assert json.loads(rows[0]["peak"]) == {"yaw_rate_residual_rad_s": 0.21}


def test_jsonl_log_is_flushed_per_line(tmp_path: Path) -> None:
    p = tmp_path / "log.jsonl"
    w = EventLogWriter(p, fsync=True)
    ev = _event(end=math.nan)
    w.write(Transition("start", ev))
    # readable before close: the line was flushed
    lines = p.read_text().splitlines()
    assert len(lines) == 1 and json.loads(lines[0])["type"] == "start"
    ev.end = 1800000014.02
    w.write(Transition("end", ev))
    w.close()
    w.close()
    recs = read_event_log(p)
    assert [r["type"] for r in recs] == ["start", "end"]
    assert recs[0]["end"] is None and recs[1]["end"] == 1800000014.02
    assert set(recs[1]) == CONTRACT_KEYS | {"type"}
    with pytest.raises(ValueError, match="closed"):
        w.write(Transition("end", ev))


def test_truncated_last_line_is_skipped(tmp_path: Path) -> None:
    p = tmp_path / "log.jsonl"
    with EventLogWriter(p) as w:
        w.write(Transition("start", _event()))
    with open(p, "a") as f:
        f.write('{"type": "end", "sta')
    assert len(read_event_log(p)) == 1
