"""Input staleness checks: STALE status, event level, times (end >= start)."""

from __future__ import annotations

import math

from fixtures.checks import setup
from kinematic_monitor.core.checks.inputs import InputCheck
from kinematic_monitor.core.levels import ERROR, OK, STALE, WARN


def test_silent_imu_is_stale_with_a_warn_event_and_recovers() -> None:
    ctx, st, sink = setup()
    chk = InputCheck(ctx, "imu")
    st.last_seen["imu"] = 10.0
    chk.decide(10.4, 10.0)
    assert chk.level == OK and not chk.stale
    chk.decide(10.6, 10.0)  # silent for more than timeouts.imu = 0.5 s
    assert chk.level == STALE and chk.tracker.level == WARN
    assert chk.tracker.start == 10.5  # onset: the last sample + the timeout
    st.last_seen["imu"] = 11.0
    chk.decide(11.1, 10.0)
    assert sink.outs() == ["start", "end"] and chk.level == OK
    assert chk.tracker.end >= chk.tracker.start


def test_joint_states_never_seen_counts_from_the_first_sample() -> None:
    ctx, st, sink = setup()
    chk = InputCheck(ctx, "joint_states")
    chk.decide(5.7, 5.0)
    assert chk.tracker.level == ERROR and math.isclose(chk.figures["age [s]"], 0.7)
    assert chk.status_message(STALE, True, None, "").startswith("no joint_states")
