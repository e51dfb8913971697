"""Fault tests of the node process over DDS: SIGKILL mid-event, SIGINT/SIGTERM mid-event.

Contract checked (docs/interface.md section 3): the JSON-lines event log is written
and flushed as each event starts and ends, "so nothing is lost if the node dies". After a
SIGKILL (no handler can run) every line of the log must parse as JSON (RFC 8259, via the
standard json module) and hold the event started before the kill. SIGINT/SIGTERM stop the
node within 2 s (the project brief; common practice, no source) with exit code 0 and every
event that was open closed in the log (an 'end' line per 'start' line).

The event is a localisation jump (3 m sideways) of the invented straight drive played by
``dds_helpers publish``; discovery stays on localhost, one ROS domain per test.
"""

from __future__ import annotations

import json
import signal
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

pytest.importorskip("rclpy")

from dds_helpers import (  # noqa: E402
    EVENTS_LOG_NO_GNSS,
    DdsRun,
    Proc,
    write_params,
)

pytestmark = pytest.mark.dds

class Procs(DdsRun):
    """The node under test always runs with the events log and no GNSS."""

    def node(self, executor: str = "auto") -> Proc:  # type: ignore[override]
        return super().node(write_params(self.tmp / "p.yaml", extra=EVENTS_LOG_NO_GNSS),
                            executor=executor)


@pytest.fixture
def procs(tmp_path: Path) -> Iterator[Procs]:
    p = Procs(tmp_path)
    try:
        yield p
    finally:
        p.close()


def _wait(cond: object, timeout: float) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if cond():  # type: ignore[operator]
            return True
        time.sleep(0.05)
    return bool(cond())  # type: ignore[operator]


def _lines(log: Path) -> list[str]:
    return log.read_text(encoding="utf-8").splitlines() if log.exists() else []


def _started(log: Path, kind: str) -> bool:
    for line in _lines(log):
        try:
            rec = json.loads(line)
        except json.JSONDecodeError:
            continue
        if rec.get("type") == "start" and rec.get("kind") == kind:
            return True
    return False


def _drive_into_jump(procs: Procs, executor: str) -> tuple[Proc, Proc, Path]:
    node = procs.node(executor)
    assert _wait(lambda: "running (" in node.output(), 20.0), node.output()
    # the jump persists to the end of the drive, so the event is still open when we signal
    pub = procs.publisher("--duration", "8.0", "--jump-at", "1.5", "--jump", "3.0")
    log = procs.tmp / "events.jsonl"
    assert _wait(lambda: _started(log, "localization_fault"), 15.0), (
        node.output()[-3000:], _lines(log))
    return node, pub, log


@pytest.mark.parametrize("executor", ["events", "single"])
def test_sigkill_mid_event_leaves_a_valid_log_with_the_started_event(
        procs: Procs, executor: str) -> None:
    node, pub, log = _drive_into_jump(procs, executor)
    node.signal(signal.SIGKILL)
    assert node.wait(timeout=5.0) == -signal.SIGKILL
    lines = _lines(log)
    assert lines, "the event log is empty after the kill"
    recs = [json.loads(line) for line in lines]  # every line is valid JSON
    starts = [r for r in recs if r["type"] == "start" and r["kind"] == "localization_fault"]
    assert starts, recs
    assert starts[0]["level"] in ("WARN", "ERROR")
    assert isinstance(starts[0]["start"], float) and isinstance(starts[0]["detected_at"], float)
    pub.stop(grace=1.0)


@pytest.mark.parametrize(("executor", "sig"), [("events", signal.SIGTERM),
                                               ("single", signal.SIGINT)])
def test_signal_mid_event_closes_it_within_2_s(procs: Procs, executor: str, sig: int) -> None:
    node, pub, log = _drive_into_jump(procs, executor)
    assert pub.p.poll() is None  # data still flowing while the node is stopped
    t0 = time.monotonic()
    node.signal(sig)
    code = node.wait(timeout=2.0)
    elapsed = time.monotonic() - t0
    assert code == 0, node.output()[-3000:]
    assert elapsed <= 2.0
    recs = [json.loads(line) for line in _lines(log)]
    opened = {(r["kind"], r["start"]) for r in recs if r["type"] == "start"}
    closed = {(r["kind"], r["start"]) for r in recs if r["type"] == "end"}
    assert ("localization_fault" in {k for k, _ in opened}) and opened <= closed, recs
    pub.stop(grace=1.0)
