"""The HTML report: derived figures, self-containment, and a render in headless Chromium."""

from __future__ import annotations

import math
import os
import shutil
import subprocess
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from kinematic_monitor.apps.report import (
    CAUTION,
    ReportData,
    decimate,
    drive_distance,
    grip_lower_bound,
    render_report,
    sibling_thresholds,
    worst_event,
)
from kinematic_monitor.io.timeseries import Series

T0 = 1_800_000_000.0


def _series(n: int = 6001, dt: float = 0.05, seed: int = 7) -> Series:
    """A 5-minute made-up drive on a 60 m circle with two residual channels."""
    rng = np.random.default_rng(seed)
    t = T0 + dt * np.arange(n)
    ang = 0.15 * (t - T0)
    res = 0.02 * rng.standard_normal(n)
    res[(t > T0 + 100) & (t < T0 + 103)] -= 0.3  # an understeer episode
    cus = np.abs(np.cumsum(rng.standard_normal(n))) % 12.0
    level = np.where((t > T0 + 100) & (t < T0 + 103), 2.0, 0.0)
    cols = {
        "time": t, "x": 60 * np.cos(ang), "y": 60 * np.sin(ang), "yaw": ang,
        "speed": np.full(n, 9.0), "steering": np.full(n, 0.045),
        "accel": np.full(n, 1.35),
        "res:yaw_rate.yaw_rate_residual [rad/s]": res,
        "res:yaw_rate.cusum [sigma]": cus,
        "res:yaw_rate.cusum_warn [sigma]": np.full(n, 9.3),
        "res:yaw_rate.cusum_error [sigma]": np.full(n, 16.2),
        "level:yaw_rate": level, "level_max": level,
    }
    cols["accel"][(t > T0 + 100) & (t < T0 + 103)] = 6.0  # only inside the slip episode
    return Series(cols)


def _events() -> list[dict[str, Any]]:
    return [
        {"start": T0 + 100.0, "end": T0 + 103.0, "detected_at": T0 + 100.4,
         "kind": "lateral_slip", "level": "ERROR", "position": [12.0, -3.0],
         "peak": {"yaw_rate_residual_rad_s": -0.31},
         "summary": "understeer <b>on</b> low grip & <script>alert(1)</script>"},
        {"start": T0 + 200.0, "end": T0 + 230.0, "detected_at": T0 + 210.0,
         "kind": "calibration_bias", "level": "WARN", "position": [-40.0, 20.0],
         "peak": {"steering_offset_rad": 0.012}, "summary": "steering offset about 0.012 rad"},
    ]


def _data(**kw: Any) -> ReportData:
    base: dict[str, Any] = dict(source="/data/proving_ground/drive_07", series=_series(),
                                events=_events(),
                                lost_data=["bag damaged (cut); read up to stamp 12.3 s"])
    base.update(kw)
    return ReportData(**base)


# ---------------------------------------------------------------------------------------
# derived figures


def test_distance_is_trapezoidal_integral_of_speed() -> None:
    from scipy.integrate import trapezoid  # reference library

    s = _series()
    rng = np.random.default_rng(1)
    s.columns["speed"] = 5.0 + rng.random(len(s))
    assert drive_distance(s) == pytest.approx(trapezoid(s["speed"], s["time"]), rel=1e-12)


def test_grip_lower_bound_excludes_slip_episodes() -> None:
    # Coulomb friction: a tyre holding horizontal acceleration a without sliding has
    # mu >= a/g; g = 9.80665 m/s² (standard gravity, CGPM 1901)
    s = _series()
    assert grip_lower_bound(s, _events()) == pytest.approx(1.35 / 9.80665, rel=1e-12)
    # without the slip event, the 6 m/s² inside it counts
    assert grip_lower_bound(s, _events()[1:]) == pytest.approx(6.0 / 9.80665, rel=1e-12)
    s.columns["accel"] = np.full(len(s), math.nan)
    assert grip_lower_bound(s, []) is None


def test_decimation_keeps_extremes() -> None:
    # checked against numpy's min/max of the full series (peak-keeping decimation:
    # common practice, no source)
    rng = np.random.default_rng(3)
    t = np.arange(100_000) * 0.005
    y = rng.standard_normal(t.size)
    y[54_321] = 40.0
    y[777] = -33.0
    td, yd = decimate(t, y, 1500)
    assert td.size <= 1500
    assert yd.max() == y.max() and yd.min() == y.min()
    assert np.all(np.diff(td) > 0)  # still a time series


def test_thresholds_come_from_sibling_channels() -> None:
    th = sibling_thresholds(_series())
    assert th == {"yaw_rate.cusum [sigma]": [("WARN", 9.3), ("ERROR", 16.2)]}


def test_worst_event_prefers_error_then_length() -> None:
    assert worst_event(_events()) == 0
    assert worst_event([]) is None


# ---------------------------------------------------------------------------------------
# the HTML itself


class _Collector(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))


def test_report_is_self_contained_and_complete() -> None:
    html = render_report(_data())
    p = _Collector()
    p.feed(html)
    tags = [t for t, _ in p.tags]
    # no script and no external resource: opens offline (HTML Living Standard: src/href
    # on img/link/script/iframe fetch resources)
    assert "script" not in tags and "link" not in tags and "iframe" not in tags
    for tag, attrs in p.tags:
        for key in ("src", "href", "xlink:href"):
            value = attrs.get(key)
            if value is not None:  # only in-page fragment links
                assert value.startswith("#"), f"<{tag} {key}={value!r}> loads a resource"
    # namespace names (xmlns) identify, they are never fetched (Namespaces in XML 1.0)
    assert "http://" not in html.replace('="http://www.w3.org/', "")
    assert "https://" not in html
    # the untrusted summary is escaped, never markup
    assert "<script>alert(1)</script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    # one card per event, the caution, the lost data, summary figures
    ids = [a.get("id") for _, a in p.tags]
    assert ids.count("event-1") == 1 and ids.count("event-2") == 1
    assert sum(1 for t, a in p.tags if t == "article"
               and "event-card" in str(a.get("class"))) == 2
    assert CAUTION in html
    assert "bag damaged (cut)" in html
    assert "5 min 00.0 s" in html  # 6000 intervals of 0.05 s
    assert "steering offset about 0.012 rad" in html  # calibration hint


def test_inline_svgs_are_well_formed_with_unique_ids() -> None:
    html = render_report(_data())
    svgs = []
    pos = 0
    while (start := html.find("<svg", pos)) >= 0:
        end = html.index("</svg>", start) + len("</svg>")
        svgs.append(html[start:end])
        pos = end
    # trajectory + channels + one zoom per event
    assert len(svgs) == 4
    all_ids: list[str] = []
    for svg in svgs:
        root = ET.fromstring(svg)  # SVG 1.1 is XML: must parse
        assert root.tag.endswith("svg")
        all_ids += [el.attrib["id"] for el in root.iter() if "id" in el.attrib]
    assert len(all_ids) == len(set(all_ids)), "ids repeat across inline SVGs"


def test_report_without_data_still_renders() -> None:
    html = render_report(ReportData(source="x", series=Series({})))
    assert "No event was raised" in html and "No position data" in html


# ---------------------------------------------------------------------------------------
# rendered by a real browser


def _chromium() -> str:
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe:
        return exe
    if shutil.which("apt-get") is None or os.geteuid() != 0:
        pytest.skip("chromium is missing and cannot be installed here (no apt-get or not "
                    "root): install the Debian package 'chromium' to run this test")
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    for cmd in (["apt-get", "update", "-qq"], ["apt-get", "install", "-y", "-qq", "chromium"]):
        r = subprocess.run(cmd, capture_output=True, text=True, timeout=900, env=env)
        if r.returncode != 0:
            pytest.skip(f"chromium could not be installed ({' '.join(cmd)}: "
                        f"{r.stderr.strip()[-300:]})")
    exe = shutil.which("chromium")
    if not exe:
        pytest.skip("chromium is still missing after apt-get install")
    return exe


CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]


@pytest.mark.slow
def test_report_renders_in_headless_chromium(tmp_path: Path) -> None:
    exe = _chromium()
    page = tmp_path / "report.html"
    page.write_text(render_report(_data()), encoding="utf-8")
    common = [exe, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}"]
    dom = subprocess.run([*common, "--dump-dom", page.as_uri()], capture_output=True,
                         text=True, timeout=120)
    assert dom.returncode == 0, dom.stderr[-2000:]
    # the browser built the document: event cards, summary and caution are in the DOM
    assert dom.stdout.count('class="event-card') == 2
    assert 'id="summary"' in dom.stdout and 'id="caution"' in dom.stdout
    assert "<svg" in dom.stdout
    for bad in ("Failed to load resource", "Uncaught", "net::ERR_"):
        assert bad not in dom.stderr, dom.stderr[-2000:]
    shot = tmp_path / "shot.png"
    r = subprocess.run([*common, "--window-size=1280,3000", f"--screenshot={shot}",
                        page.as_uri()], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-2000:]
    png = shot.read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    assert len(png) > 50_000  # a blank page compresses to a few kB
