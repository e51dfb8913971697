"""How often an input delivers: the typical interval between its samples (pure, no ROS).

Low-rate inputs are ordinary on real vehicles: a vehicle-monitor message at 2 Hz with
500 ± 0.5 ms periods and occasional 1 s gaps (measured on a production car), a localisation
at a few Hz. A fixed timeout of 0.5 s would call such an input stale every other sample, so
staleness, holding and the reorder buffer take an input as silent only after
max(configured timeout, ``GAP_FACTOR`` × its typical interval).
"""

from __future__ import annotations

import math

#: an input is silent after this many typical intervals without a sample (covers the 1 s
#: gaps of a 2 Hz stream; common practice, no source)
GAP_FACTOR = 2.5
#: intervals kept for the typical interval (their median)
WINDOW = 15
#: the median is refreshed every this many samples (cheap at high rates)
REFRESH = 8


class IntervalTracker:
    """The typical (median) interval [s] between the samples of one input."""

    __slots__ = ("_last", "_gaps", "_count", "typical")

    def __init__(self) -> None:
        self._last = math.nan
        self._gaps: list[float] = []
        self._count = 0
        self.typical = 0.0  # [s]; 0 until a few intervals were seen

    def note(self, stamp: float) -> None:
        """A sample stamped ``stamp`` [s] (stamps of one input in order)."""
        last = self._last
        if not stamp > last:  # a repeat or a step back (or the first sample: NaN)
            if last != last:
                self._last = stamp
            return
        self._last = stamp
        gaps = self._gaps
        gaps.append(stamp - last)
        if len(gaps) > WINDOW:
            del gaps[0]
        self._count += 1
        if self._count % REFRESH == 1 or len(gaps) < REFRESH:
            ordered = sorted(gaps)
            self.typical = ordered[len(ordered) // 2]

    def timeout(self, configured: float) -> float:
        """The effective timeout [s]: the configured one, or ``GAP_FACTOR`` typical intervals
        when the input is slower than that allows."""
        t = GAP_FACTOR * self.typical
        return t if t > configured else configured
