"""Reorder buffer: samples from several topics in, samples in header-stamp order out (pure).

A sample is held until the newest stamp seen is at least ``lag`` [s] later, then released
in stamp order (ties keep arrival order). A sample older than the last released one is
late: counted and dropped. A stamp more than ``reset_threshold`` [s] *behind* the newest
seen (a bag restarted, simulated time reset) is a backwards time jump: the buffered
samples of the old timeline are released, a ``TimeReset`` marker follows, and the new
timeline starts with that sample. Consumers pass the marker to ``Monitor.process``.
"""

from __future__ import annotations

import heapq
import math
from dataclasses import dataclass
from typing import Any, Protocol


class _Stamped(Protocol):
    stamp: float


@dataclass(frozen=True)
class TimeReset:
    """Marker: time jumped backwards to ``stamp`` [s]; the consumer should reset."""

    stamp: float
    previous: float


class ReorderBuffer:
    """Release samples in stamp order after a lag window [s]."""

    def __init__(self, lag: float = 0.05, reset_threshold: float = 1.0) -> None:
        if not (math.isfinite(lag) and lag >= 0.0):
            raise ValueError(f"reorder lag must be a finite value >= 0 s, got {lag}")
        if not (math.isfinite(reset_threshold) and reset_threshold > lag):
            raise ValueError(
                f"reset_threshold must be finite and > lag ({lag} s), got {reset_threshold}"
            )
        self.lag = lag
        self.reset_threshold = reset_threshold
        self._heap: list[tuple[float, int, Any]] = []
        self._seq = 0
        self.newest = -math.inf
        self.last_released = -math.inf
        self.late_dropped = 0
        self.resets = 0
        self.invalid = 0

    def __len__(self) -> int:
        return len(self._heap)

    def push(self, sample: _Stamped) -> list[Any]:
        """Add a sample; return what can be released (samples and TimeReset markers)."""
        stamp = getattr(sample, "stamp", math.nan)
        if not isinstance(stamp, (int, float)) or not math.isfinite(stamp):
            self.invalid += 1
            return []
        out: list[Any] = []
        if stamp < self.newest - self.reset_threshold:
            out.extend(self.flush())
            out.append(TimeReset(stamp=float(stamp), previous=self.newest))
            self.resets += 1
            self.newest = -math.inf
            self.last_released = -math.inf
        if stamp < self.last_released:
            self.late_dropped += 1
            return out
        heapq.heappush(self._heap, (float(stamp), self._seq, sample))
        self._seq += 1
        self.newest = max(self.newest, float(stamp))
        limit = self.newest - self.lag
        while self._heap and self._heap[0][0] <= limit:
            s, _, item = heapq.heappop(self._heap)
            self.last_released = s
            out.append(item)
        return out

    def flush(self) -> list[Any]:
        """Release everything buffered, in stamp order."""
        out = []
        while self._heap:
            s, _, item = heapq.heappop(self._heap)
            self.last_released = max(self.last_released, s)
            out.append(item)
        return out
