"""Reorder buffer: stamp order out, late drops counted, backwards jumps signalled.

The property checks (hypothesis) compare with Python's ``sorted`` as the reference."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kinematic_monitor.core.ordering import ReorderBuffer, TimeReset


@dataclass(frozen=True)
class S:
    stamp: float
    tag: int = 0


def test_releases_after_lag_in_order() -> None:
    b = ReorderBuffer(lag=0.1, reset_threshold=5.0, watermark=False)
    assert b.push(S(1.00)) == []
    assert b.push(S(0.98)) == []
    out = b.push(S(1.15))
    assert [s.stamp for s in out] == [0.98, 1.00]
    assert [s.stamp for s in b.flush()] == [1.15]


def test_late_sample_dropped_and_counted() -> None:
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0)
    b.push(S(1.0))
    b.push(S(1.2))
    assert b.push(S(0.9)) == [] and b.late_dropped == 1


def test_backwards_jump_signals_reset() -> None:
    b = ReorderBuffer(lag=0.05, reset_threshold=1.0, watermark=False)
    b.push(S(100.0))
    b.push(S(100.01))
    out = b.push(S(3.0))
    assert [type(o).__name__ for o in out] == ["S", "S", "TimeReset"]
    assert out[-1] == TimeReset(stamp=3.0, previous=100.01)
    assert b.resets == 1 and b.late_dropped == 0
    assert [s.stamp for s in b.push(S(3.2))] == [3.0]


def test_bad_arguments_and_nan_stamp() -> None:
    with pytest.raises(ValueError, match="lag"):
        ReorderBuffer(lag=-1.0)
    with pytest.raises(ValueError, match="reset_threshold"):
        ReorderBuffer(lag=0.5, reset_threshold=0.1)
    b = ReorderBuffer()
    assert b.push(S(math.nan)) == [] and b.invalid == 1


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 10), st.floats(0, 0.04)), min_size=1, max_size=60))
def test_output_sorted_and_complete_when_delay_within_lag(
    pairs: list[tuple[float, float]],
) -> None:
    # arrival time = stamp + delay with delay < lag: nothing is late, output == sorted input
    items = [S(t, i) for i, (t, _) in enumerate(pairs)]
    arrival = sorted(range(len(items)), key=lambda i: pairs[i][0] + pairs[i][1])
    # one stream delivering out of order: only the fixed lag is safe for it
    b = ReorderBuffer(lag=0.05, reset_threshold=100.0, watermark=False)
    out = []
    for i in arrival:
        out.extend(b.push(items[i]))
    out.extend(b.flush())
    assert b.late_dropped == 0
    assert [s.stamp for s in out] == sorted(s.stamp for s in items)


# --- watermark release -------------------------------------------------------------------
# Reference for the rule: the low watermark of stream processing (each source in order; a
# time is complete once every source has passed it), Akidau et al., "The Dataflow Model",
# VLDB 2015, section 3.3. Expected outputs below are worked by hand from that rule.

def _warm(b: ReorderBuffer) -> None:
    """Two streams 'a' and 'b' heard over more than the lag, everything released."""
    for t in (0.00, 0.02, 0.04, 0.06, 0.08):
        b.push(S(t), "a")
        b.push(S(t + 0.001), "b")
    b.push(S(0.2), "a")
    b.push(S(0.2), "b")
    assert len(b) == 0


def test_watermark_releases_once_every_stream_has_passed() -> None:
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0, lookahead=0.0)
    _warm(b)
    assert b.push(S(0.210, 1), "a") == []  # 'b' may still send 0.205
    out = b.push(S(0.215, 2), "b")  # both streams at/after 0.210 now
    assert [s.tag for s in out] == [1]
    assert [s.tag for s in b.push(S(0.215, 3), "a")] == [2, 3]  # tie: arrival order
    assert b.late_dropped == 0 and b.released_by_watermark >= 3


def test_silent_stream_stops_holding_back_after_its_timeout() -> None:
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0, stream_timeouts={"b": 0.02},
                      lookahead=0.0)
    _warm(b)
    # 'b' stays silent: 0.21 held until 'b' is older than its timeout, here the longer of
    # the configured 0.02 s and 2.5 typical intervals of 'b' (its median interval is 20 ms,
    # so 0.05 s: core/rates.py)
    assert b.push(S(0.21, 1), "a") == []
    assert b.push(S(0.245, 2), "a") == []  # newest - last(b) = 0.045: not yet silent
    out = b.push(S(0.255, 3), "a")  # 0.055 > 0.05: only 'a' counts
    assert [s.tag for s in out] == [1, 2, 3]
    # a sample of the silent stream older than what went out is late: counted, dropped
    assert b.push(S(0.205, 4), "b") == [] and b.late_dropped == 1


def test_no_watermark_before_lag_of_stamps_seen() -> None:
    # start-up: a stream not yet heard must not have its first samples dropped as late
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0)
    assert b.push(S(1.00, 1), "a") == []
    assert b.push(S(1.01, 2), "a") == []
    assert b.push(S(0.999, 3), "b") == []  # would be late had 'a' alone set the mark
    assert b.late_dropped == 0
    out = b.push(S(1.06, 4), "a")  # 0.061 s seen: watermark = min(1.06, 0.999)
    assert [s.tag for s in out] == [3, 1, 2]


def test_declared_stream_not_heard_yet_holds_until_its_timeout() -> None:
    # worked by hand; stamps in quarter seconds so the float sums are exact
    b = ReorderBuffer(lag=0.5, reset_threshold=5.0, streams=("a", "b"),
                      stream_timeouts={"b": 1.0}, lookahead=0.0)
    out = []
    for k in range(4):  # 'a' alone: only the lag rule releases
        out = b.push(S(k * 0.25, k), "a")
    assert [s.tag for s in out] == [1]  # 0.25 = 0.75 - 0.5 (0 went out at 0.5)
    # 'b' comes 0.45 s after its stamp: not dropped; both heard, watermark min(0.75, 0.3)
    assert [s.tag for s in b.push(S(0.3, 10), "b")] == [10]
    assert b.late_dropped == 0
    # a declared stream that never comes stops holding once its timeout has passed
    c = ReorderBuffer(lag=0.5, reset_threshold=5.0, streams=("a", "gnss"),
                      stream_timeouts={"gnss": 1.0}, lookahead=0.0)
    for k in range(5):
        c.push(S(k * 0.25, k), "a")
    assert [s.tag for s in c.push(S(1.25, 5), "a")] == [3, 4, 5]


def test_stream_going_backwards_falls_back_to_lag() -> None:
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0)
    _warm(b)
    b.push(S(0.30, 1), "a")
    b.push(S(0.29, 2), "a")  # 'a' out of order: two publishers on one topic, say
    assert "a" in b.untrusted
    assert b.push(S(0.31, 3), "b") == []  # watermark ignored: held for the lag
    out = b.push(S(0.355, 4), "b")  # lag rule: up to 0.305
    assert [s.tag for s in out] == [2, 1]


def test_bad_stream_timeout_is_named() -> None:
    with pytest.raises(ValueError, match="'imu'"):
        ReorderBuffer(stream_timeouts={"imu": 0.0})
    with pytest.raises(ValueError, match="lookahead"):
        ReorderBuffer(lookahead=1.0)


def test_lookahead_uses_half_the_smallest_recent_gap() -> None:
    # worked by hand: 'slow' every 0.010 s, so after its 0.100 sample it has passed
    # 0.100 + 0.5 * 0.010 = 0.105; a 'fast' sample at 0.104 goes out at once, 0.106 waits
    b = ReorderBuffer(lag=0.05, reset_threshold=5.0, lookahead=0.5)
    for k in range(11):
        b.push(S(k * 0.010), "slow")
        b.push(S(k * 0.010 + 0.0005), "fast")
    b.flush()
    assert [s.tag for s in b.push(S(0.104, 1), "fast")] == [1]
    assert b.push(S(0.106, 2), "fast") == []
    # 'fast' has now shown a 0.002 s gap: it has passed 0.106 + 0.001 only, so 0.110 waits
    assert [s.tag for s in b.push(S(0.110, 3), "slow")] == [2]
    assert [s.tag for s in b.push(S(0.111, 4), "fast")] == [3, 4]
    # a 'slow' sample sooner than half its period after the last breaks the assumption:
    # it is late, counted and dropped
    assert b.push(S(0.1105, 5), "slow") == [] and b.late_dropped == 1


@settings(max_examples=40, deadline=None)
@given(st.lists(st.sampled_from([0.001, 0.0025, 0.010, 0.1]), min_size=2, max_size=4,
                unique=True),
       st.lists(st.floats(0.0, 0.02), min_size=4, max_size=4),
       st.floats(0.0, 0.01))
def test_periodic_streams_with_lookahead_lose_nothing(
    periods: list[float], delays: list[float], offset: float,
) -> None:
    # periodic streams (sensors stamping at a fixed rate), each with its own fixed transport
    # delay below the lag: stamp order out, no late drop, reference Python sorted
    msgs = []
    for i, period in enumerate(periods):
        n = int(0.5 / period)
        for k in range(n):
            stamp = offset * i + k * period
            msgs.append((stamp + delays[i], i, k, S(stamp, i * 100000 + k)))
    msgs.sort(key=lambda m: (m[0], m[1], m[2]))
    b = ReorderBuffer(lag=0.05, reset_threshold=100.0, lookahead=0.9,
                      streams=[str(i) for i in range(len(periods))])
    out: list[S] = []
    for _, i, _, s in msgs:
        out.extend(b.push(s, str(i)))
    out.extend(b.flush())
    assert b.late_dropped == 0
    assert [x.stamp for x in out] == sorted(x.stamp for x in out)
    assert len(out) == len(msgs)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from("abc"), st.floats(0.001, 0.05),
                          st.floats(0, 0.04)), min_size=1, max_size=80))
def test_in_order_streams_give_sorted_complete_output_never_later_than_lag(
    steps: list[tuple[str, float, float]],
) -> None:
    # each stream: increasing stamps, a delay that never lets a later sample overtake an
    # earlier one of the same stream (FIFO topic), delays < lag across streams
    clock = dict.fromkeys("abc", 0.0)
    arrived = dict.fromkeys("abc", 0.0)
    items = []
    for i, (name, gap, delay) in enumerate(steps):
        clock[name] += gap
        arrived[name] = max(arrived[name], clock[name] + delay)
        items.append((arrived[name], i, name, S(clock[name], i)))
    items.sort(key=lambda x: (x[0], x[1]))
    lag = 0.05
    wm = ReorderBuffer(lag=lag, reset_threshold=100.0, lookahead=0.0, streams="abc")
    fixed = ReorderBuffer(lag=lag, reset_threshold=100.0, watermark=False)
    out_wm: list[S] = []
    out_fixed: list[S] = []
    for _, _, name, s in items:
        out_wm.extend(wm.push(s, name))
        out_fixed.extend(fixed.push(s, name))
        # never later than the fixed lag: whatever it has released, the watermark has too
        assert {x.tag for x in out_fixed} <= {x.tag for x in out_wm}
    out_wm.extend(wm.flush())
    assert wm.late_dropped == 0
    assert sorted(x.stamp for x in out_wm) == [x.stamp for x in out_wm]  # Python sorted
    assert sorted(x.tag for x in out_wm) == list(range(len(steps)))
