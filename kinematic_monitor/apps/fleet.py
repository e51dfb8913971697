"""Fleet-sweep core: bag discovery, content keys, summary tables, event clustering, GeoJSON.

No Dask and no ROS here: the ``sweep`` command (``kinematic_monitor.apps.sweep``) runs the bags
and this module turns the per-bag records into the fleet outputs.

Units: distances [m] (tables show km), durations [s] (tables show h), times are header-stamp
seconds; map-frame positions [m] in the localisation frame (REP 105 ``map``/``odom``);
geographic positions WGS84 latitude/longitude [deg]. GeoJSON follows RFC 7946 (positions
are [longitude, latitude], no ``crs`` member).

Resumability: a bag's *key* is a SHA-256 over its content fingerprint (sizes and names of
its files, a hash of ``metadata.yaml`` and of the first and last MiB of each storage file),
the validated parameter values and the package version. A per-bag marker file holding the
key says the bag was swept with exactly those inputs.
"""

from __future__ import annotations

import csv
import hashlib
import html
import io
import json
import math
import os
import statistics
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from kinematic_monitor.core.events import KINDS, SLIP_KINDS

LEVEL_RANK = {"WARN": 1, "ERROR": 2}
STORAGE_SUFFIXES = (".db3", ".mcap")
HASH_EDGE = 1 << 20  # [bytes] head and tail of each storage file that enter the fingerprint
MARKER = "sweep_done.json"
MARKER_SCHEMA = "kinematic_monitor.sweep_bag/1"
EARTH_RADIUS = 6371008.8  # [m] IUGG mean Earth radius R1 (Moritz, Geodetic Reference System 1980)


class FleetError(Exception):
    """Bad sweep input (a path that does not exist, no bag found, ...)."""


# ---------------------------------------------------------------------------------------
# discovery and keys


def is_bag_dir(path: Path) -> bool:
    """True for a rosbag2 folder: holds ``metadata.yaml`` or a .db3/.mcap storage file."""
    if not path.is_dir():
        return False
    if (path / "metadata.yaml").is_file():
        return True
    try:
        return any(p.suffix in STORAGE_SUFFIXES and p.is_file() for p in path.iterdir())
    except OSError:
        return False


def find_bags(paths: Iterable[str | os.PathLike[str]]) -> list[Path]:
    """Every rosbag2 folder at or under ``paths`` (absolute, sorted, no duplicates).

    A bag folder is not searched further; hidden folders are skipped. Raises
    ``FleetError`` naming a path that does not exist or is not a folder.
    """
    found: dict[str, Path] = {}
    for raw in paths:
        p = Path(os.path.abspath(raw))
        if not p.exists():
            raise FleetError(f"path {str(raw)!r} does not exist")
        if not p.is_dir():
            raise FleetError(f"path {str(raw)!r} is not a folder (give rosbag2 folders or "
                             "folders holding them)")
        if is_bag_dir(p):
            found[str(p)] = p
            continue
        for root, dirs, _files in os.walk(p, followlinks=False):
            here = Path(root)
            keep = []
            for d in sorted(dirs):
                if d.startswith("."):
                    continue
                sub = here / d
                if is_bag_dir(sub):
                    found[str(sub)] = sub
                else:
                    keep.append(d)
            dirs[:] = keep
    return [found[k] for k in sorted(found)]


def _file_digest(path: Path, edge: int = HASH_EDGE) -> str:
    """SHA-256 of the first and last ``edge`` bytes (the whole file when shorter)."""
    h = hashlib.sha256()
    size = path.stat().st_size
    with open(path, "rb") as fh:
        h.update(fh.read(edge))
        if size > edge:
            fh.seek(max(edge, size - edge))
            h.update(fh.read(edge))
    return h.hexdigest()


def bag_fingerprint(path: str | os.PathLike[str]) -> str:
    """Content fingerprint of a bag folder (hex SHA-256).

    Covers each storage file's name, size and head/tail hash (``HASH_EDGE`` bytes) and the
    whole of ``metadata.yaml``. Raises ``OSError`` when a file cannot be read.
    """
    p = Path(path)
    h = hashlib.sha256()
    meta = p / "metadata.yaml"
    if meta.is_file():
        h.update(b"metadata.yaml\0" + hashlib.sha256(meta.read_bytes()).hexdigest().encode())
    for f in sorted(x for x in p.iterdir() if x.suffix in STORAGE_SUFFIXES):
        size = f.stat().st_size
        h.update(f"\0{f.name}\0{size}\0{_file_digest(f)}".encode())
    return h.hexdigest()


def params_digest(values: Mapping[str, Any]) -> str:
    """Hex SHA-256 of parameter values by dotted name (canonical JSON, key order ignored)."""
    text = json.dumps({str(k): values[k] for k in values}, sort_keys=True, default=str,
                      separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def sweep_key(fingerprint: str, params_hash: str, version: str) -> str:
    """The key a bag's marker must hold for the bag to count as swept."""
    text = f"{MARKER_SCHEMA}\0{fingerprint}\0{params_hash}\0{version}"
    return hashlib.sha256(text.encode()).hexdigest()


def bag_output_name(path: str | os.PathLike[str]) -> str:
    """Per-bag output folder name: the folder name plus 8 hex of its absolute path's hash."""
    p = os.path.abspath(path)
    name = "".join(c if c.isalnum() or c in "-_." else "_" for c in Path(p).name)
    name = name.lstrip(".") or "bag"
    return f"{name[:60]}-{hashlib.sha256(p.encode()).hexdigest()[:8]}"


def bag_start_time(path: str | os.PathLike[str]) -> float:
    """The bag's start [s since the epoch, log clock] from ``metadata.yaml``; NaN if unknown."""
    import yaml

    try:
        doc = yaml.safe_load((Path(path) / "metadata.yaml").read_text())
        ns = doc["rosbag2_bagfile_information"]["starting_time"]["nanoseconds_since_epoch"]
        return float(ns) * 1e-9
    except (OSError, yaml.YAMLError, KeyError, TypeError, ValueError):
        return math.nan


# ---------------------------------------------------------------------------------------
# atomic files and markers


def write_text_atomic(path: str | os.PathLike[str], text: str) -> None:
    """Write ``text`` to a temporary file beside ``path``, fsync, then rename over it."""
    p = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".partial-{p.name}-", dir=p.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_json_atomic(path: str | os.PathLike[str], doc: Any) -> None:
    """``write_text_atomic`` of indented JSON (NaN refused: JSON has none)."""
    write_text_atomic(path, json.dumps(doc, indent=1, allow_nan=False) + "\n")


def read_marker(path: str | os.PathLike[str]) -> dict[str, Any] | None:
    """The per-bag marker as a dict, or None when missing, unreadable or of another schema."""
    try:
        with open(path, encoding="utf-8") as fh:
            doc = json.load(fh)
    except (OSError, ValueError):
        return None
    if not isinstance(doc, dict) or doc.get("schema") != MARKER_SCHEMA:
        return None
    return doc


# ---------------------------------------------------------------------------------------
# per-bag records


@dataclass
class BagRecord:
    """One bag's sweep result, as the marker file stores it.

    ``status``: 'ok' or 'failed'; ``events``: ``events.json`` entries; ``fixes``: per event,
    [latitude, longitude] [deg] at the event's ``detected_at`` or None; ``track``: decimated
    [[x, y], ...] [m] in the localisation frame; ``calibration``: calibrated ``vehicle.*``
    values when a calibrate result was found.
    """

    bag_id: str
    bag: str
    status: str
    key: str = ""
    error: str = ""
    duration: float = 0.0  # [s]
    distance: float = 0.0  # [m]
    start_time: float = math.nan  # [s] log clock
    events: list[dict[str, Any]] = field(default_factory=list)
    fixes: list[list[float] | None] = field(default_factory=list)
    track: list[list[float]] = field(default_factory=list)
    lost_data: list[str] = field(default_factory=list)
    calibration: dict[str, float] | None = None
    skipped: bool = False
    elapsed: float = 0.0  # [s] wall time of the bag's task
    cpu: float = 0.0  # [s] CPU time of the bag's task (its worker process)

    def to_marker(self, version: str) -> dict[str, Any]:
        """The marker document (JSON-safe)."""
        return {
            "schema": MARKER_SCHEMA, "key": self.key, "version": version,
            "bag_id": self.bag_id, "bag": self.bag, "status": self.status,
            "error": self.error, "duration_s": _finite_or_none(self.duration),
            "distance_m": _finite_or_none(self.distance),
            "start_time": _finite_or_none(self.start_time), "events": self.events,
            "fixes": self.fixes, "track": self.track, "lost_data": self.lost_data,
            "elapsed_s": round(self.elapsed, 3), "cpu_s": round(self.cpu, 3),
            "finished_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        }

    @classmethod
    def from_marker(cls, doc: Mapping[str, Any]) -> BagRecord:
        """Inverse of ``to_marker`` (unknown fields ignored)."""
        def num(name: str, default: float) -> float:
            v = doc.get(name)
            return float(v) if isinstance(v, int | float) else default

        return cls(
            bag_id=str(doc.get("bag_id", "")), bag=str(doc.get("bag", "")),
            status=str(doc.get("status", "failed")), key=str(doc.get("key", "")),
            error=str(doc.get("error", "")), duration=num("duration_s", 0.0),
            distance=num("distance_m", 0.0), start_time=num("start_time", math.nan),
            events=list(doc.get("events") or []), fixes=list(doc.get("fixes") or []),
            track=list(doc.get("track") or []), lost_data=list(doc.get("lost_data") or []),
            elapsed=num("elapsed_s", 0.0), cpu=num("cpu_s", 0.0),
        )


def _finite_or_none(x: float) -> float | None:
    return float(x) if isinstance(x, int | float) and math.isfinite(x) else None


def interpolate_fix(fixes: Sequence[tuple[float, float, float]], t: float,
                    max_gap: float = 2.0) -> list[float] | None:
    """[lat, lon] [deg] at time ``t`` [s] from time-sorted (t, lat, lon) fixes, or None.

    Linear between the two fixes around ``t`` when they are at most ``max_gap`` s apart;
    the nearest fix when ``t`` is outside them by at most ``max_gap / 2``; None otherwise.
    """
    if not fixes or not math.isfinite(t):
        return None
    import bisect

    times = [f[0] for f in fixes]
    i = bisect.bisect_left(times, t)
    if 0 < i < len(fixes):
        (t0, la0, lo0), (t1, la1, lo1) = fixes[i - 1], fixes[i]
        if t1 - t0 <= max_gap:
            w = 0.0 if t1 == t0 else (t - t0) / (t1 - t0)
            return [la0 + w * (la1 - la0), lo0 + w * (lo1 - lo0)]
    near = min((j for j in (i - 1, i) if 0 <= j < len(fixes)),
               key=lambda j: abs(times[j] - t))
    if abs(times[near] - t) <= max_gap / 2:
        return [fixes[near][1], fixes[near][2]]
    return None


# ---------------------------------------------------------------------------------------
# summary tables


def _rate(count: int, per: float, amount: float) -> float | None:
    """``count`` per ``per`` units of ``amount``; None when nothing was covered."""
    if not (amount > 0.0 and math.isfinite(amount)):
        return None
    return count * per / amount


def summary_rows(records: Sequence[BagRecord], kinds: Sequence[str] = KINDS
                 ) -> list[dict[str, Any]]:
    """Per-bag rows plus a final 'TOTAL' row over the bags that were swept successfully.

    Each row: ``bag_id``, ``bag``, ``status``, ``error``, ``duration_h``, ``distance_km``,
    ``events``, and per kind ``<kind>`` (count), ``<kind>_per_100km`` and
    ``<kind>_per_hour`` (None where distance or duration is zero, or the bag failed).
    """
    rows: list[dict[str, Any]] = []
    total_counts = dict.fromkeys(kinds, 0)
    total_d = total_t = 0.0
    for r in records:
        row: dict[str, Any] = {"bag_id": r.bag_id, "bag": r.bag, "status": r.status,
                               "error": r.error}
        if r.status != "ok":
            row.update({"duration_h": None, "distance_km": None, "events": None})
            for k in kinds:
                row.update({k: None, f"{k}_per_100km": None, f"{k}_per_hour": None})
            rows.append(row)
            continue
        counts = dict.fromkeys(kinds, 0)
        for ev in r.events:
            if ev.get("kind") in counts:
                counts[str(ev["kind"])] += 1
        row.update({"duration_h": r.duration / 3600.0, "distance_km": r.distance / 1000.0,
                    "events": len(r.events)})
        for k in kinds:
            row.update({k: counts[k], f"{k}_per_100km": _rate(counts[k], 1e5, r.distance),
                        f"{k}_per_hour": _rate(counts[k], 3600.0, r.duration)})
            total_counts[k] += counts[k]
        total_d += r.distance
        total_t += r.duration
        rows.append(row)
    ok = [r for r in records if r.status == "ok"]
    total: dict[str, Any] = {"bag_id": "TOTAL", "bag": f"{len(ok)} of {len(records)} bags",
                             "status": "", "error": "", "duration_h": total_t / 3600.0,
                             "distance_km": total_d / 1000.0,
                             "events": sum(len(r.events) for r in ok)}
    for k in kinds:
        total.update({k: total_counts[k],
                      f"{k}_per_100km": _rate(total_counts[k], 1e5, total_d),
                      f"{k}_per_hour": _rate(total_counts[k], 3600.0, total_t)})
    rows.append(total)
    return rows


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}" if math.isfinite(value) else ""
    return str(value)


def summary_csv(rows: Sequence[Mapping[str, Any]]) -> str:
    """The summary rows as CSV text (empty cell where a rate is undefined)."""
    if not rows:
        return ""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    cols = list(rows[0])
    w.writerow(cols)
    for row in rows:
        w.writerow([_cell(row.get(c)) for c in cols])
    return buf.getvalue()


def event_severity(ev: Mapping[str, Any]) -> tuple[int, float]:
    """Sort key of an event's badness: level (ERROR over WARN), then duration [s]."""
    lvl = LEVEL_RANK.get(str(ev.get("level")), 0)
    try:
        dur = float(ev["end"]) - float(ev["start"])
    except (KeyError, TypeError, ValueError):
        dur = 0.0
    return (lvl, dur if math.isfinite(dur) else 0.0)


def worst_events(records: Sequence[BagRecord], n: int = 20) -> list[dict[str, Any]]:
    """The ``n`` worst events of the fleet: each event's fields plus ``bag_id`` and ``bag``."""
    out: list[dict[str, Any]] = []
    for r in records:
        if r.status != "ok":
            continue
        for ev in r.events:
            out.append({**ev, "bag_id": r.bag_id, "bag": r.bag})
    out.sort(key=lambda e: (event_severity(e), -float(e.get("start") or 0.0)), reverse=True)
    return out[:n]


def calibration_drift(base: Mapping[str, float],
                      runs: Sequence[tuple[str, float, Mapping[str, float]]]
                      ) -> dict[str, Any] | None:
    """Calibrated vehicle values across bags against the configured ``base`` values.

    ``runs``: (bag_id, start time [s] or NaN, {dotted name: value}). Returns None without
    runs, else ``{"parameters", "rows" (time-ordered: bag_id, start_time, values, deltas),
    "stats" ({name: base, n, mean, std (sample, n-1), min, max, spread})}``.
    """
    if not runs:
        return None
    names = sorted({k for _, _, vals in runs for k in vals})
    ordered = sorted(runs, key=lambda r: (math.isnan(r[1]), r[1], r[0]))
    rows = []
    for bag_id, start, vals in ordered:
        rows.append({
            "bag_id": bag_id, "start_time": _finite_or_none(start),
            "values": {k: vals[k] for k in names if k in vals},
            "deltas": {k: vals[k] - base[k] for k in names if k in vals and k in base},
        })
    stats: dict[str, dict[str, float | int | None]] = {}
    for k in names:
        xs = [float(v[k]) for _, _, v in runs if k in v]
        stats[k] = {
            "base": _finite_or_none(base[k]) if k in base else None, "n": len(xs),
            "mean": statistics.fmean(xs),
            "std": statistics.stdev(xs) if len(xs) > 1 else None,
            "min": min(xs), "max": max(xs), "spread": max(xs) - min(xs),
        }
    return {"parameters": names, "rows": rows, "stats": stats}


def drift_csv(drift: Mapping[str, Any]) -> str:
    """The drift rows as CSV: bag_id, start_time, then value and delta per parameter."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    names = list(drift["parameters"])
    w.writerow(["bag_id", "start_time", *names, *[f"{n}_delta" for n in names]])
    for r in drift["rows"]:
        w.writerow([r["bag_id"], _cell(r["start_time"]),
                    *[_cell(r["values"].get(n)) for n in names],
                    *[_cell(r["deltas"].get(n)) for n in names]])
    return buf.getvalue()


# ---------------------------------------------------------------------------------------
# HTML summary

_CSS = """body{font-family:sans-serif;margin:1.5em;color:#222}
table{border-collapse:collapse;margin:0.5em 0 1.5em}td,th{border:1px solid #bbb;
padding:2px 6px;font-size:0.9em;text-align:right}th{background:#eee}td.l,th.l{text-align:left}
tr.total td{font-weight:bold;background:#f4f4f4}tr.failed td{color:#a00}
.ERROR{color:#b00;font-weight:bold}.WARN{color:#b60}"""


def _h(value: Any) -> str:
    return html.escape(_cell(value))


def _report_link(bag_id: str, reports: Mapping[str, str]) -> str:
    href = reports.get(bag_id)
    if not href:
        return _h(bag_id)
    return f'<a href="{html.escape(href, quote=True)}">{_h(bag_id)}</a>'


def summary_html(rows: Sequence[Mapping[str, Any]], worst: Sequence[Mapping[str, Any]],
                 reports: Mapping[str, str], drift: Mapping[str, Any] | None = None,
                 kinds: Sequence[str] = KINDS, title: str = "Fleet sweep summary",
                 notes: Sequence[str] = ()) -> str:
    """Self-contained HTML page: rates table, worst events linked to bag reports, drift.

    ``reports``: bag_id -> relative link to that bag's ``report.html``.
    """
    out = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{_h(title)}</title>",
           f"<style>{_CSS}</style></head><body><h1>{_h(title)}</h1>"]
    for n in notes:
        out.append(f"<p>{_h(n)}</p>")
    out.append("<h2>Events per kind</h2><p>Counts, per 100 km and per hour of recorded "
               "drive. Empty cells: no distance or time covered, or the bag failed.</p>")
    out.append("<table><tr><th class='l'>bag</th><th>status</th><th>hours</th><th>km</th>"
               "<th>events</th>")
    for k in kinds:
        out.append(f"<th>{_h(k)}<br>n</th><th>/100 km</th><th>/h</th>")
    out.append("</tr>")
    for row in rows:
        cls = ("total" if row.get("bag_id") == "TOTAL"
               else "failed" if row.get("status") == "failed" else "")
        bag_id = str(row.get("bag_id"))
        name = _h(bag_id) if cls == "total" else _report_link(bag_id, reports)
        status = _h(row.get("status"))
        if row.get("error"):
            status = f"<span title='{html.escape(str(row['error']), quote=True)}'>{status}</span>"
        out.append(f"<tr class='{cls}'><td class='l'>{name}</td><td>{status}</td>")
        for c in ("duration_h", "distance_km", "events"):
            out.append(f"<td>{_fmt_num(row.get(c))}</td>")
        for k in kinds:
            for c in (k, f"{k}_per_100km", f"{k}_per_hour"):
                out.append(f"<td>{_fmt_num(row.get(c))}</td>")
        out.append("</tr>")
    out.append("</table>")
    failed = [r for r in rows if r.get("status") == "failed"]
    if failed:
        out.append("<h2>Failed bags</h2><table><tr><th class='l'>bag</th>"
                   "<th class='l'>error</th></tr>")
        for r in failed:
            out.append(f"<tr class='failed'><td class='l'>{_h(r.get('bag'))}</td>"
                       f"<td class='l'>{_h(r.get('error'))}</td></tr>")
        out.append("</table>")
    out.append("<h2>Worst events</h2>")
    if not worst:
        out.append("<p>No events.</p>")
    else:
        out.append("<table><tr><th class='l'>bag</th><th class='l'>kind</th><th>level</th>"
                   "<th>start (UTC)</th><th>duration [s]</th><th class='l'>peak</th>"
                   "<th class='l'>summary</th></tr>")
        for ev in worst:
            lvl = str(ev.get("level"))
            dur = event_severity(ev)[1]
            peak = ", ".join(f"{k} {_fmt_num(v)}" for k, v in (ev.get("peak") or {}).items())
            out.append(
                f"<tr><td class='l'>{_report_link(str(ev.get('bag_id')), reports)}</td>"
                f"<td class='l'>{_h(ev.get('kind'))}</td>"
                f"<td class='{html.escape(lvl, quote=True)}'>{_h(lvl)}</td>"
                f"<td>{_h(_utc_text(ev.get('start')))}</td><td>{_fmt_num(dur)}</td>"
                f"<td class='l'>{_h(peak)}</td><td class='l'>{_h(ev.get('summary'))}</td></tr>")
        out.append("</table>")
    if drift:
        out.append("<h2>Calibration drift across bags</h2><table><tr><th class='l'>parameter"
                   "</th><th>configured</th><th>n</th><th>mean</th><th>std</th><th>min</th>"
                   "<th>max</th><th>spread</th></tr>")
        for name in drift["parameters"]:
            s = drift["stats"][name]
            out.append(f"<tr><td class='l'>{_h(name)}</td>" + "".join(
                f"<td>{_fmt_num(s.get(c), 5)}</td>"
                for c in ("base", "n", "mean", "std", "min", "max", "spread")) + "</tr>")
        out.append("</table>")
    out.append("</body></html>\n")
    return "".join(out)


def _fmt_num(value: Any, digits: int = 3) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.{digits}g}" if math.isfinite(value) else ""
    return html.escape(str(value))


# ---------------------------------------------------------------------------------------
# clustering and GeoJSON


@dataclass
class Cluster:
    """Events of one kind at one place: ``count`` events from ``bags``.

    ``lat``/``lon`` [deg] are set when the events were placed in WGS84, ``x``/``y`` [m]
    (localisation frame) when map-frame positions were known; means over the members.
    """

    kind: str
    level: str
    count: int
    bags: list[str]
    worst: dict[str, Any]  # the worst member event, with bag_id/bag
    peak: dict[str, float]
    first_time: float
    last_time: float
    x: float | None = None
    y: float | None = None
    lat: float | None = None
    lon: float | None = None


def _placed(records: Sequence[BagRecord], kinds: Sequence[str]) -> list[dict[str, Any]]:
    out = []
    for r in records:
        if r.status != "ok":
            continue
        for i, ev in enumerate(r.events):
            if ev.get("kind") not in kinds:
                continue
            pos = ev.get("position") or [None, None]
            xy = None
            if (len(pos) == 2 and all(isinstance(v, int | float) and math.isfinite(v)
                                      for v in pos)):
                xy = (float(pos[0]), float(pos[1]))
            fix = r.fixes[i] if i < len(r.fixes) else None
            ll = (float(fix[0]), float(fix[1])) if fix else None
            if xy is None and ll is None:
                continue
            out.append({"ev": {**ev, "bag_id": r.bag_id, "bag": r.bag}, "xy": xy, "ll": ll})
    return out


def cluster_events(records: Sequence[BagRecord], radius: float = 10.0,
                   kinds: Sequence[str] = SLIP_KINDS) -> tuple[list[Cluster], int]:
    """Group events of the same kind within ``radius`` [m] of a cluster's seed event.

    Leader clustering, worst events first: each event joins the nearest seed within
    ``radius`` or seeds a new cluster (no chaining). Events with a WGS84 fix are compared
    on a local tangent plane (equirectangular about the fleet's mean latitude; metre-level
    over a proving ground); events with only a map-frame position are compared in the map
    frame (the fleet is assumed to share one map). Returns (clusters, events not placed).
    """
    if not (radius >= 0.0 and math.isfinite(radius)):
        raise ValueError(f"cluster radius {radius!r} must be a finite number >= 0 m")
    placed = _placed(records, kinds)
    unplaced = sum(1 for r in records if r.status == "ok"
                   for e in r.events if e.get("kind") in kinds) - len(placed)
    lats = [p["ll"][0] for p in placed if p["ll"]]
    lat0 = math.radians(statistics.fmean(lats)) if lats else 0.0

    def metric(p: dict[str, Any]) -> tuple[str, float, float]:
        if p["ll"]:
            la, lo = p["ll"]
            return ("wgs84", EARTH_RADIUS * math.radians(lo) * math.cos(lat0),
                    EARTH_RADIUS * math.radians(la))
        return ("map", p["xy"][0], p["xy"][1])

    placed.sort(key=lambda p: (event_severity(p["ev"]), -float(p["ev"].get("start") or 0.0)),
                reverse=True)
    groups: list[tuple[str, str, float, float, list[dict[str, Any]]]] = []
    cell = max(radius, 1e-9)
    grid: dict[tuple[str, str, int, int], list[int]] = {}
    for p in placed:
        space, u, v = metric(p)
        kind = str(p["ev"]["kind"])
        ci, cj = math.floor(u / cell), math.floor(v / cell)
        best, best_d = -1, math.inf
        for di in (-1, 0, 1):
            for dj in (-1, 0, 1):
                for g in grid.get((kind, space, ci + di, cj + dj), ()):
                    d = math.hypot(groups[g][2] - u, groups[g][3] - v)
                    if d <= radius and d < best_d:
                        best, best_d = g, d
        if best >= 0:
            groups[best][4].append(p)
        else:
            grid.setdefault((kind, space, ci, cj), []).append(len(groups))
            groups.append((kind, space, u, v, [p]))
    clusters = [_make_cluster(kind, members) for kind, _, _, _, members in groups]
    return clusters, unplaced


def _make_cluster(kind: str, members: list[dict[str, Any]]) -> Cluster:
    worst = members[0]["ev"]  # members arrive worst first
    peak: dict[str, float] = {}
    for m in members:
        for k, v in (m["ev"].get("peak") or {}).items():
            if isinstance(v, int | float) and math.isfinite(v):
                if k not in peak or abs(v) > abs(peak[k]):
                    peak[k] = float(v)
    starts = [float(m["ev"]["start"]) for m in members
              if isinstance(m["ev"].get("start"), int | float)]
    xys = [m["xy"] for m in members if m["xy"]]
    lls = [m["ll"] for m in members if m["ll"]]
    bags = sorted({str(m["ev"]["bag_id"]) for m in members})
    return Cluster(
        kind=kind, level=str(worst.get("level")), count=len(members), bags=bags,
        worst=worst, peak=peak, first_time=min(starts) if starts else math.nan,
        last_time=max(starts) if starts else math.nan,
        x=statistics.fmean(p[0] for p in xys) if xys else None,
        y=statistics.fmean(p[1] for p in xys) if xys else None,
        lat=statistics.fmean(p[0] for p in lls) if lls else None,
        lon=statistics.fmean(p[1] for p in lls) if lls else None,
    )


def _utc_text(t: Any) -> str:
    """'YYYY-MM-DD HH:MM:SS.s' (UTC) of a header-stamp time [s]; '' if not a time."""
    if not isinstance(t, int | float) or not math.isfinite(t):
        return ""
    return datetime.fromtimestamp(t, timezone.utc).strftime("%Y-%m-%d %H:%M:%S.%f")[:21]


def _utc(t: float) -> str | None:
    if not math.isfinite(t):
        return None
    return datetime.fromtimestamp(t, timezone.utc).isoformat(timespec="milliseconds")


def clusters_geojson(clusters: Sequence[Cluster], reports: Mapping[str, str] | None = None
                     ) -> dict[str, Any]:
    """RFC 7946 FeatureCollection: one Point feature per cluster.

    Geometry is [longitude, latitude] (WGS84, 7 decimals) when the cluster was placed in
    WGS84, else null (RFC 7946 section 3.2 allows an unlocated feature); the map-frame
    position is always in ``properties.map_position`` [m] when known.
    """
    feats = []
    reports = reports or {}
    for i, c in enumerate(clusters):
        geom = None
        if c.lat is not None and c.lon is not None:
            geom = {"type": "Point", "coordinates": [round(c.lon, 7), round(c.lat, 7)]}
        w = c.worst
        props = {
            "kind": c.kind, "level": c.level, "count": c.count,
            "bag": w.get("bag"), "bag_id": w.get("bag_id"), "bags": c.bags,
            "time": w.get("start"), "time_utc": _utc(float(w.get("start") or math.nan)),
            "first_time": _finite_or_none(c.first_time),
            "last_time": _finite_or_none(c.last_time),
            "peak": c.peak, "summary": w.get("summary"),
            "map_position": ([round(c.x, 3), round(c.y, 3)]
                             if c.x is not None and c.y is not None else None),
            "report": reports.get(str(w.get("bag_id"))),
        }
        feats.append({"type": "Feature", "id": i + 1, "geometry": geom, "properties": props})
    return {"type": "FeatureCollection", "features": feats}


def geojson_problems(doc: Any) -> list[str]:
    """Structural problems of a FeatureCollection of Point features per RFC 7946.

    Checks section 3.3 (FeatureCollection with a "features" array), 3.2 (Feature with
    "geometry" an object or null and "properties" an object or null; "id" a string or
    number), 3.1.2 (Point "coordinates" a position), 3.1.1 (a position is 2 or 3 numbers,
    longitude then latitude, in WGS84 range) and section 4 (no "crs" member).
    Returns an empty list for a valid document.
    """
    bad: list[str] = []
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        return ["top level is not an object of type FeatureCollection"]
    if "crs" in doc:
        bad.append("'crs' member is not allowed (RFC 7946 section 4)")
    feats = doc.get("features")
    if not isinstance(feats, list):
        return [*bad, "'features' is not an array"]
    for i, f in enumerate(feats):
        where = f"features[{i}]"
        if not isinstance(f, dict) or f.get("type") != "Feature":
            bad.append(f"{where} is not an object of type Feature")
            continue
        if "geometry" not in f:
            bad.append(f"{where} has no 'geometry' member")
        if "properties" not in f:
            bad.append(f"{where} has no 'properties' member")
        elif f["properties"] is not None and not isinstance(f["properties"], dict):
            bad.append(f"{where}.properties is neither an object nor null")
        if "id" in f and (isinstance(f["id"], bool) or not isinstance(f["id"], str | int | float)):
            bad.append(f"{where}.id is neither a string nor a number")
        g = f.get("geometry")
        if g is None:
            continue
        if not isinstance(g, dict) or g.get("type") != "Point":
            bad.append(f"{where}.geometry is not a Point or null")
            continue
        c = g.get("coordinates")
        if (not isinstance(c, list) or len(c) not in (2, 3)
                or not all(isinstance(v, int | float) and not isinstance(v, bool)
                           and math.isfinite(v) for v in c)):
            bad.append(f"{where}.geometry.coordinates is not a position of 2 or 3 numbers")
            continue
        if not (-180.0 <= c[0] <= 180.0 and -90.0 <= c[1] <= 90.0):
            bad.append(f"{where}.geometry.coordinates {c[:2]} out of longitude/latitude range")
    return bad
