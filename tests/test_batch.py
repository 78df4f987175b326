"""Batches: identical results whichever engine runs them, failing reaches recorded, kill + resume.

The reference here is the serial in-process run itself (the engines must reproduce it exactly)
plus the analytic normal depth of the straight trapezoidal valleys (Manning's equation, Chow
1959 ch. 6, solved with scipy brentq in tests/valleys.py).
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from shapely.affinity import translate
from valleys import make_valley, write_config

from geoflow.batch import run


def multi_valley(tmp_path, n_reaches=4, length=800.0, broken=False):
    v = make_valley(tmp_path / "data", length=length, half_width=60.0, n_reaches=n_reaches)
    if broken:   # one more reach whose centreline lies off the DEM
        gdf = gpd.read_file(v.centrelines)
        bad = gdf.iloc[[0]].copy()
        bad["reach_id"] = "off_dem"
        bad["geometry"] = [translate(g, yoff=-5000.0) for g in bad.geometry]
        pd.concat([gdf, bad]).pipe(gpd.GeoDataFrame, crs=gdf.crs).to_file(v.centrelines, layer="centrelines",
                                                                          driver="GPKG")
    return v


def config_for(v, folder: Path, out: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = write_config(v.dem.parent, v, discharge=30.0, n=0.03, width=100.0)
    text = path.read_text().replace('output_dir = "out"', f'output_dir = "{out}"')
    dest = v.dem.parent / f"{folder.name}.toml"
    dest.write_text(text)
    return dest


def outputs_of(out: Path) -> dict:
    """Everything a user reads from a run folder, minus timings."""
    res = {"profile": (out / "profile.csv").read_bytes()}
    for tif in sorted((out / "rasters").rglob("*.tif")):
        with rasterio.open(tif) as ds:
            res[str(tif.relative_to(out))] = (ds.read(1), ds.transform, ds.crs.to_wkt())
    for name, layer in (("sections.gpkg", "sections"), ("inundation.gpkg", "extent")):
        gdf = gpd.read_file(out / name, layer=layer)
        res[name] = (gdf.drop(columns="geometry").to_json(), gdf.geometry.to_wkb().tolist())
    man = json.loads((out / "manifest.json").read_text())
    res["status"] = {k: v["status"] for k, v in man["units"].items()}
    return res


def assert_same(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for k in a:
        if isinstance(a[k], tuple) and isinstance(a[k][0], np.ndarray):
            np.testing.assert_array_equal(a[k][0], b[k][0])
            assert a[k][1:] == b[k][1:]
        else:
            assert a[k] == b[k], k


def test_pool_and_dask_match_serial(tmp_path):
    v = multi_valley(tmp_path, n_reaches=3, length=500.0)
    serial = run(config_for(v, tmp_path / "serial", "out_serial"))
    pool = run(config_for(v, tmp_path / "pool", "out_pool"), workers=2)
    assert not serial.failed and not pool.failed
    yn = v.normal_depth(30.0, 0.03)
    depth = serial.profile["wse_m"] - v.bed_at(v.x0 + serial.profile["chainage_m"])
    assert np.all(np.abs(depth / yn - 1) < 0.02)
    ref = outputs_of(serial.output_dir)
    assert_same(ref, outputs_of(pool.output_dir))
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        dask_run = run(config_for(v, tmp_path / "dask", "out_dask"), scheduler=cluster.scheduler_address)
    assert not dask_run.failed
    assert_same(ref, outputs_of(dask_run.output_dir))


def test_failing_reach_is_recorded_and_the_rest_go_on(tmp_path, capsys):
    from geoflow.cli import main
    v = multi_valley(tmp_path, n_reaches=2, length=400.0, broken=True)
    cfg = config_for(v, tmp_path / "b", "out_b")
    out = v.dem.parent / "out_b"
    # Without --keep-going a reach that fails validation stops the run before it writes (as check does).
    assert main(["run", str(cfg), "--quiet"]) == 2
    cap = capsys.readouterr()
    assert "off_dem" in cap.err and "outside the DEM" in cap.err and len(cap.err.strip().splitlines()) == 1
    assert not out.exists()
    assert main(["check", str(cfg)]) == 2
    capsys.readouterr()
    assert main(["run", str(cfg), "--quiet", "--keep-going"]) == 1
    cap = capsys.readouterr()
    assert "off_dem" in cap.out and "outside the DEM" in cap.out and "Traceback" not in cap.err
    man = json.loads((out / "manifest.json").read_text())
    assert man["reaches"]["off_dem"]["status"] == "failed"
    assert "outside the DEM" in man["reaches"]["off_dem"]["error"]
    assert man["reaches"]["r1"]["status"] == man["reaches"]["r2"]["status"] == "complete"
    prof = pd.read_csv(out / "profile.csv")
    assert set(prof["reach_id"]) == {"r1", "r2"}
    assert (out / "run.log").read_text().count("off_dem") >= 1


def _units_complete(manifest: Path) -> int:
    """Complete units recorded on disk: manifest.json plus the reach records appended to
    manifest-updates.jsonl since its last rewrite (what --resume reads)."""
    from geoflow.batch.manifest import load_previous
    try:
        units = (load_previous(manifest.parent) or {})["units"]
    except (OSError, ValueError, KeyError):
        return 0
    return sum(1 for u in units.values() if u.get("status") == "complete")


def test_killed_run_resumes_to_identical_outputs(tmp_path):
    v = multi_valley(tmp_path, n_reaches=6, length=1000.0)
    clean = run(config_for(v, tmp_path / "clean", "out_clean"))
    cfg = config_for(v, tmp_path / "killed", "out_killed")
    out = v.dem.parent / "out_killed"
    proc = subprocess.Popen([sys.executable, "-m", "geoflow.cli", "run", str(cfg), "--quiet"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.time() + 120
    while _units_complete(out / "manifest.json") < 1 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    done_at_kill = _units_complete(out / "manifest.json")
    assert 1 <= done_at_kill < 6, "the kill must land mid-run"
    resumed = run(cfg, resume=True)
    assert resumed.reused_units == done_at_kill
    assert not resumed.failed
    assert not list(out.rglob(".*.tmp-*")), "temporary files of the killed run are cleared on resume"
    assert_same(outputs_of(clean.output_dir), outputs_of(out))


def test_reach_with_broken_geometry_fails_alone(tmp_path, capsys):
    """A null geometry and a multi-part line that does not join: those two reaches fail, r1/r2 run."""
    from shapely.geometry import MultiLineString

    from geoflow.cli import main
    v = multi_valley(tmp_path, n_reaches=2, length=400.0)
    gdf = gpd.read_file(v.centrelines)
    line = gdf.geometry.iloc[0]
    x0, y0 = line.coords[0]
    extra = gpd.GeoDataFrame({"reach_id": ["empty", "split"]},
                             geometry=[None, MultiLineString([[(x0, y0 + 5), (x0 + 100, y0 + 5)],
                                                              [(x0 + 200, y0 + 5), (x0 + 300, y0 + 5)]])],
                             crs=gdf.crs)
    pd.concat([gdf, extra]).pipe(gpd.GeoDataFrame, crs=gdf.crs).to_file(v.centrelines, layer="centrelines",
                                                                         driver="GPKG")
    cfg = config_for(v, tmp_path / "g", "out_g")
    assert main(["run", str(cfg), "--quiet"]) == 2 and not (v.dem.parent / "out_g").exists()
    capsys.readouterr()
    assert main(["run", str(cfg), "--quiet", "--keep-going"]) == 1
    out = capsys.readouterr().out
    assert "empty: FAILED" in out and "null or empty" in out and "split: FAILED" in out and "do not join" in out
    man = json.loads((v.dem.parent / "out_g" / "manifest.json").read_text())
    assert man["reaches"]["r1"]["status"] == man["reaches"]["r2"]["status"] == "complete"
    assert set(man["failed_reaches"]) == {"empty", "split"}


def test_sections_of_different_reaches_that_cross_are_reported(tmp_path):
    """Two reaches whose centrelines cross at right angles. Automatic sections stay in their own
    reach's area, so none cross (shapely); user-drawn lines of r2 that cross r1's sections are
    reported, one entry per crossing pair (counted independently with shapely)."""
    from shapely.geometry import LineString
    v = multi_valley(tmp_path, n_reaches=2, length=400.0)
    gdf = gpd.read_file(v.centrelines)
    x0, y0 = gdf.geometry.iloc[0].coords[0]
    gdf.loc[1, "geometry"] = LineString([(x0 + 200.0, y0 + 45.0), (x0 + 200.0, y0 - 45.0)])
    gdf.to_file(v.centrelines, layer="centrelines", driver="GPKG")
    text = config_for(v, tmp_path / "c", "out_c").read_text().replace("spacing = 50.0", "spacing = 20.0")
    cfg = v.dem.parent / "c2.toml"
    cfg.write_text(text.replace("[reaches]", "[reaches]\ncheck_direction = false"))
    res = run(cfg)
    assert res.crossings == []
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    geoms, rid = secs.geometry.values, secs.reach_id.to_numpy()
    assert [(i, j) for i in range(len(geoms)) for j in range(i + 1, len(geoms))
            if rid[i] != rid[j] and geoms[i].intersects(geoms[j])] == []
    lines = gpd.GeoDataFrame({"reach_id": ["r2"] * 3}, crs=gdf.crs, geometry=[
        LineString([(x0 + 160.0 + 30 * k, y0 + 30.0 - 10 * k), (x0 + 240.0 - 30 * k, y0 + 30.0 - 10 * k)])
        for k in range(3)])
    lines.to_file(v.dem.parent / "xs.gpkg", driver="GPKG")
    cfg.write_text(cfg.read_text().replace("width = 100.0", 'width = 100.0\nlines = "xs.gpkg"')
                   .replace('output_dir = "out_c"', 'output_dir = "out_d"'))
    res = run(cfg)
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    a, b = secs[secs.reach_id == "r1"].geometry.values, secs[secs.reach_id == "r2"].geometry.values
    expected = int(np.sum([[x.intersects(y) for y in b] for x in a]))
    assert expected > 0 and len(res.crossings) == expected
