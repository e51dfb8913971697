"""Reorder buffer: stamp order out, late drops counted, backwards jumps signalled.

The property checks (hypothesis) compare with Python's ``sorted`` as the reference."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kinematic_monitor.ordering import ReorderBuffer, TimeReset


@dataclass(frozen=True)
class S:
    stamp: float
    tag: int = 0


def test_releases_after_lag_in_order() -> None:
    b = ReorderBuffer(lag=0.1, reset_threshold=5.0)
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
    b = ReorderBuffer(lag=0.05, reset_threshold=1.0)
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
    b = ReorderBuffer(lag=0.05, reset_threshold=100.0)
    out = []
    for i in arrival:
        out.extend(b.push(items[i]))
    out.extend(b.flush())
    assert b.late_dropped == 0
    assert [s.stamp for s in out] == sorted(s.stamp for s in items)
