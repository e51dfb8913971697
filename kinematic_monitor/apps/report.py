"""The self-contained HTML report of a replay.

One file, no network and no script: inline CSS and inline SVG plots drawn by matplotlib's
Agg/SVG backends. Plotted series are decimated (peak-keeping) and per-event plots are
limited, so the report stays fast and small for long drives. Times are header stamps [s],
positions [m] in the localisation frame (REP 105), angles [rad]; levels are REP 107.
"""

from __future__ import annotations

import html
import io
import math
import re
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from kinematic_monitor.core.events import KINDS as EVENT_KINDS
from kinematic_monitor.core.events import SLIP_KINDS
from kinematic_monitor.core.levels import LEVEL_NAMES
from kinematic_monitor.core.model import GRAVITY as STANDARD_GRAVITY
from kinematic_monitor.io.timeseries import LEVEL_MAX, RESIDUAL_PREFIX, Series

LEVEL_COLOURS = {0: "#4f8a6b", 1: "#d9931c", 2: "#b8322a", 3: "#8a8d91"}
KIND_LABELS = {
    "lateral_slip": "lateral slip (tyres)",
    "longitudinal_slip": "longitudinal slip (tyres)",
    "localization_fault": "localisation fault",
    "calibration_bias": "calibration bias",
    "input_stale": "input stale",
}
MAX_PLOT_POINTS = 1500  # per line, after peak-keeping decimation
MAX_EVENT_PLOTS = 12
MAX_CHANNEL_PLOTS = 8

CAUTION = (
    "This report comes from an advisory monitoring tool. It is not a safety function and "
    "must not be relied on to prevent harm. Drive tests belong on closed courses with "
    "trained safety drivers; local regulations and licensed test practice come first."
)


@dataclass
class ReportData:
    """Everything the report shows.

    events: records in the ``kinematic_monitor.events/1`` form (start, end, detected_at,
    kind, level, position, peak, summary). thresholds: residual channel -> list of
    (label, value) lines to draw. final_statuses: dicts with name, level, message and
    values (the last check figures). lost_data: one plain sentence per loss.
    """

    source: str
    series: Series
    events: list[dict[str, Any]] = field(default_factory=list)
    thresholds: dict[str, list[tuple[str, float]]] = field(default_factory=dict)
    final_statuses: list[dict[str, Any]] = field(default_factory=list)
    channels: list[str] | None = None  # residual channels to plot; chosen when None
    lost_data: list[str] = field(default_factory=list)
    counters: dict[str, int] = field(default_factory=dict)
    duration: float | None = None  # [s]; from the series when None
    distance: float | None = None  # [m]; from the series when None
    title: str = "Kinematic monitor replay"


# ---------------------------------------------------------------------------------------
# figures derived from the data


def drive_duration(series: Series) -> float:
    """Header-stamp time covered by the series [s]."""
    t = series.get("time")
    if t is None or t.size < 2:
        return 0.0
    return float(np.nanmax(t) - np.nanmin(t))


def drive_distance(series: Series) -> float:
    """Distance driven [m]: trapezoidal integral of |speed| over time (NaN gaps skipped)."""
    t, v = series.get("time"), series.get("speed")
    if t is None or v is None or t.size < 2:
        return 0.0
    dt = np.diff(t)
    va = np.abs(v)
    seg = 0.5 * (va[1:] + va[:-1]) * dt
    return float(np.nansum(np.where(dt > 0, seg, 0.0)))


def grip_lower_bound(series: Series, events: Sequence[Mapping[str, Any]]) -> float | None:
    """Lower bound of road friction: max |a|/g held outside slip events [-], or None.

    A tyre that transmits a horizontal acceleration a without sliding has mu >= a/g
    (Coulomb friction; the friction-circle bound used in Gillespie 1992, ch. 6 - from memory
    for the chapter). Rows inside slip-event spans are excluded.
    """
    t, a = series.get("time"), series.get("accel")
    if t is None or a is None or t.size == 0:
        return None
    keep = np.isfinite(a)
    for ev in events:
        if ev.get("kind") in SLIP_KINDS:
            keep &= ~((t >= float(ev["start"])) & (t <= float(ev["end"])))
    if not keep.any():
        return None
    return float(np.max(np.abs(a[keep])) / STANDARD_GRAVITY)


def worst_event(events: Sequence[Mapping[str, Any]]) -> int | None:
    """Index of the worst event: highest level, then longest; None without events."""
    if not events:
        return None

    def key(i: int) -> tuple[int, float]:
        ev = events[i]
        lvl = 2 if ev.get("level") == "ERROR" else 1
        return (lvl, float(ev["end"]) - float(ev["start"]))

    return max(range(len(events)), key=key)


def decimate(t: np.ndarray, y: np.ndarray, n: int = MAX_PLOT_POINTS) -> tuple[np.ndarray,
                                                                               np.ndarray]:
    """Peak-keeping decimation to about ``n`` points: min and max of each bucket, in order."""
    if t.size <= n or n < 4:
        return t, y
    buckets = n // 2
    edges = np.linspace(0, t.size, buckets + 1).astype(int)
    idx: list[int] = []
    yy = np.where(np.isfinite(y), y, 0.0)
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        if b <= a:
            continue
        seg = yy[a:b]
        i, j = a + int(np.argmin(seg)), a + int(np.argmax(seg))
        idx.extend(sorted({i, j}))
    sel = np.asarray(idx)
    return t[sel], y[sel]


def _norm(name: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", name.lower()).strip("_")


def _channel_for_key(key: str, channels: Sequence[str]) -> str | None:
    """The channel a peak figure refers to ('yaw_rate_residual_rad_s' matches
    'yaw_rate.yaw_rate_residual [rad/s]'), or None."""
    k = _norm(key)
    for c in channels:
        if _norm(c) == k:
            return c
    for c in channels:
        if k and k in _norm(c):
            return c
    return None


def _split_unit(name: str) -> tuple[str, str]:
    """'drift.cusum [sigma]' -> ('drift.cusum', ' [sigma]')."""
    i = name.find(" [")
    return (name, "") if i < 0 else (name[:i], name[i:])


def sibling_thresholds(series: Series) -> dict[str, list[tuple[str, float]]]:
    """Threshold lines carried in the series itself: for a channel 'c.name [u]' the
    channels 'c.name_warn [u]' and 'c.name_error [u]' (last finite value of each)."""
    channels = series.residual_channels
    present = set(channels)
    out: dict[str, list[tuple[str, float]]] = {}
    for c in channels:
        base, unit = _split_unit(c)
        lines = []
        for suffix, label in (("_warn", "WARN"), ("_error", "ERROR")):
            sib = base + suffix + unit
            if sib in present:
                col = series[RESIDUAL_PREFIX + sib]
                fin = col[np.isfinite(col)]
                if fin.size:
                    lines.append((label, float(fin[-1])))
        if lines:
            out[c] = lines
    return out


def default_channels(series: Series, thresholds: Mapping[str, Sequence[tuple[str, float]]],
                     limit: int = MAX_CHANNEL_PLOTS) -> list[str]:
    """Channels worth plotting: those with thresholds, then residual-like figures; never a
    threshold or bookkeeping column; only channels holding data."""
    def has_data(c: str) -> bool:
        return bool(np.isfinite(series[RESIDUAL_PREFIX + c]).any())

    chans = [c for c in series.residual_channels if has_data(c)]
    bookkeeping = re.compile(r"(_warn|_error|_lower|_upper|timeout|\.age|_mean|\.z)\b")
    first = [c for c in chans if c in thresholds]
    rest = [c for c in chans if c not in thresholds and not bookkeeping.search(_split_unit(c)[0])
            and re.search(r"residual|slip_ratio|grip_in_use|nis", c)]
    return (first + rest)[:limit]


# ---------------------------------------------------------------------------------------
# plotting


class _Plotter:
    """Matplotlib (Agg) figures rendered to inline SVG strings."""

    def __init__(self) -> None:
        import matplotlib

        matplotlib.use("Agg", force=False)
        import matplotlib.pyplot as plt

        self.plt = plt
        self._n = 0
        self.rc: dict[str, Any] = {
            "svg.fonttype": "none",
            "font.size": 9,
            "axes.edgecolor": "#5c6670",
            "axes.labelcolor": "#27313b",
            "xtick.color": "#5c6670",
            "ytick.color": "#5c6670",
            "axes.spines.top": False,
            "axes.spines.right": False,
            "axes.grid": True,
            "grid.color": "#e2dfd6",
            "grid.linewidth": 0.6,
        }

    def to_svg(self, fig: Any) -> str:
        import matplotlib

        self._n += 1
        buf = io.StringIO()
        with matplotlib.rc_context({"svg.hashsalt": f"km{self._n}"}):
            fig.savefig(buf, format="svg", metadata={"Date": None})
        self.plt.close(fig)
        text = buf.getvalue()
        start = text.find("<svg")
        svg = text[start:] if start >= 0 else text
        svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)
        # unique ids per figure so several inline SVGs never share clip paths
        return re.sub(r'(id="|url\(#|href="#)([A-Za-z])', rf"\1f{self._n}_\2", svg)

    def trajectory(self, series: Series, events: Sequence[Mapping[str, Any]]) -> str | None:
        x, y = series.get("x"), series.get("y")
        if x is None or y is None or not np.isfinite(x).any():
            return None
        import matplotlib
        from matplotlib.collections import LineCollection

        lv = series.get(LEVEL_MAX)
        lv = np.zeros_like(x) if lv is None else lv
        ok = np.isfinite(x) & np.isfinite(y)
        xs, ys, ls = x[ok], y[ok], lv[ok]
        step = max(1, xs.size // MAX_PLOT_POINTS)
        if step > 1:  # keep the highest level of each stride
            m = (xs.size // step) * step
            lmax = np.maximum.reduceat(ls[:m], np.arange(0, m, step)) if m else ls[:0]
            xs, ys, ls = xs[:m:step], ys[:m:step], lmax
        with matplotlib.rc_context(self.rc):  # type: ignore[arg-type]
            fig, ax = self.plt.subplots(figsize=(7.0, 5.0))
            if xs.size >= 2:
                pts = np.column_stack([xs, ys])
                segs = np.stack([pts[:-1], pts[1:]], axis=1)
                colours = [LEVEL_COLOURS.get(int(v), "#8a8d91") for v in ls[1:]]
                ax.add_collection(LineCollection(list(segs), colors=colours, linewidths=2.0))
                ax.plot(xs[0], ys[0], marker="o", color="#27313b", ms=5)
                ax.annotate("start", (xs[0], ys[0]), textcoords="offset points",
                            xytext=(6, 6), color="#27313b")
            for i, ev in enumerate(events, start=1):
                pos = ev.get("position") or []
                if len(pos) >= 2 and all(math.isfinite(float(p)) for p in pos[:2]):
                    col = LEVEL_COLOURS[2 if ev.get("level") == "ERROR" else 1]
                    ax.plot(pos[0], pos[1], marker="o", ms=13, mfc="white", mec=col, mew=2)
                    ax.annotate(str(i), (pos[0], pos[1]), ha="center", va="center",
                                fontsize=7, color=col, fontweight="bold")
            ax.set_aspect("equal", adjustable="datalim")
            ax.autoscale_view()
            ax.set_xlabel("x [m]")
            ax.set_ylabel("y [m]")
            handles = [
                matplotlib.lines.Line2D([], [], color=LEVEL_COLOURS[k], lw=3, label=LEVEL_NAMES[k])
                for k in (0, 1, 2)
            ]
            ax.legend(handles=handles, loc="best", frameon=False, title="worst check level")
            fig.subplots_adjust(left=0.1, right=0.98, top=0.97, bottom=0.1)
            return self.to_svg(fig)

    def channels(self, series: Series, channels: Sequence[str],
                 thresholds: Mapping[str, Sequence[tuple[str, float]]],
                 events: Sequence[Mapping[str, Any]], t0: float,
                 window: tuple[float, float] | None = None,
                 height: float = 1.5, width: float = 9.0) -> str | None:
        t = series.get("time")
        if t is None or t.size == 0 or not channels:
            return None
        import matplotlib
        from matplotlib.ticker import MaxNLocator

        sel = np.ones(t.size, dtype=bool)
        if window is not None:
            sel = (t >= window[0]) & (t <= window[1])
            if not sel.any():
                return None
        with matplotlib.rc_context(self.rc):  # type: ignore[arg-type]
            fig, axes = self.plt.subplots(len(channels), 1, sharex=True,
                                          figsize=(width, height * len(channels) + 0.4),
                                          squeeze=False)
            for ax, name in zip(axes[:, 0], channels, strict=True):
                y = series[RESIDUAL_PREFIX + name][sel]
                tt, yy = decimate(t[sel] - t0, y)
                ax.plot(tt, yy, color="#2f5d8a", lw=0.9)
                # a threshold on a magnitude is drawn on both sides when the data has both
                # signs; one-sided statistics (CUSUM, NIS) keep one line
                both = bool(np.nanmin(y) < 0.0) if np.isfinite(y).any() else False
                for label, value in thresholds.get(name, ()):
                    for sign in (1.0, -1.0) if both else (1.0,):
                        ax.axhline(sign * value, color="#6b4e9b", lw=0.8, ls="--")
                    ax.annotate(label, (1.0, value), xycoords=("axes fraction", "data"),
                                ha="right", va="bottom", fontsize=7, color="#6b4e9b")
                for i, ev in enumerate(events, start=1):
                    col = LEVEL_COLOURS[2 if ev.get("level") == "ERROR" else 1]
                    a, b = float(ev["start"]) - t0, float(ev["end"]) - t0
                    if window is not None and (b < window[0] - t0 or a > window[1] - t0):
                        continue
                    ax.axvspan(a, max(b, a + 1e-3), color=col, alpha=0.18, lw=0)
                    if window is None:
                        ax.annotate(str(i), (a, 1.0), xycoords=("data", "axes fraction"),
                                    fontsize=7, color=col, va="top")
                ax.set_title(name, loc="left", fontsize=8, pad=2, color="#27313b")
                ax.yaxis.set_major_locator(MaxNLocator(nbins=3))
            axes[-1, 0].set_xlabel("time since start of drive [s]")
            if window is not None:
                axes[-1, 0].set_xlim(window[0] - t0, window[1] - t0)
            fig.subplots_adjust(left=0.09 if width > 7 else 0.14, right=0.98,
                                top=1.0 - 0.3 / fig.get_figheight(),
                                bottom=0.45 / fig.get_figheight(),
                                hspace=0.55 if height < 1.4 else 0.45)
            return self.to_svg(fig)


# ---------------------------------------------------------------------------------------
# HTML


CSS = """
:root { --ink:#1e2833; --muted:#5c6670; --paper:#faf8f3; --card:#ffffff; --line:#e2dfd6;
        --ok:#4f8a6b; --warn:#d9931c; --err:#b8322a; --accent:#2f5d8a; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 14px/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
header { padding:18px 28px 14px; background:var(--ink); color:#f4f1ea; }
header h1 { margin:0 0 4px; font-size:22px; font-weight:600; letter-spacing:.2px; }
header .src { color:#c9c3b6; font-family: "DejaVu Sans Mono", monospace; font-size:12px;
              word-break: break-all; }
main { padding: 8px 28px 28px; max-width: 1180px; }
h2 { font-size:17px; margin:26px 0 10px; border-bottom:2px solid var(--line);
     padding-bottom:4px; }
.verdict { margin:16px 0 8px; padding:12px 16px; border-radius:6px; font-size:16px;
           font-weight:600; border-left:8px solid var(--ok); background:#eef4ef; }
.verdict.l1 { border-color:var(--warn); background:#fbf3e4; }
.verdict.l2 { border-color:var(--err); background:#f8e9e7; }
.tiles { display:grid; grid-template-columns: repeat(auto-fill, minmax(170px, 1fr));
         gap:10px; }
.tile { background:var(--card); border:1px solid var(--line); border-radius:6px;
        padding:8px 12px; }
.tile .k { color:var(--muted); font-size:12px; text-transform:uppercase; letter-spacing:.5px; }
.tile .v { font-size:20px; font-weight:600; }
table { border-collapse:collapse; background:var(--card); }
th, td { border:1px solid var(--line); padding:4px 10px; text-align:left; font-size:13px; }
th { background:#f1eee6; }
td.n { text-align:right; font-variant-numeric: tabular-nums; }
.caution { margin:14px 0; padding:10px 14px; border:1px dashed #8c6d1f; border-radius:6px;
           background:#fffaf0; color:#4d3c10; font-size:13px; }
.fig { background:var(--card); border:1px solid var(--line); border-radius:6px;
       padding:8px; overflow-x:auto; }
.fig svg { width:100%; height:auto; }
.fig.traj svg { max-width:720px; display:block; margin:0 auto; }
.cards { display:grid; grid-template-columns: repeat(auto-fill, minmax(520px, 1fr)); gap:14px; }
.event-card { background:var(--card); border:1px solid var(--line); border-radius:6px;
              border-top:6px solid var(--warn); padding:10px 14px; }
.event-card.ERROR { border-top-color:var(--err); }
.event-card h3 { margin:0 0 6px; font-size:15px; }
.badge { display:inline-block; padding:1px 8px; border-radius:10px; color:#fff;
         font-size:11px; font-weight:700; margin-right:6px; vertical-align:middle; }
.badge.WARN { background:var(--warn); } .badge.ERROR { background:var(--err); }
.badge.OK { background:var(--ok); } .badge.STALE { background:#8a8d91; }
dl.kv { display:grid; grid-template-columns: max-content 1fr; gap:2px 12px; margin:6px 0; }
dl.kv dt { color:var(--muted); } dl.kv dd { margin:0; font-variant-numeric: tabular-nums; }
.muted { color:var(--muted); }
ul.lost li { margin:3px 0; }
footer { padding: 10px 28px 30px; color:var(--muted); font-size:12px; }
"""


def _e(value: object) -> str:
    return html.escape(str(value), quote=True)


def _num(value: float, unit: str = "", digits: int = 2) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    return f"{value:.{digits}f}{(' ' + unit) if unit else ''}"


def _fmt_duration(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "n/a"
    m, s = divmod(round(seconds, 1), 60.0)
    return f"{int(m)} min {s:04.1f} s" if m else f"{s:.1f} s"


def _peak_text(peak: Mapping[str, Any]) -> str:
    parts = []
    for k, v in peak.items():
        try:
            parts.append(f"{k} = {float(v):.4g}")
        except (TypeError, ValueError):
            parts.append(f"{k} = {v}")
    return ", ".join(parts) if parts else "n/a"


def _event_counts_table(events: Sequence[Mapping[str, Any]]) -> str:
    counts = Counter((ev.get("kind"), ev.get("level")) for ev in events)
    kinds = list(EVENT_KINDS) + sorted({str(k) for k, _ in counts} - set(EVENT_KINDS))
    rows = []
    for kind in kinds:
        w, e = counts.get((kind, "WARN"), 0), counts.get((kind, "ERROR"), 0)
        rows.append(
            f"<tr><td>{_e(KIND_LABELS.get(kind, kind))}</td><td class='n'>{w}</td>"
            f"<td class='n'>{e}</td></tr>"
        )
    return ("<table class='counts'><tr><th>kind</th><th>WARN</th><th>ERROR</th></tr>"
            + "".join(rows) + "</table>")


def _calibration_hints(data: ReportData) -> list[str]:
    hints = [str(ev.get("summary") or _peak_text(ev.get("peak") or {}))
             for ev in data.events if ev.get("kind") == "calibration_bias"]
    for st in data.final_statuses:
        if "calib" in str(st.get("name", "")).lower():
            vals = st.get("values") or {}
            extra = "; ".join(f"{k} = {v}" for k, v in vals.items())
            hints.append(f"{st.get('message', '')}" + (f" ({extra})" if extra else ""))
    return [h for h in hints if h.strip()]


def render_report(data: ReportData, plotter: _Plotter | None = None) -> str:
    """The whole report as one HTML string (self-contained, no script, no network)."""
    plotter = plotter or _Plotter()
    series, events = data.series, list(data.events)
    t = series.get("time")
    t0 = float(np.nanmin(t)) if t is not None and t.size else (
        min((float(ev["start"]) for ev in events), default=0.0))
    duration = data.duration if data.duration is not None else drive_duration(series)
    distance = data.distance if data.distance is not None else drive_distance(series)
    mu = grip_lower_bound(series, events)
    n_err = sum(1 for ev in events if ev.get("level") == "ERROR")
    n_warn = sum(1 for ev in events if ev.get("level") == "WARN")
    worst = worst_event(events)
    level = 2 if n_err else (1 if n_warn else 0)
    if level == 0:
        verdict = "No event: the vehicle moved as the kinematic model predicts."
    else:
        verdict = (f"{len(events)} event{'s' if len(events) != 1 else ''}: "
                   f"{n_err} ERROR, {n_warn} WARN.")
    if data.lost_data:
        verdict += " Some input data was lost (see below)."

    out: list[str] = []
    out.append("<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>")
    out.append("<meta name='viewport' content='width=device-width, initial-scale=1'>")
    out.append(f"<title>{_e(data.title)} - {_e(Path(data.source).name or data.source)}</title>")
    out.append(f"<style>{CSS}</style></head><body>")
    out.append(f"<header><h1>{_e(data.title)}</h1>"
               f"<div class='src'>{_e(data.source)}</div></header><main>")
    out.append(f"<div class='verdict l{level}' id='verdict'>{_e(verdict)}</div>")
    out.append(f"<div class='caution' id='caution'><strong>Caution.</strong> {_e(CAUTION)}</div>")

    # -- summary ------------------------------------------------------------------
    out.append("<section id='summary'><h2>Summary</h2><div class='tiles'>")
    tiles = [
        ("drive length", _fmt_duration(duration)),
        ("distance", _num(distance / 1000.0, "km", 2) if distance >= 1000 else
         _num(distance, "m", 0)),
        ("events", f"{len(events)}"),
        ("ERROR / WARN", f"{n_err} / {n_warn}"),
        ("grip seen (mu >=)", _num(mu, "", 2) if mu is not None else "n/a"),
    ]
    for k, v in tiles:
        out.append(f"<div class='tile'><div class='k'>{_e(k)}</div><div class='v'>{_e(v)}</div>"
                   "</div>")
    out.append("</div>")
    out.append("<h3>Events by kind and level</h3>" + _event_counts_table(events))
    if worst is not None:
        ev = events[worst]
        out.append(
            f"<p id='worst'><strong>Worst event:</strong> <a href='#event-{worst + 1}'>"
            f"#{worst + 1}</a> <span class='badge {_e(ev.get('level'))}'>{_e(ev.get('level'))}"
            f"</span>{_e(KIND_LABELS.get(str(ev.get('kind')), ev.get('kind')))} at "
            f"{_num(float(ev['start']) - t0, 's', 1)}, lasting "
            f"{_num(float(ev['end']) - float(ev['start']), 's', 2)}: "
            f"{_e(ev.get('summary', ''))}</p>")
    if mu is not None:
        out.append(
            f"<p class='muted'>Grip lower bound: the largest horizontal acceleration held "
            f"outside slip events was {_num(mu * STANDARD_GRAVITY, 'm/s²', 2)}, so the road "
            f"gave at least mu = {_num(mu, '', 2)} there (the peak may be higher).</p>")
    hints = _calibration_hints(data)
    out.append("<h3>Calibration hints</h3>")
    if hints:
        out.append("<ul>" + "".join(f"<li>{_e(h)}</li>" for h in hints) + "</ul>")
    else:
        out.append("<p class='muted'>No calibration bias was flagged.</p>")
    out.append("</section>")

    # -- lost data ---------------------------------------------------------------
    out.append("<section id='lost-data'><h2>Data lost or rejected</h2>")
    lost = list(data.lost_data)
    lost += [f"{k}: {v}" for k, v in sorted(data.counters.items()) if v]
    if lost:
        out.append("<ul class='lost'>" + "".join(f"<li>{_e(s)}</li>" for s in lost) + "</ul>")
    else:
        out.append("<p class='muted'>Nothing lost: every message was read and used.</p>")
    out.append("</section>")

    # -- trajectory --------------------------------------------------------------
    out.append("<section id='trajectory'><h2>Trajectory</h2>")
    svg = plotter.trajectory(series, events)
    out.append(f"<div class='fig traj'>{svg}</div>" if svg else
               "<p class='muted'>No position data.</p>")
    out.append("<p class='muted'>Coloured by the worst check level; numbered circles mark "
               "where each event started.</p></section>")

    # -- channels ----------------------------------------------------------------
    thresholds = {**sibling_thresholds(series), **data.thresholds}
    channels = (data.channels if data.channels is not None
                else default_channels(series, thresholds))
    out.append("<section id='channels'><h2>Residual channels</h2>")
    svg = plotter.channels(series, channels, thresholds, events, t0)
    out.append(f"<div class='fig'>{svg}</div>" if svg else
               "<p class='muted'>No residual data.</p>")
    out.append("<p class='muted'>Dashed lines: thresholds; shaded spans: events (amber WARN, "
               "red ERROR). Figures as the checks reported them at each time-series row.</p>"
               "</section>")

    # -- events ------------------------------------------------------------------
    out.append(f"<section id='events'><h2>Events ({len(events)})</h2>")
    if not events:
        out.append("<p class='muted'>No event was raised.</p>")
    else:
        out.append("<div class='cards'>")
        all_channels = series.residual_channels
        for i, ev in enumerate(events, start=1):
            out.append(_event_card(i, ev, t0, series, all_channels, channels, thresholds,
                                   plotter, with_plot=i <= MAX_EVENT_PLOTS))
        out.append("</div>")
        if len(events) > MAX_EVENT_PLOTS:
            out.append(f"<p class='muted'>Zoomed plots are shown for the first "
                       f"{MAX_EVENT_PLOTS} events only.</p>")
    out.append("</section>")

    # -- final statuses ----------------------------------------------------------
    if data.final_statuses:
        out.append("<section id='checks'><h2>Check figures at the end of the drive</h2><table>"
                   "<tr><th>check</th><th>level</th><th>message</th><th>figures</th></tr>")
        for st in data.final_statuses:
            lvl = LEVEL_NAMES.get(int(st.get("level", 0)), str(st.get("level")))
            vals = "; ".join(f"{k} = {v}" for k, v in (st.get("values") or {}).items())
            out.append(f"<tr><td>{_e(st.get('name', ''))}</td><td><span class='badge {lvl}'>"
                       f"{lvl}</span></td><td>{_e(st.get('message', ''))}</td>"
                       f"<td>{_e(vals)}</td></tr>")
        out.append("</table></section>")

    out.append(f"</main><footer><p>{_e(CAUTION)}</p><p>Times are header stamps; positions "
               "are in the localisation frame (REP 105); units SI, angles in radians "
               "(REP 103); levels as in REP 107.</p></footer></body></html>\n")
    return "".join(out)


def _event_card(i: int, ev: Mapping[str, Any], t0: float, series: Series,
                channels: Sequence[str], plotted: Sequence[str],
                thresholds: Mapping[str, Sequence[tuple[str, float]]], plotter: _Plotter,
                with_plot: bool) -> str:
    level = str(ev.get("level", "WARN"))
    kind = str(ev.get("kind", ""))
    start, end = float(ev["start"]), float(ev["end"])
    det = ev.get("detected_at")
    pos = ev.get("position") or []
    peak = ev.get("peak") or {}
    rows = [
        ("start", f"{_num(start - t0, 's', 2)} after start (stamp {start:.3f})"),
        ("end", f"{_num(end - t0, 's', 2)} (lasted {_num(end - start, 's', 2)})"),
    ]
    if det is not None:
        rows.append(("detected", f"{_num(float(det) - t0, 's', 2)} "
                                 f"({_num(float(det) - start, 's', 2)} after onset)"))
    if len(pos) >= 2:
        rows.append(("position", f"x = {_num(float(pos[0]), 'm', 1)}, "
                                 f"y = {_num(float(pos[1]), 'm', 1)}"))
    rows.append(("peak", _peak_text(peak)))
    parts = [f"<article class='event-card {_e(level)}' id='event-{i}'>",
             f"<h3>#{i} <span class='badge {_e(level)}'>{_e(level)}</span>"
             f"{_e(KIND_LABELS.get(kind, kind))}</h3>"]
    if ev.get("summary"):
        parts.append(f"<p>{_e(ev['summary'])}</p>")
    parts.append("<dl class='kv'>" + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>"
                                             for k, v in rows) + "</dl>")
    if with_plot:
        chosen = [c for c in (_channel_for_key(k, channels) for k in peak) if c]
        chosen = [c for c in dict.fromkeys(chosen)
                  if np.isfinite(series[RESIDUAL_PREFIX + c]).any()][:3] or list(plotted[:2])
        pad = max(2.0, 0.5 * (end - start))
        svg = plotter.channels(series, chosen, thresholds, [ev], t0,
                               window=(start - pad, end + pad), height=1.2, width=5.6)
        if svg:
            parts.append(f"<div class='fig'>{svg}</div>")
    parts.append("</article>")
    return "".join(parts)
