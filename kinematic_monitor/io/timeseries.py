"""The per-update time series of a replay, streamed to CSV with peak-keeping decimation.

One row per decimation window (``min_interval`` seconds of header-stamp time): pose and
speed are the latest in the window, each residual channel keeps the value with the largest
magnitude in the window and each check level the highest level, so peaks and short alarms
survive decimation. Rows are written as they complete: memory stays flat whatever the
length of the drive. Units: time [s] (header stamp), x, y [m] in the localisation frame
(REP 105 ``map``/``odom``), yaw and steering [rad], speed [m/s], accel [m/s²]; levels are
REP 107 (0 OK, 1 WARN, 2 ERROR, 3 STALE).
"""

from __future__ import annotations

import contextlib
import csv
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO

import numpy as np

BASE_COLUMNS = ("time", "x", "y", "yaw", "speed", "steering", "accel")
RESIDUAL_PREFIX = "res:"
LEVEL_PREFIX = "level:"
LEVEL_MAX = "level_max"
DEFAULT_MIN_INTERVAL = 0.1  # [s] 10 rows per second: common practice, no source


class TimeseriesWriter:
    """Streams decimated rows to an open text file as CSV.

    ``channels``: residual channel names (columns ``res:<name>``); ``checks``: check names
    (columns ``level:<name>``). Values for unknown names are ignored and counted in
    ``ignored``.
    """

    def __init__(self, fh: IO[str], channels: Sequence[str], checks: Sequence[str],
                 min_interval: float = DEFAULT_MIN_INTERVAL) -> None:
        if not (math.isfinite(min_interval) and min_interval >= 0.0):
            raise ValueError(f"min_interval={min_interval!r} s must be finite and >= 0")
        self.channels = list(dict.fromkeys(channels))
        self.checks = list(dict.fromkeys(checks))
        self.min_interval = min_interval
        self._chan_index = {c: i for i, c in enumerate(self.channels)}
        self._check_index = {c: i for i, c in enumerate(self.checks)}
        self._writer = csv.writer(fh, lineterminator="\n")
        self._writer.writerow(
            list(BASE_COLUMNS)
            + [RESIDUAL_PREFIX + c for c in self.channels]
            + [LEVEL_PREFIX + c for c in self.checks]
            + [LEVEL_MAX]
        )
        self._fh = fh
        # one row as one %-format: the same text as f"{v:.6g}" per value; numbers need
        # no CSV quoting
        self._row_format = ("%.6f" + ",%.6g" * (len(BASE_COLUMNS) - 1 + len(self.channels))
                            + ",%d" * (len(self.checks) + 1) + "\n")
        self.rows = 0
        self._kept: list[list[float]] = []  # every written row, as numbers (see series())
        self.ignored = 0
        self._open = False
        self._window_start = -math.inf
        self._reset_window()

    def _reset_window(self) -> None:
        self._base = [math.nan] * len(BASE_COLUMNS)
        self._res = [math.nan] * len(self.channels)
        self._lev = [0] * len(self.checks)
        self._accel = math.nan

    def add(self, time: float, x: float = math.nan, y: float = math.nan,
            yaw: float = math.nan, speed: float = math.nan, steering: float = math.nan,
            accel: float = math.nan, residuals: Mapping[str, float] | None = None,
            levels: Mapping[str, int] | None = None) -> None:
        """Add one update at header stamp ``time`` [s]; a row is written per window.

        A non-finite ``time`` is ignored and counted in ``ignored``.
        """
        if not math.isfinite(time):
            self.ignored += 1
            return
        if self._open and time - self._window_start >= self.min_interval - 1e-6:
            self._flush_row()
        fresh = not self._open  # a new window: the residual slots are all NaN
        if fresh:
            self._open = True
            self._window_start = time
        b = self._base
        b[0] = time
        for i, v in ((1, x), (2, y), (3, yaw), (4, speed), (5, steering)):
            if math.isfinite(v):
                b[i] = v
        if math.isfinite(accel) and not (abs(accel) <= abs(self._accel)):
            self._accel = accel
        if residuals:
            chan_index = self._chan_index
            res = self._res
            isfinite = math.isfinite
            if fresh:  # every slot NaN: a finite value always replaces it
                for name, value in residuals.items():
                    j = chan_index.get(name)
                    if j is None:
                        self.ignored += 1
                    elif isfinite(value):
                        res[j] = value
            else:
                for name, value in residuals.items():
                    j = chan_index.get(name)
                    if j is None:
                        self.ignored += 1
                        continue
                    if isfinite(value) and not (abs(value) <= abs(res[j])):
                        res[j] = value
        if levels:
            check_index = self._check_index
            lev = self._lev
            for name, level in levels.items():
                k = check_index.get(name)
                if k is None:
                    self.ignored += 1
                    continue
                if level > lev[k]:
                    lev[k] = int(level)

    def _flush_row(self) -> None:
        b = self._base
        b[6] = self._accel
        lev = self._lev
        # add() stores finite values only, so every other slot is NaN, written "nan"
        row = [*b, *self._res, *lev, max(lev, default=0)]
        self._fh.write(self._row_format % tuple(row))
        self._kept.append(row)
        self.rows += 1
        self._open = False
        self._reset_window()

    def series(self) -> Series:
        """The rows written so far as columns (what reading the file back gives, at full
        precision instead of the file's 6 significant digits)."""
        header = (list(BASE_COLUMNS) + [RESIDUAL_PREFIX + c for c in self.channels]
                  + [LEVEL_PREFIX + c for c in self.checks] + [LEVEL_MAX])
        if not self._kept:
            return Series({h: np.empty(0) for h in header})
        arr = np.array(self._kept, dtype=float)
        return Series({h: arr[:, j] for j, h in enumerate(header)})

    def break_window(self) -> None:
        """Write the open window now (the stamps jumped back: no row spans two timelines)."""
        if self._open:
            self._flush_row()

    def close(self) -> None:
        """Write the last (partial) window; the file itself is closed by its owner."""
        if self._open:
            self._flush_row()
        self._fh.flush()


@dataclass
class Series:
    """A time series read back from CSV: column name -> array (levels as float)."""

    columns: dict[str, np.ndarray] = field(default_factory=dict)

    def __len__(self) -> int:
        t = self.columns.get("time")
        return 0 if t is None else int(t.shape[0])

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def get(self, name: str) -> np.ndarray | None:
        return self.columns.get(name)

    @property
    def residual_channels(self) -> list[str]:
        return [c[len(RESIDUAL_PREFIX):] for c in self.columns if c.startswith(RESIDUAL_PREFIX)]

    @property
    def checks(self) -> list[str]:
        return [c[len(LEVEL_PREFIX):] for c in self.columns if c.startswith(LEVEL_PREFIX)]


@contextlib.contextmanager
def _csv_rows(path: str | Path) -> Iterator[tuple[list[str], Iterator[list[str]]]]:
    """(header, remaining rows) of a CSV file; the header is [] for an empty file."""
    with open(path, encoding="utf-8", newline="") as fh:
        reader = csv.reader(fh)
        yield next(reader, []), reader


def read_timeseries(path: str | Path) -> Series:
    """Read a CSV written by ``TimeseriesWriter`` (missing values become NaN)."""
    with _csv_rows(path) as (header, reader):
        if not header:
            return Series({})
        rows = list(reader)
    return series_from_rows(header, rows)


def read_columns(path: str | Path, names: Sequence[str]) -> Series:
    """Read only the columns ``names`` of a CSV written by ``TimeseriesWriter``.

    Same values as the same columns of :func:`read_timeseries` (rows of the wrong length
    skipped, missing values NaN), without converting the other columns; a name the file
    does not hold is left out.
    """
    with _csv_rows(path) as (header, reader):
        if not header:
            return Series({})
        width = len(header)
        index = {h: j for j, h in enumerate(header)}
        wanted = [(n, index[n]) for n in dict.fromkeys(names) if n in index]
        cols: list[list[float]] = [[] for _ in wanted]
        nan = math.nan
        for row in reader:
            if len(row) != width:
                continue
            for col, (_, j) in zip(cols, wanted, strict=True):
                v = row[j]
                col.append(float(v) if v not in ("", "nan") else nan)
    return Series({n: np.array(col) for (n, _), col in zip(wanted, cols, strict=True)})


def series_from_rows(header: Sequence[str], rows: Iterable[Sequence[str]]) -> Series:
    """Build a ``Series`` from a CSV header and string rows."""
    data = [r for r in rows if len(r) == len(header)]
    if not data:
        return Series({h: np.empty(0) for h in header})
    arr = np.array(data, dtype=object)
    out: dict[str, np.ndarray] = {}
    for j, name in enumerate(header):
        col = arr[:, j]
        out[name] = np.array([float(v) if v not in ("", "nan") else math.nan for v in col])
    return Series(out)
