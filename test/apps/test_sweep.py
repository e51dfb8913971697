"""The sweep command end to end on simulated bags, on a real dask.distributed LocalCluster."""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
from pathlib import Path
from typing import Any

import geojson
import pytest

from kinematic_monitor.apps import fleet, sweep
from kinematic_monitor.apps.cli import UsageError
from kinematic_monitor.apps.replay import EVENTS_CSV, EVENTS_JSON, TIMESERIES_CSV, replay

pytest.importorskip("dask.distributed")

# (scenario, simulated seconds, storage, seed): short drives, several with low-grip patches
DRIVES = [
    ("circle_ice_patch", 16.0, "mcap", 1),
    ("brake_on_ice", 12.0, "sqlite3", 2),
    ("circle_wet_patch", 12.0, "mcap", 3),
    ("launch_on_snow", 10.0, "sqlite3", 4),
    ("skidpad_circle", 10.0, "mcap", 5),
]
# invented test-track origin used by the simulator's GNSS (kinematic_monitor.sim.sensors)
ORIGIN_LAT, ORIGIN_LON = 46.2180, 7.4425


def _simulate(out: Path, scenario: str, duration: float, storage: str, seed: int) -> None:
    from kinematic_monitor.sim.bagout import write_simulation
    from kinematic_monitor.sim.scenarios import SCENARIOS, simulate

    trace = simulate(SCENARIOS[scenario](), duration=duration, seed=seed)
    write_simulation(out, trace, seed=seed, storage=storage)


@pytest.fixture(scope="module")
def fleet_dir(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    root = tmp_path_factory.mktemp("fleet")
    bags = []
    for i, (name, dur, storage, seed) in enumerate(DRIVES):
        bag = root / ("day1" if i < 3 else "day2") / f"{i}_{name}"
        bag.parent.mkdir(exist_ok=True)
        _simulate(bag, name, dur, storage, seed)
        bags.append(bag)
    # a deliberately corrupt bag: a real bag whose storage file is overwritten with noise
    bad = root / "day2" / "9_corrupt"
    shutil.copytree(bags[1], bad)
    db = next(bad.glob("*.db3"))
    db.write_bytes(os.urandom(db.stat().st_size))
    params = bags[0] / "params.yaml"  # the simulated vehicle's geometry (same for all)
    return {"root": root, "bags": bags, "bad": bad, "params": params}


@pytest.fixture(scope="module")
def swept(fleet_dir: dict[str, Any], tmp_path_factory: pytest.TempPathFactory
          ) -> dict[str, Any]:
    out = tmp_path_factory.mktemp("sweep") / "out"
    # the real thing: a LocalCluster of 2 worker processes
    result = sweep.sweep([str(fleet_dir["root"])], str(fleet_dir["params"]), str(out),
                         workers=2, progress=False)
    return {"out": out, "result": result}


def _bag_out(out: Path, bag: Path) -> Path:
    return out / sweep.BAGS_DIR / fleet.bag_output_name(bag)


def test_sweep_matches_single_replays(fleet_dir: dict[str, Any], swept: dict[str, Any],
                                      tmp_path: Path) -> None:
    result: sweep.SweepResult = swept["result"]
    assert len(result.records) == 6
    assert (result.swept, result.skipped, result.failed) == (6, 0, 1)
    by_bag = {r.bag: r for r in result.records}
    bad = by_bag[str(fleet_dir["bad"])]
    assert bad.status == "failed" and bad.error
    assert not (_bag_out(swept["out"], fleet_dir["bad"]) / EVENTS_JSON).exists()
    n_events = 0
    for i, bag in enumerate(fleet_dir["bags"]):
        rec = by_bag[str(bag)]
        assert rec.status == "ok", rec.error
        single = tmp_path / f"single{i}"
        ref = replay(str(bag), str(fleet_dir["params"]), str(single), report=False,
                     progress=False)
        got = _bag_out(swept["out"], bag)
        for name in (EVENTS_JSON, EVENTS_CSV, TIMESERIES_CSV):
            assert (got / name).read_bytes() == (single / name).read_bytes(), (bag, name)
        assert (got / "report.html").is_file()
        assert rec.events == ref.events
        assert rec.distance == pytest.approx(ref.distance)
        n_events += len(rec.events)
    assert n_events > 0  # the low-grip drives raised something to summarise


def test_fleet_outputs(fleet_dir: dict[str, Any], swept: dict[str, Any]) -> None:
    out: Path = swept["out"]
    for name in (sweep.SUMMARY_CSV, sweep.SUMMARY_HTML, sweep.SUMMARY_JSON, sweep.GEOJSON,
                 sweep.MAP_HTML, sweep.PARAMS_COPY):
        assert (out / name).is_file(), name
    assert not list(out.glob(".partial-*"))
    summary = json.loads((out / sweep.SUMMARY_JSON).read_text())
    rows = summary["rows"]
    assert [r["bag_id"] for r in rows][-1] == "TOTAL"
    total = rows[-1]
    ok_rows = [r for r in rows[:-1] if r["status"] == "ok"]
    assert total["events"] == sum(r["events"] for r in ok_rows)
    km = sum(r["distance_km"] for r in ok_rows)
    assert total["distance_km"] == pytest.approx(km)
    # pooled rate: events / (km / 100)
    assert total["lateral_slip_per_100km"] == pytest.approx(total["lateral_slip"] * 100 / km)
    page = (out / sweep.SUMMARY_HTML).read_text()
    for ev in summary["worst_events"][:3]:
        assert f'href="bags/{ev["bag_id"]}/report.html"' in page
    text = (out / sweep.GEOJSON).read_text()
    obj = geojson.loads(text)  # RFC 7946 structure per the geojson package
    assert obj.is_valid, obj.errors()
    doc = json.loads(text)
    assert fleet.geojson_problems(doc) == []
    feats = doc["features"]
    assert feats, "no low-grip spot on the map"
    assert sum(f["properties"]["count"] for f in feats) == sum(
        1 for r in swept["result"].records for e in r.events
        if e["kind"] in fleet.SLIP_KINDS)
    for f in feats:
        p = f["properties"]
        assert p["kind"] in fleet.SLIP_KINDS and p["level"] in ("WARN", "ERROR")
        assert p["bag"] and isinstance(p["peak"], dict) and math.isfinite(p["time"])
        # the simulator records GNSS: every spot is placed in WGS84. Its map frame is a
        # local east/north plane at the origin, so the placed fix must agree with the
        # map-frame position (equirectangular small-area approximation on a sphere,
        # Snyder, Map Projections - A Working Manual, USGS 1987, from memory) within
        # GNSS noise and the motion during the fix interpolation: 15 m
        lon, lat = f["geometry"]["coordinates"]
        x, y = p["map_position"]
        r = 6371008.8
        east = math.radians(lon - ORIGIN_LON) * r * math.cos(math.radians(ORIGIN_LAT))
        north = math.radians(lat - ORIGIN_LAT) * r
        if p["count"] == 1:
            assert math.hypot(east - x, north - y) < 15.0, (east, north, x, y)
    assert "<svg" in (out / sweep.MAP_HTML).read_text()


def test_rerun_skips_done_and_finishes_the_rest(fleet_dir: dict[str, Any],
                                                swept: dict[str, Any]) -> None:
    out: Path = swept["out"]
    markers = {p: p.stat().st_mtime_ns for p in out.glob(f"bags/*/{fleet.MARKER}")}
    assert len(markers) == 6
    again = sweep.sweep([str(fleet_dir["root"])], str(fleet_dir["params"]), str(out),
                        workers=2, progress=False)
    # nothing to do: no cluster is started, the corrupt bag stays failed without a retry
    assert (again.swept, again.skipped, again.failed) == (0, 6, 1)
    assert {p: p.stat().st_mtime_ns for p in markers} == markers
    # an interrupted sweep: one bag never finished (no marker, a partial file left)
    victim = _bag_out(out, fleet_dir["bags"][2])
    before = (victim / EVENTS_JSON).read_bytes()
    (victim / fleet.MARKER).unlink()
    (victim / EVENTS_JSON).unlink()
    (victim / ".partial-999-events.json").write_text("half")
    resumed = sweep.sweep([str(fleet_dir["root"])], str(fleet_dir["params"]), str(out),
                          workers=1, progress=False)
    assert (resumed.swept, resumed.skipped) == (1, 5)
    assert (victim / EVENTS_JSON).read_bytes() == before
    assert not list(victim.glob(".partial-*"))
    others = {p: t for p, t in markers.items() if p.parent != victim}
    assert {p: p.stat().st_mtime_ns for p in others} == others


def test_cli_run_and_bad_input(fleet_dir: dict[str, Any], swept: dict[str, Any],
                               tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    parser = argparse.ArgumentParser()
    sweep.add_arguments(parser)

    def run(*argv: str) -> int:
        return sweep.run(parser.parse_args(list(argv)))

    out, root, params = str(swept["out"]), str(fleet_dir["root"]), str(fleet_dir["params"])
    # everything is done already: fast, no cluster
    assert run(root, "--params", params, "--out", out, "--no-progress") == 0
    assert "1 failed" in capsys.readouterr().out
    assert run(root, "--params", params, "--out", out, "--no-progress",
               "--fail-on", "error") == 1  # a failed bag (and ERROR events) count
    with pytest.raises(UsageError, match="nowhere"):
        run(str(tmp_path / "nowhere"), "--params", params, "--out", out)
    with pytest.raises(UsageError, match="no rosbag2 folder"):
        run(str(tmp_path), "--params", params, "--out", str(tmp_path / "o"))
    bad_params = tmp_path / "p.yaml"
    bad_params.write_text("kinematic_monitor:\n  ros__parameters:\n    vehicle:\n"
                          "      wheelbase: -2.7\n")
    with pytest.raises(UsageError, match="wheelbase"):
        run(root, "--params", str(bad_params), "--out", out)
    with pytest.raises(UsageError, match="--workers"):
        run(root, "--params", params, "--out", out, "--workers", "0")


def test_calibration_drift_from_calibrate_results(fleet_dir: dict[str, Any],
                                                  swept: dict[str, Any]) -> None:
    out: Path = swept["out"]
    bags = fleet_dir["bags"][:2]
    for bag, offset in zip(bags, (0.004, 0.010), strict=True):
        (_bag_out(out, bag) / sweep.CALIBRATION_FILE).write_text(
            "kinematic_monitor:\n  ros__parameters:\n    vehicle:\n"
            f"      steering_offset: {offset}\n      wheelbase: 2.7\n")
    try:
        res = sweep.sweep([str(fleet_dir["root"])], str(fleet_dir["params"]), str(out),
                          progress=False)
        assert res.swept == 0
        summary = json.loads((out / sweep.SUMMARY_JSON).read_text())
        stats = summary["calibration_drift"]["stats"]["vehicle.steering_offset"]
        assert (stats["n"], stats["spread"]) == (2, pytest.approx(0.006))
        assert (out / sweep.DRIFT_CSV).is_file()
    finally:
        for bag in bags:
            (_bag_out(out, bag) / sweep.CALIBRATION_FILE).unlink()


def test_task_crash_is_recorded_and_the_rest_goes_on(fleet_dir: dict[str, Any],
                                                     tmp_path: Path) -> None:
    from dask.distributed import Client, LocalCluster

    out = tmp_path / "out"
    good = fleet_dir["bags"][3]
    # a file where the bag's output folder should be: the task itself raises on the worker
    blocked = _bag_out(out, good)
    blocked.parent.mkdir(parents=True)
    blocked.write_text("in the way")
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        res = sweep.sweep([str(good), str(fleet_dir["bad"])], str(fleet_dir["params"]),
                          str(out), progress=False, client=client)
        assert client.status == "running"  # a client we were given stays open
    by_bag = {r.bag: r for r in res.records}
    assert by_bag[str(good)].status == "failed"
    assert "FileExistsError" in by_bag[str(good)].error
    assert by_bag[str(fleet_dir["bad"])].status == "failed"
    assert (out / sweep.SUMMARY_CSV).is_file()  # the sweep still wrote its summary
