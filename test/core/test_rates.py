"""Typical intervals of inputs and the timeouts that follow them (core/rates.py).

Figures: a 2 Hz vehicle-monitor message with 500 ± 0.5 ms periods and occasional 1 s gaps,
measured on a production car (nuScenes CAN bus expansion, REALISM.md [Meas]).
"""

from __future__ import annotations

import numpy as np
import pytest

from kinematic_monitor.core.rates import GAP_FACTOR, IntervalTracker


def test_a_2_hz_stream_with_1_s_gaps_gets_a_timeout_longer_than_its_gaps() -> None:
    rng = np.random.default_rng(3)
    tr = IntervalTracker()
    t = 100.0
    for k in range(200):
        t += 1.0 if k % 40 == 39 else 0.5 + rng.uniform(-0.0005, 0.0005)  # a 1 s gap now and then
        tr.note(t)
    assert tr.typical == pytest.approx(0.5, abs=0.001)
    # a fixed 0.5 s timeout would call it stale at every other period (49 % are above 500 ms)
    assert tr.timeout(0.5) == pytest.approx(GAP_FACTOR * tr.typical) and tr.timeout(0.5) > 1.0


def test_fast_stream_keeps_the_configured_timeout() -> None:
    tr = IntervalTracker()
    for k in range(50):
        tr.note(10.0 + 0.01 * k)
    assert tr.typical == pytest.approx(0.01) and tr.timeout(0.5) == 0.5


def test_repeats_and_steps_back_are_not_intervals() -> None:
    tr = IntervalTracker()
    for t in (1.0, 1.0, 0.5, 1.1, 1.2):
        tr.note(t)
    assert tr.typical == pytest.approx(0.1)
