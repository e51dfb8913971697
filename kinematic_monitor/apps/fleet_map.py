"""Offline HTML page drawing low-grip spots in the map frame (inline SVG, no tile server).

Positions are metres in the localisation frame (REP 105 ``map``), x to the right and y up
(REP 103 counter-clockwise yaw looks counter-clockwise on the page). Each cluster is a disc
whose area grows with its event count, coloured by kind, ringed darker for ERROR; hovering
shows its figures. Drive tracks of the swept bags are drawn faintly for orientation.
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping, Sequence

from kinematic_monitor.apps.fleet import Cluster

KIND_COLOURS = {
    "lateral_slip": "#1f77b4",
    "longitudinal_slip": "#d62728",
    "localization_fault": "#9467bd",
    "calibration_bias": "#8c564b",
    "input_stale": "#7f7f7f",
}
WIDTH, HEIGHT, MARGIN = 900, 640, 50  # [px]


def _nice_step(span: float) -> float:
    """A 1-2-5 grid step giving roughly 5-10 lines over ``span``."""
    if not (span > 0.0 and math.isfinite(span)):
        return 1.0
    raw = span / 8.0
    mag = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        if raw <= m * mag:
            return m * mag
    return 10.0 * mag


def _e(value: object) -> str:
    return html.escape(str(value), quote=True)


def render_map_html(clusters: Sequence[Cluster],
                    tracks: Mapping[str, Sequence[Sequence[float]]] | None = None,
                    reports: Mapping[str, str] | None = None,
                    title: str = "Low-grip spots (map frame)") -> str:
    """Self-contained HTML page with an SVG map of ``clusters`` and optional ``tracks``.

    ``tracks``: bag_id -> [[x, y], ...] [m]; ``reports``: bag_id -> relative report link.
    Clusters without a map-frame position are listed in the table only.
    """
    reports = reports or {}
    tracks = tracks or {}
    placed = [c for c in clusters if c.x is not None and c.y is not None]
    xs = [c.x for c in placed if c.x is not None]
    ys = [c.y for c in placed if c.y is not None]
    for pts in tracks.values():
        for p in pts:
            if len(p) >= 2 and math.isfinite(p[0]) and math.isfinite(p[1]):
                xs.append(float(p[0]))
                ys.append(float(p[1]))
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{_e(title)}</title>",
             "<style>body{font-family:sans-serif;margin:1.5em}table{border-collapse:collapse}"
             "td,th{border:1px solid #bbb;padding:2px 6px;font-size:0.9em}"
             "svg{border:1px solid #999;background:#fcfcfc}</style></head><body>",
             f"<h1>{_e(title)}</h1>"]
    if not xs:
        parts.append("<p>No event has a map-frame position.</p>")
    else:
        parts.append(_svg(placed, tracks, xs, ys))
        parts.append("<p>Legend: " + " ".join(
            f"<span style='color:{col}'>&#9679; {_e(k)}</span>"
            for k, col in KIND_COLOURS.items()) +
            ". Disc area grows with the number of events; dark ring: ERROR.</p>")
    parts.append("<h2>Spots</h2><table><tr><th>#</th><th>kind</th><th>level</th>"
                 "<th>events</th><th>bags</th><th>x [m]</th><th>y [m]</th><th>lat</th>"
                 "<th>lon</th><th>worst in</th></tr>")
    for i, c in enumerate(clusters, 1):
        bag_id = str(c.worst.get("bag_id"))
        link = reports.get(bag_id)
        worst = (f"<a href='{_e(link)}'>{_e(bag_id)}</a>" if link else _e(bag_id))
        parts.append(
            f"<tr><td>{i}</td><td>{_e(c.kind)}</td><td>{_e(c.level)}</td><td>{c.count}</td>"
            f"<td>{len(c.bags)}</td><td>{_num(c.x, 1)}</td><td>{_num(c.y, 1)}</td>"
            f"<td>{_num(c.lat, 6)}</td><td>{_num(c.lon, 6)}</td><td>{worst}</td></tr>")
    parts.append("</table></body></html>\n")
    return "".join(parts)


def _num(value: float | None, decimals: int) -> str:
    if value is None or not math.isfinite(value):
        return ""
    return f"{value:.{decimals}f}"


def _svg(placed: Sequence[Cluster], tracks: Mapping[str, Sequence[Sequence[float]]],
         xs: list[float], ys: list[float]) -> str:
    x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    span = max(x1 - x0, y1 - y0, 10.0)
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    scale = min(WIDTH - 2 * MARGIN, HEIGHT - 2 * MARGIN) / (1.1 * span)  # [px/m], equal axes

    def px(x: float, y: float) -> tuple[float, float]:
        return (WIDTH / 2 + (x - cx) * scale, HEIGHT / 2 - (y - cy) * scale)

    out = [f"<svg xmlns='http://www.w3.org/2000/svg' width='{WIDTH}' height='{HEIGHT}' "
           f"viewBox='0 0 {WIDTH} {HEIGHT}'>"]
    step = _nice_step(span)
    gx0 = math.floor((cx - WIDTH / 2 / scale) / step) * step
    gy0 = math.floor((cy - HEIGHT / 2 / scale) / step) * step
    g = gx0
    while px(g, 0)[0] <= WIDTH:
        X = px(g, 0)[0]
        out.append(f"<line x1='{X:.1f}' y1='0' x2='{X:.1f}' y2='{HEIGHT}' stroke='#e4e4e4'/>"
                   f"<text x='{X + 2:.1f}' y='{HEIGHT - 4}' font-size='10' fill='#888'>"
                   f"{g:g}</text>")
        g += step
    g = gy0
    while px(0, g)[1] >= 0:
        Y = px(0, g)[1]
        out.append(f"<line x1='0' y1='{Y:.1f}' x2='{WIDTH}' y2='{Y:.1f}' stroke='#e4e4e4'/>"
                   f"<text x='2' y='{Y - 2:.1f}' font-size='10' fill='#888'>{g:g}</text>")
        g += step
    for bag_id, pts in tracks.items():
        coords = " ".join("{:.1f},{:.1f}".format(*px(float(p[0]), float(p[1])))
                          for p in pts if len(p) >= 2 and math.isfinite(p[0])
                          and math.isfinite(p[1]))
        if coords:
            out.append(f"<polyline points='{coords}' fill='none' stroke='#c8c8c8' "
                       f"stroke-width='1'><title>{_e(bag_id)}</title></polyline>")
    for c in sorted(placed, key=lambda c: -c.count):  # big discs below small ones
        assert c.x is not None and c.y is not None
        X, Y = px(c.x, c.y)
        r = 4.0 + 3.0 * math.sqrt(c.count)
        col = KIND_COLOURS.get(c.kind, "#333")
        ring = "#000" if c.level == "ERROR" else col
        peak = ", ".join(f"{k}={v:.3g}" for k, v in c.peak.items())
        tip = (f"{c.kind} {c.level}: {c.count} event(s) in {len(c.bags)} bag(s) at "
               f"x={c.x:.1f} m, y={c.y:.1f} m; {peak}")
        out.append(f"<circle cx='{X:.1f}' cy='{Y:.1f}' r='{r:.1f}' fill='{col}' "
                   f"fill-opacity='0.6' stroke='{ring}' stroke-width='1.5'>"
                   f"<title>{_e(tip)}</title></circle>")
    out.append(f"<text x='{WIDTH - MARGIN}' y='14' font-size='11' text-anchor='end'>"
               f"grid {step:g} m, x right, y up</text></svg>")
    return "".join(out)
