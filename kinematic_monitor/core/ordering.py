"""Reorder buffer: samples from several topics in, samples in header-stamp order out (pure).

Release rule (a watermark, as in stream processing): each input *stream* (one topic) is
assumed to arrive in stamp order, as one publisher over one DDS topic does. A sample is
released once every *active* stream has delivered a sample stamped at or after it, so no
sample still to come can be older; or, whatever the streams do, once the newest stamp seen
is ``lag`` [s] later (the fallback that bounds the wait when a stream is slow or silent).
A stream is active while its last stamp is within its timeout [s] of the newest stamp.

Streams are *declared* up front (``streams``, e.g. the node's configured inputs) or learnt
when they first deliver. A declared stream not heard yet holds the watermark back until
its timeout has passed since the first stamp seen, so its first samples are not dropped
as late at start-up; for streams not declared, the buffer releases by the lag rule only
until it has seen ``lag`` of stamp time. A stream that ever goes backwards in stamp is not
trusted for the watermark again (lag rule while it is active).

Look-ahead: a periodic stream's next stamp is at least one period after its last, so a
*regular* stream is taken to have passed ``last + lookahead * g``, ``g`` the smallest stamp
gap in its last ``GAP_WINDOW`` samples (``lookahead`` in [0, 1); 0 = the strict rule above).
Regular: at least ``MIN_GAPS`` gaps seen and the largest at most ``REGULARITY`` times the
smallest. A stream stamped on receipt by a busy publisher is not regular (a delayed stamp,
a long gap, comes before the short catch-up gap), so it gets no look-ahead. Without the
look-ahead every sample of a 1 kHz stream would wait for the next sample of the slowest
stream (half its period on average). A stream breaking the assumptions shows up as late
drops, which are counted.

Ties keep arrival order; a sample equal (same stamp and content) to the previous one of its
stream is a duplicate: counted (``duplicates``) and dropped. A sample older than the last
released one is late: counted and dropped. A stamp more than ``reset_threshold`` [s]
*behind* the newest seen (a bag restarted, simulated time reset) is a backwards time jump:
the buffered samples of the old timeline are released, a ``TimeReset`` marker follows, and
the new timeline starts with that sample. Consumers pass the marker to ``Monitor.process``.

:func:`input_buffer` builds the buffer from the configuration; the live node and the bag
reader both use it, so replay orders samples exactly as the node does.
"""

from __future__ import annotations

import heapq
import math
from collections import deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol

from kinematic_monitor.core.rates import IntervalTracker

if TYPE_CHECKING:  # pragma: no cover - typing only
    from kinematic_monitor.config.validation import MonitorConfig

GAP_WINDOW = 32  # stamp gaps per stream kept for the look-ahead
MIN_GAPS = 8  # gaps needed before a stream gets a look-ahead
REGULARITY = 1.5  # largest / smallest gap in the window of a regular stream


class _Stamped(Protocol):
    @property
    def stamp(self) -> float: ...


#: stream names of the configured inputs (single-value inputs are named by their roles,
#: e.g. ``steering+speed``)
INPUT_STREAMS = ("joint_states", "localization", "imu")


@dataclass(frozen=True)
class TimeReset:
    """Marker: time jumped backwards to ``stamp`` [s]; the consumer should reset."""

    stamp: float
    previous: float


class ReorderBuffer:
    """Release samples in stamp order: at the streams' watermark, at the latest after ``lag``.

    ``streams``: the stream names expected (see module docstring). ``stream_timeouts``:
    stream name -> timeout [s] after which a silent stream no longer holds the watermark
    back; streams not listed use ``default_timeout``. ``watermark=False``
    gives the plain fixed-lag buffer; ``lookahead`` is explained in the module docstring.
    """

    def __init__(self, lag: float = 0.05, reset_threshold: float = 1.0, *,
                 watermark: bool = True, streams: Iterable[str] = (),
                 stream_timeouts: Mapping[str, float] | None = None,
                 default_timeout: float = 0.5, lookahead: float = 0.5) -> None:
        if not (math.isfinite(lag) and lag >= 0.0):
            raise ValueError(f"reorder lag must be a finite value >= 0 s, got {lag}")
        if not (math.isfinite(reset_threshold) and reset_threshold > lag):
            raise ValueError(
                f"reset_threshold must be finite and > lag ({lag} s), got {reset_threshold}"
            )
        if not (isinstance(lookahead, (int, float)) and 0.0 <= lookahead < 1.0):
            raise ValueError(f"lookahead must be in [0, 1), got {lookahead!r}")
        timeouts = dict(stream_timeouts or {})
        for name, t in [*timeouts.items(), ("default_timeout", default_timeout)]:
            if not (isinstance(t, (int, float)) and math.isfinite(t) and t > 0.0):
                raise ValueError(f"stream timeout {name!r} must be a finite value > 0 s, got {t}")
        self.lag = lag
        self.reset_threshold = reset_threshold
        self.watermark_enabled = watermark
        self.stream_timeouts = timeouts
        self.default_timeout = float(default_timeout)
        self.lookahead = float(lookahead)
        self.streams = tuple(dict.fromkeys(streams))
        self._heap: list[tuple[float, int, Any]] = []
        self._seq = 0
        self.newest = -math.inf
        self.first = math.inf
        self.last_released = -math.inf
        self.late_dropped = 0
        self.late_by = 0.0  # [s] how far behind the released stamps the latest drop was
        self.duplicates = 0  # samples dropped: equal to the previous one of their stream
        self._last_sample: dict[str, Any] = {}  # stream -> previous sample (duplicates)
        self.resets = 0
        self.invalid = 0
        self.released_by_watermark = 0
        self.released_by_lag = 0
        self._last: dict[str, float] = {}  # stream -> newest stamp delivered
        self._timeouts: dict[str, float] = {}  # stream -> its configured timeout [s], once heard
        self._silent_after: dict[str, float] = {}  # stream -> effective timeout [s] (rates.py)
        self._rates: dict[str, IntervalTracker] = {}
        self._unheard = set(self.streams)  # declared streams not heard yet
        self.untrusted: set[str] = set()  # streams seen going backwards in stamp
        self._gaps: dict[str, deque[float]] = {}  # stream -> recent stamp gaps [s]
        self._gap_range: dict[str, tuple[float, float]] = {}  # stream -> (min, max) of those
        self._ahead: dict[str, float] = {}  # stream -> look-ahead [s] (regular streams)

    def __len__(self) -> int:
        return len(self._heap)

    def watermark(self) -> float:
        """Stamp [s] up to which every active stream has delivered (-inf if unknown)."""
        newest = self.newest
        if not self.watermark_enabled or newest - self.first < self.lag:
            return -math.inf
        if self._unheard:
            for name in self._unheard:
                if newest - self.first <= self._timeout(name):
                    return -math.inf  # declared, not heard yet: wait (up to its timeout)
        mark = math.inf
        ahead = self._ahead
        untrusted = self.untrusted
        for name, last in self._last.items():
            if newest - last > self._silent_after[name]:
                continue  # silent: it no longer holds the others back
            if untrusted and name in untrusted:
                return -math.inf
            m = last + ahead.get(name, 0.0)
            if m < mark:
                mark = m
        return mark if mark < math.inf else -math.inf

    def _timeout(self, name: str) -> float:
        return self.stream_timeouts.get(name, self.default_timeout)

    def push(self, sample: _Stamped, stream: str | None = None) -> list[Any]:
        """Add a sample from ``stream`` (default: the sample's type name); return what can be
        released (samples and TimeReset markers) in stamp order."""
        stamp = getattr(sample, "stamp", math.nan)
        if not isinstance(stamp, (int, float)) or not math.isfinite(stamp):
            self.invalid += 1
            return []
        stamp = float(stamp)
        key = type(sample).__name__ if stream is None else stream
        out: list[Any] = []
        if stamp < self.newest - self.reset_threshold:
            out.extend(self.flush())
            out.append(TimeReset(stamp=stamp, previous=self.newest))
            self._new_timeline()
        previous = self._last.get(key, -math.inf)
        if stamp == previous and sample == self._last_sample.get(key):
            self.duplicates += 1  # the same message again on one stream: dropped
            return out
        self._last_sample[key] = sample
        if stamp < previous:
            self.untrusted.add(key)
        else:
            if self.lookahead > 0.0 and previous > -math.inf:
                self._note_gap(key, stamp - previous)
            else:
                self._ahead.pop(key, None)
            self._last[key] = stamp
        rate = self._rates.get(key)
        if rate is None or self._unheard:
            self._timeouts[key] = self._timeout(key)
            if rate is None:
                rate = self._rates[key] = IntervalTracker()
            self._unheard.discard(key)
        rate.note(stamp)
        self._silent_after[key] = rate.timeout(self._timeouts[key])
        if stamp > self.newest:
            self.newest = stamp
        if stamp < self.first:
            self.first = stamp
        if stamp < self.last_released:
            self.late_dropped += 1
            self.late_by = max(self.late_by, self.last_released - stamp)
            return out
        heap = self._heap
        heapq.heappush(heap, (stamp, self._seq, sample))
        self._seq += 1
        by_lag = self.newest - self.lag
        limit = self.watermark()
        if by_lag > limit:
            limit = by_lag
        pop = heapq.heappop
        while heap and heap[0][0] <= limit:
            s, _, item = pop(heap)
            if s <= by_lag:
                self.released_by_lag += 1
            else:
                self.released_by_watermark += 1
            self.last_released = s
            out.append(item)
        return out

    def _new_timeline(self) -> None:
        self.resets += 1
        self.newest = -math.inf
        self.first = math.inf
        self.last_released = -math.inf
        self._last.clear()
        self._rates.clear()
        self._unheard = set(self.streams)
        self.untrusted.clear()
        self._gaps.clear()
        self._gap_range.clear()
        self._ahead.clear()

    def set_timeouts(self, timeouts: Mapping[str, float]) -> None:
        """New stream timeouts [s] (parameters changed at run time)."""
        self.stream_timeouts.update(timeouts)
        self._timeouts = {k: self._timeout(k) for k in self._timeouts}
        self._silent_after = {k: self._rates[k].timeout(v) for k, v in self._timeouts.items()}

    def _note_gap(self, key: str, gap: float) -> None:
        gaps = self._gaps.get(key)
        if gaps is None:
            gaps = self._gaps[key] = deque(maxlen=GAP_WINDOW)
        dropped = gaps[0] if len(gaps) == GAP_WINDOW else None
        gaps.append(gap)
        rng = self._gap_range.get(key)
        if rng is None:
            lo = hi = gap
        elif dropped is not None and (dropped == rng[0] or dropped == rng[1]):
            lo, hi = min(gaps), max(gaps)  # the window's extreme left it: recompute
        else:
            lo, hi = rng
            if gap < lo:
                lo = gap
            elif gap > hi:
                hi = gap
        self._gap_range[key] = (lo, hi)
        if len(gaps) >= MIN_GAPS and lo > 0.0 and hi <= REGULARITY * lo:
            self._ahead[key] = self.lookahead * lo
        else:
            self._ahead.pop(key, None)

    def flush(self) -> list[Any]:
        """Release everything buffered, in stamp order."""
        out = []
        while self._heap:
            s, _, item = heapq.heappop(self._heap)
            self.last_released = max(self.last_released, s)
            out.append(item)
        return out


def input_buffer(cfg: MonitorConfig) -> ReorderBuffer:
    """The reorder buffer of the monitor's inputs, as configured (node and replay alike).

    Lag ``inputs.reorder_window`` [s]; a backwards jump of more than max(1 s, 2 lag + 0.5 s)
    is a new timeline. Watermark release over the configured inputs (streams named as in
    :data:`INPUT_STREAMS`); an input silent past its ``timeouts.*`` [s] stops holding the
    others back. GNSS is not among them: it only places the drive on a map.
    """
    lag = cfg.inputs.reorder_window
    to = cfg.timeouts
    topics = {"joint_states": cfg.inputs.joint_states.topic,
              "localization": cfg.inputs.localization.topic,
              "imu": cfg.inputs.imu.topic}
    return ReorderBuffer(
        lag, reset_threshold=max(1.0, 2.0 * lag + 0.5),
        streams=[name for name, topic in topics.items() if topic],
        stream_timeouts={"joint_states": to.joint_states, "localization": to.localization,
                         "imu": to.imu}, default_timeout=1.0)
