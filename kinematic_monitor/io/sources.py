"""What a sample source offers its consumers (replay, sweep, calibrate, read-ahead).

:class:`SampleSource` is the interface of an opened recording (today the rosbag2 reader,
:class:`kinematic_monitor.io.bag.BagSource`): samples in header-stamp order with
``TimeReset`` markers where the stamps jump back, and the bookkeeping of what was read,
rejected or lost. :class:`SampleSink` is what consumes them (``Monitor.process``).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import GnssSample, Sample

__all__ = ["TopicStats", "BagDamage", "Progress", "SampleSource", "SampleSink"]

#: ``progress(position, message_count)``: messages read so far, of how many
Progress = Callable[[int, int], None]


@dataclass
class TopicStats:
    """Per-topic counters: messages read, samples produced, rejections by reason."""

    topic: str
    msgtype: str
    expected: int = 0  # from the recording's metadata
    read: int = 0
    accepted: int = 0
    rejected: Counter[str] = field(default_factory=Counter)
    # samples stamped with the log (receive) time: the message has no header
    receive_time_stamped: int = 0


@dataclass
class BagDamage:
    """What a truncated or corrupt recording lost."""

    error: str
    expected: dict[str, int]  # per topic, from the metadata (0 when unknown)
    read: dict[str, int]  # per topic, messages actually read
    last_good_stamp: float  # [s] newest header stamp released before the damage (NaN: none)
    recovered_with: str  # how the readable part was read

    def summary(self) -> str:
        """One line: what was lost and where it stopped."""
        lost = ", ".join(
            f"{t}: {self.read.get(t, 0)}/{n if n else '?'}" for t, n in self.expected.items()
        )
        return (
            f"bag damaged ({self.error}); read up to stamp {self.last_good_stamp:.3f} s; "
            f"messages read/expected per topic: {lost}"
        )


class SampleSource(Protocol):
    """An opened recording: samples in stamp order and what reading them found.

    ``message_count``: messages on the used topics (for a progress bar); ``position``:
    those read so far; ``stats``: per used topic; ``warnings``: plain sentences (e.g. an
    optional topic missing); ``damage``: None if the recording read cleanly;
    ``out_of_order``: samples dropped as too late for stamp order (``late_by`` [s]: by up to
    how much); ``time_jumps``:
    backward stamp jumps (each gives a ``TimeReset`` in the stream); ``fixes``: the GNSS
    fixes read, in arrival order (they only place the drive on a map: they are not part of
    the stamp-ordered stream the monitor takes).
    """

    path: Path
    storage: str
    message_count: int
    position: int
    stats: dict[str, TopicStats]
    warnings: list[str]
    damage: BagDamage | None
    out_of_order: int
    late_by: float
    time_jumps: int
    fixes: list[GnssSample]

    def iter_samples(self, progress: Progress | None = None, progress_every: int = 5000
                     ) -> Iterator[Sample | TimeReset]:
        """Samples (and TimeReset markers) in stamp order; bookkeeping updated as read."""
        ...

    def close(self) -> None:
        """Release the recording's files."""
        ...


class SampleSink(Protocol):
    """What consumes a source's stream in stamp order (``Monitor.process``)."""

    def process(self, sample: Sample | TimeReset) -> None:
        """Consume one sample or TimeReset marker."""
        ...
