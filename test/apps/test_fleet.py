"""Tests of the fleet-sweep core: discovery, content keys, rates, clustering, GeoJSON, pages."""

from __future__ import annotations

import json
import math
import os
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import geojson
import numpy as np
import pytest

from kinematic_monitor.apps import fleet
from kinematic_monitor.apps.fleet import BagRecord
from kinematic_monitor.apps.fleet_map import render_map_html

# 1 degree of latitude on a sphere of the IUGG mean radius R1 = 6371008.8 m (Moritz, Geodetic
# Reference System 1980): R1 * pi / 180 [C]
M_PER_DEG = 6371008.8 * math.pi / 180.0


def make_bag(path: Path, storage: str = "sqlite3", size: int = 100, meta: str = "m: 1\n") -> Path:
    path.mkdir(parents=True)
    (path / "metadata.yaml").write_text(meta)
    suffix = ".db3" if storage == "sqlite3" else ".mcap"
    (path / f"{path.name}_0{suffix}").write_bytes(bytes(range(256)) * (size // 256 + 1))
    return path


def ev(kind: str = "lateral_slip", level: str = "ERROR", start: float = 100.0,
       end: float = 101.0, pos: tuple[float | None, float | None] = (0.0, 0.0),
       peak: dict[str, float] | None = None) -> dict[str, object]:
    return {"start": start, "end": end, "detected_at": start + 0.2, "kind": kind,
            "level": level, "position": list(pos), "peak": peak or {"speed_m_s": 10.0},
            "summary": f"{kind} test"}


def rec(bag_id: str, events: list[dict[str, object]],
        fixes: list[list[float] | None] | None = None, distance: float = 1000.0,
        duration: float = 600.0, status: str = "ok") -> BagRecord:
    return BagRecord(bag_id=bag_id, bag=f"/fleet/{bag_id}", status=status, events=events,
                     fixes=fixes if fixes is not None else [None] * len(events),
                     distance=distance, duration=duration)


# ---- discovery ------------------------------------------------------------------------------


def test_find_bags_walks_folders_and_stops_at_bags(tmp_path: Path) -> None:
    a = make_bag(tmp_path / "day1" / "a")
    b = make_bag(tmp_path / "day1" / "nested" / "b", storage="mcap")
    # a folder with a storage file but no metadata.yaml is a bag too (bag.py reads it)
    c = tmp_path / "day2" / "c"
    c.mkdir(parents=True)
    (c / "c_0.mcap").write_bytes(b"x")
    make_bag(a / "inner")  # inside a bag: not searched
    make_bag(tmp_path / ".hidden" / "h")  # hidden folders are skipped
    (tmp_path / "day2" / "notes").mkdir()
    found = fleet.find_bags([tmp_path, tmp_path / "day1", a])  # duplicates collapse
    assert found == sorted([a, b, c])
    assert fleet.find_bags([a]) == [a]


def test_find_bags_names_a_bad_path(tmp_path: Path) -> None:
    with pytest.raises(fleet.FleetError, match="nowhere"):
        fleet.find_bags([tmp_path / "nowhere"])
    f = tmp_path / "file.txt"
    f.write_text("x")
    with pytest.raises(fleet.FleetError, match="file.txt"):
        fleet.find_bags([f])
    assert fleet.find_bags([tmp_path]) == []


def test_output_names_are_unique_and_plain(tmp_path: Path) -> None:
    a = fleet.bag_output_name(tmp_path / "x" / "run 1")
    b = fleet.bag_output_name(tmp_path / "y" / "run 1")
    assert a != b
    assert re.fullmatch(r"run_1-[0-9a-f]{8}", a)
    assert "/" not in fleet.bag_output_name("/..")


# ---- content keys ---------------------------------------------------------------------------


def test_fingerprint_follows_content_not_timestamps(tmp_path: Path) -> None:
    bag = make_bag(tmp_path / "b", size=3 * fleet.HASH_EDGE)
    data = next(bag.glob("*.db3"))
    fp0 = fleet.bag_fingerprint(bag)
    os.utime(data, (1, 1))  # modification time is not content
    assert fleet.bag_fingerprint(bag) == fp0
    raw = bytearray(data.read_bytes())

    def changed(pos: int) -> str:
        mod = bytearray(raw)
        mod[pos] ^= 0xFF
        data.write_bytes(bytes(mod))
        try:
            return fleet.bag_fingerprint(bag)
        finally:
            data.write_bytes(bytes(raw))

    assert changed(10) != fp0  # head
    assert changed(len(raw) - 10) != fp0  # tail
    # by design only the first and last MiB are hashed: a change in the middle with the
    # same size is not seen (the documented cost of fingerprinting large bags quickly)
    assert changed(len(raw) // 2) == fp0
    data.write_bytes(bytes(raw) + b"\0")  # size
    assert fleet.bag_fingerprint(bag) != fp0
    data.write_bytes(bytes(raw))
    (bag / "metadata.yaml").write_text("m: 2\n")
    assert fleet.bag_fingerprint(bag) != fp0


def test_key_covers_params_and_version() -> None:
    p1 = fleet.params_digest({"vehicle.wheelbase": 2.7, "checks.x": [1, 2]})
    assert p1 == fleet.params_digest({"checks.x": [1, 2], "vehicle.wheelbase": 2.7})
    p2 = fleet.params_digest({"vehicle.wheelbase": 2.71, "checks.x": [1, 2]})
    assert p1 != p2
    k = fleet.sweep_key("f" * 64, p1, "0.1.0")
    assert k != fleet.sweep_key("f" * 64, p2, "0.1.0")
    assert k != fleet.sweep_key("f" * 64, p1, "0.1.1")
    assert k != fleet.sweep_key("e" * 64, p1, "0.1.0")


def test_marker_round_trip_and_atomic_write(tmp_path: Path) -> None:
    r = rec("a", [ev()], fixes=[[46.2, 7.4]])
    r.key, r.start_time, r.track = "k", 5.0, [[0.0, 1.0]]
    path = tmp_path / fleet.MARKER
    fleet.write_json_atomic(path, r.to_marker("0.1.0"))
    assert [p.name for p in tmp_path.iterdir()] == [fleet.MARKER]  # no temp file left
    back = BagRecord.from_marker(fleet.read_marker(path) or {})
    assert (back.key, back.events, back.fixes, back.track, back.distance, back.start_time) == (
        "k", r.events, r.fixes, r.track, 1000.0, 5.0)
    path.write_text("{not json")
    assert fleet.read_marker(path) is None
    path.write_text('{"schema": "other"}')
    assert fleet.read_marker(path) is None
    with pytest.raises(ValueError):  # JSON has no NaN: refused, the old file stays
        fleet.write_json_atomic(path, {"x": math.nan})
    assert path.read_text() == '{"schema": "other"}'
    assert [p.name for p in tmp_path.iterdir()] == [fleet.MARKER]


# ---- GNSS placement -------------------------------------------------------------------------


def test_interpolate_fix() -> None:
    fixes = [(10.0, 46.0, 7.0), (11.0, 46.001, 7.002), (20.0, 46.1, 7.1)]
    # linear interpolation halfway between the first two fixes
    assert fleet.interpolate_fix(fixes, 10.5) == pytest.approx([46.0005, 7.001])
    assert fleet.interpolate_fix(fixes, 10.0) == pytest.approx([46.0, 7.0])
    assert fleet.interpolate_fix(fixes, 15.0) is None  # 9 s gap: no trustworthy position
    assert fleet.interpolate_fix(fixes, 20.5) == pytest.approx([46.1, 7.1])  # nearest
    assert fleet.interpolate_fix(fixes, 22.0) is None
    assert fleet.interpolate_fix([], 10.0) is None
    assert fleet.interpolate_fix(fixes, math.nan) is None


# ---- summary tables -------------------------------------------------------------------------


def test_rates_per_100km_and_per_hour() -> None:
    # rate = count / exposure, exposure in units of 100 km or 1 h (definition, no source)
    a = rec("a", [ev(), ev(start=200.0), ev("longitudinal_slip")], distance=50_000.0,
            duration=1800.0)
    b = rec("b", [ev("input_stale", "WARN")], distance=0.0, duration=7200.0)
    bad = rec("bad", [], status="failed")
    bad.error = "bag unreadable"
    rows = fleet.summary_rows([a, b, bad])
    ra, rb, rbad, total = rows
    assert ra["lateral_slip"] == 2
    assert ra["lateral_slip_per_100km"] == pytest.approx(2 / 0.5)
    assert ra["lateral_slip_per_hour"] == pytest.approx(2 / 0.5)
    assert ra["longitudinal_slip_per_hour"] == pytest.approx(2.0)
    assert ra["calibration_bias_per_100km"] == 0.0
    assert rb["input_stale_per_100km"] is None  # standing still: no distance
    assert rb["input_stale_per_hour"] == pytest.approx(0.5)
    assert rbad["lateral_slip"] is None and rbad["error"] == "bag unreadable"
    # totals pool counts and exposure over the successful bags (not a mean of bag rates)
    assert total["bag_id"] == "TOTAL"
    assert total["events"] == 4
    assert total["distance_km"] == pytest.approx(50.0)
    assert total["duration_h"] == pytest.approx(2.5)
    assert total["lateral_slip_per_hour"] == pytest.approx(2 / 2.5)
    assert total["input_stale_per_100km"] == pytest.approx(1 / 0.5)
    text = fleet.summary_csv(rows)
    lines = text.splitlines()
    assert lines[0].startswith("bag_id,bag,status,error,duration_h,distance_km,events")
    assert len(lines) == 5
    assert ",,," in lines[3]  # failed bag: empty cells, never 'nan'
    assert "nan" not in text.lower()


def test_worst_events_order_and_links() -> None:
    a = rec("a", [ev(level="WARN", start=1.0, end=60.0), ev(level="ERROR", start=5.0, end=6.0)])
    b = rec("b", [ev(level="ERROR", start=7.0, end=10.0)])
    worst = fleet.worst_events([a, b], n=2)
    assert [(w["bag_id"], w["start"]) for w in worst] == [("b", 7.0), ("a", 5.0)]
    rows = fleet.summary_rows([a, b])
    page = fleet.summary_html(rows, worst, {"a": "bags/a/report.html"})
    assert page.count('href="bags/a/report.html"') >= 2  # table row and worst-event row
    assert "href=\"bags/b" not in page  # no report: no dead link
    assert "1970-01-01 00:00:07.0" in page  # start as UTC (POSIX epoch, header-stamp clock)


def test_calibration_drift_stats() -> None:
    base = {"vehicle.wheelbase": 2.70, "vehicle.steering_offset": 0.0}
    runs = [("b2", 200.0, {"vehicle.steering_offset": 0.012, "vehicle.wheelbase": 2.71}),
            ("b1", 100.0, {"vehicle.steering_offset": 0.010}),
            ("b3", math.nan, {"vehicle.steering_offset": 0.017})]
    d = fleet.calibration_drift(base, runs)
    assert d is not None
    assert [r["bag_id"] for r in d["rows"]] == ["b1", "b2", "b3"]  # time order, unknown last
    s = d["stats"]["vehicle.steering_offset"]
    xs = np.array([0.012, 0.010, 0.017])
    # against numpy's mean and sample standard deviation (ddof=1)
    assert s["mean"] == pytest.approx(float(np.mean(xs)))
    assert s["std"] == pytest.approx(float(np.std(xs, ddof=1)))
    assert s["spread"] == pytest.approx(0.007)
    assert d["stats"]["vehicle.wheelbase"]["std"] is None  # one value: no spread estimate
    assert d["rows"][1]["deltas"]["vehicle.wheelbase"] == pytest.approx(0.01)
    assert fleet.calibration_drift(base, []) is None
    assert fleet.drift_csv(d).splitlines()[0] == (
        "bag_id,start_time,vehicle.steering_offset,vehicle.wheelbase,"
        "vehicle.steering_offset_delta,vehicle.wheelbase_delta")


# ---- clustering -----------------------------------------------------------------------------


def test_cluster_map_frame_across_bags() -> None:
    a = rec("a", [ev(pos=(0.0, 0.0), peak={"yaw_rate_residual_rad_s": -0.3}),
                  ev("longitudinal_slip", pos=(1.0, 0.0)),
                  ev(pos=(50.0, 0.0)), ev("localization_fault", pos=(0.0, 0.0)),
                  ev(pos=(None, None))])
    b = rec("b", [ev(level="WARN", pos=(3.0, 4.0), peak={"yaw_rate_residual_rad_s": 0.5})])
    clusters, unplaced = fleet.cluster_events([a, b], radius=10.0)
    assert unplaced == 1
    by = {(c.kind, round(c.x or 0.0)): c for c in clusters}
    assert len(clusters) == 3  # localization_fault is not a grip event
    spot = by[("lateral_slip", 2)]
    assert spot.count == 2 and spot.bags == ["a", "b"]
    assert spot.level == "ERROR"  # the worst member's level
    assert spot.peak == {"yaw_rate_residual_rad_s": 0.5}  # largest magnitude, sign kept
    assert (spot.x, spot.y) == pytest.approx((1.5, 2.0))  # mean of members
    assert by[("lateral_slip", 50)].count == 1
    assert by[("longitudinal_slip", 1)].count == 1


def test_cluster_does_not_chain() -> None:
    # three events 8 m apart in a row: a radius of 10 m must not link the outer two (16 m)
    r = rec("a", [ev(pos=(0.0, 0.0), end=105.0), ev(pos=(8.0, 0.0)), ev(pos=(16.0, 0.0))])
    clusters, _ = fleet.cluster_events([r], radius=10.0)
    assert sorted(c.count for c in clusters) == [1, 2]
    with pytest.raises(ValueError, match="radius"):
        fleet.cluster_events([r], radius=math.nan)


def test_cluster_in_wgs84_uses_metres() -> None:
    lat0, lon0 = 46.2180, 7.4425  # invented test-track origin
    d_lat = 7.0 / M_PER_DEG  # 7 m north
    a = rec("a", [ev(pos=(0.0, 0.0))], fixes=[[lat0, lon0]])
    # map positions differ wildly (another map), WGS84 decides: 7 m apart
    b = rec("b", [ev(pos=(900.0, 900.0))], fixes=[[lat0 + d_lat, lon0]])
    clusters, _ = fleet.cluster_events([a, b], radius=10.0)
    assert [c.count for c in clusters] == [2]
    assert clusters[0].lat == pytest.approx(lat0 + d_lat / 2)
    clusters, _ = fleet.cluster_events([a, b], radius=5.0)
    assert len(clusters) == 2
    # east-west: 1 degree of longitude is cos(lat) shorter (spherical Earth, [C])
    d_lon = 7.0 / (M_PER_DEG * math.cos(math.radians(lat0)))
    c = rec("c", [ev(pos=(0.0, 0.0))], fixes=[[lat0, lon0 + d_lon]])
    assert len(fleet.cluster_events([a, c], radius=7.1)[0]) == 1
    assert len(fleet.cluster_events([a, c], radius=6.9)[0]) == 2


# ---- GeoJSON --------------------------------------------------------------------------------


def _doc() -> dict[str, object]:
    a = rec("a", [ev(pos=(1.0, 2.0)), ev("longitudinal_slip", pos=(40.0, 0.0))],
            fixes=[[46.2181, 7.4426], None])
    clusters, _ = fleet.cluster_events([a])
    return fleet.clusters_geojson(clusters, {"a": "bags/a/report.html"})


def test_geojson_valid_per_rfc7946() -> None:
    doc = _doc()
    text = json.dumps(doc, allow_nan=False)
    # the geojson package (RFC 7946 structures) as the outside check
    obj = geojson.loads(text)
    assert obj.is_valid, obj.errors()
    assert fleet.geojson_problems(doc) == []
    feats = doc["features"]
    assert isinstance(feats, list)
    located = [f for f in feats if f["geometry"]]
    unlocated = [f for f in feats if not f["geometry"]]
    # RFC 7946 section 3.1.1: longitude first, then latitude
    assert located[0]["geometry"]["coordinates"] == pytest.approx([7.4426, 46.2181])
    assert unlocated[0]["geometry"] is None  # section 3.2: unlocated feature
    assert unlocated[0]["properties"]["map_position"] == [40.0, 0.0]
    for f in feats:
        p = f["properties"]
        assert {"kind", "level", "peak", "time", "time_utc", "bag", "count"} <= set(p)
    assert located[0]["properties"]["time_utc"] == "1970-01-01T00:01:40.000+00:00"


def test_geojson_checker_catches_bad_documents() -> None:
    doc = _doc()
    feats = doc["features"]
    assert isinstance(feats, list)
    swapped = json.loads(json.dumps(doc))
    swapped["features"][0]["geometry"]["coordinates"] = [7.4, 146.2]
    assert any("range" in p for p in fleet.geojson_problems(swapped))
    short = json.loads(json.dumps(doc))
    short["features"][0]["geometry"]["coordinates"] = [7.4]
    assert any("position" in p for p in fleet.geojson_problems(short))
    # the geojson package checks the structure (not the ranges) and agrees here
    assert not geojson.loads(json.dumps(short)).is_valid
    crs = {**doc, "crs": {"type": "name"}}
    assert any("crs" in p for p in fleet.geojson_problems(crs))
    noprops = json.loads(json.dumps(doc))
    del noprops["features"][1]["properties"]
    assert any("properties" in p for p in fleet.geojson_problems(noprops))
    assert fleet.geojson_problems({"type": "Feature"}) != []


# ---- map page -------------------------------------------------------------------------------


def test_map_page_draws_spots_in_map_frame() -> None:
    a = rec("a", [ev(pos=(0.0, 0.0)), ev(pos=(0.0, 100.0), level="WARN")])
    b = rec("b", [ev(pos=(1.0, 1.0))])
    clusters, _ = fleet.cluster_events([a, b])
    page = render_map_html(clusters, {"a": [[0.0, 0.0], [0.0, 100.0]]}, {"a": "bags/a/r.html"})
    assert "http" not in page.replace("http://www.w3.org/2000/svg", "")  # offline
    svg = ET.fromstring(page[page.index("<svg"):page.index("</svg>") + 6])
    ns = "{http://www.w3.org/2000/svg}"
    circles = svg.findall(f"{ns}circle")
    assert len(circles) == 2
    cy = {c.findtext(f"{ns}title", "").split(":")[0]: float(c.get("cy", "nan")) for c in circles}
    # y up (REP 103 map frame): the spot at y = 100 m is drawn above the one at y = 0
    assert cy["lateral_slip WARN"] < cy["lateral_slip ERROR"]
    big = max(circles, key=lambda c: float(c.get("r", "0")))
    assert "2 event(s)" in big.findtext(f"{ns}title", "")
    assert len(svg.findall(f"{ns}polyline")) == 1
    empty = render_map_html([])
    assert "No event has a map-frame position" in empty
