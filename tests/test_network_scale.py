"""What keeps a run linear in its size: appended manifest updates, the DEM kept open per task.

References: the manifest's own guarantee (a killed run lists exactly its complete units, and
--resume reuses exactly those), checked against a clean run of the same config; reads through a
kept-open DEM compared with rasterio reading the same windows.
"""
from __future__ import annotations

import concurrent.futures as cf
import json
import os
import pickle
import re
import subprocess
import sys

import numpy as np
import pytest
import rasterio
from rasterio.windows import Window
from test_batch import assert_same, config_for, multi_valley, outputs_of

from geoflow.batch import assemble, manifest, reports, run
from geoflow.batch.layout import UPDATES_NAME
from geoflow.terrain import open_dem


def small_manifest(tmp_path) -> manifest.Manifest:
    data = {"run_id": "abc", "events": ["q1", "q2"], "reaches": {}, "units": {}}
    man = manifest.Manifest(path=tmp_path / "manifest.json", data=data)
    man.save()
    return man


def record(man, rid):
    man.record_reach(rid, {"status": "complete", "error": None, "files": [f"rasters/{rid}/q1_wse.tif"],
                           "events": {e: {"status": "complete", "error": None, "files": [f"{rid}/{e}"]}
                                      for e in ("q1", "q2")}})
    man.checkpoint(rid)


def test_updates_between_rewrites_are_replayed_exactly(tmp_path, monkeypatch):
    man = small_manifest(tmp_path)
    monkeypatch.setattr(manifest, "REWRITE_SHARE", 0.0)          # every checkpoint appends a line
    for rid in ("r1", "r2", "r3"):
        record(man, rid)
    on_disk = json.loads((tmp_path / "manifest.json").read_text())
    assert on_disk["units"] == {} and len((tmp_path / UPDATES_NAME).read_text().splitlines()) == 3
    with open(tmp_path / UPDATES_NAME, "a") as f:
        f.write(json.dumps({"run_id": "other", "reach": "old", "entry": {}, "units": {"old/q1": {}}}) + "\n")
        f.write('{"run_id": "abc", "reach": "r4", "ent')           # a kill in the middle of an append
    prev = manifest.load_previous(tmp_path)
    assert prev["units"] == man.data["units"] and prev["reaches"] == man.data["reaches"]
    assert sorted(prev["units"]) == [f"r{k}/q{e}" for k in (1, 2, 3) for e in (1, 2)]
    man.save()                                                    # a whole rewrite absorbs the updates
    assert not (tmp_path / UPDATES_NAME).exists()
    assert json.loads((tmp_path / "manifest.json").read_text())["units"] == man.data["units"]


def test_cheap_rewrites_happen_after_every_reach(tmp_path, monkeypatch):
    man = small_manifest(tmp_path)
    monkeypatch.setattr(manifest, "REWRITE_SHARE", float("inf"))
    record(man, "r1")
    assert not (tmp_path / UPDATES_NAME).exists()
    assert "r1/q2" in json.loads((tmp_path / "manifest.json").read_text())["units"]


def test_run_killed_before_its_last_rewrite_resumes_from_the_updates(tmp_path, monkeypatch):
    v = multi_valley(tmp_path, n_reaches=3, length=500.0)
    clean = run(config_for(v, tmp_path / "clean", "out_clean"))
    cfg = config_for(v, tmp_path / "cut", "out_cut")
    out = v.dem.parent / "out_cut"
    monkeypatch.setattr(manifest, "REWRITE_SHARE", 0.0)

    def killed(*args, **kwargs):
        raise KeyboardInterrupt                                   # dies before the final manifest
    monkeypatch.setattr(assemble, "finish", killed)
    with pytest.raises(KeyboardInterrupt):
        run(cfg)
    assert json.loads((out / "manifest.json").read_text())["units"] == {}
    assert len((out / UPDATES_NAME).read_text().splitlines()) == 3
    monkeypatch.undo()
    resumed = run(cfg, resume=True)
    assert resumed.reused_units == 3 and not resumed.failed
    assert not (out / UPDATES_NAME).exists()
    assert_same(outputs_of(clean.output_dir), outputs_of(out))


def test_a_kept_open_dem_reads_the_same_and_closes(tmp_path):
    v = multi_valley(tmp_path, n_reaches=1, length=300.0)
    dem = open_dem(v.dem)
    wins = [Window(0, 0, 50, 40), Window(100, 20, 64, 64), Window(5, 7, 1, 1)]
    with rasterio.open(v.dem) as ds:                               # reference reader
        ref = [ds.read(1, window=w).astype(np.float64) for w in wins]
    with dem.kept_open():
        with dem.kept_open():                                      # re-entrant
            got = [dem.read(w) for w in wins]
        from geoflow import terrain
        handle = terrain._handles()[str(v.dem)][0]
        assert not handle.closed
        again = pickle.loads(pickle.dumps(dem))                   # picklable while open (Dask)
        np.testing.assert_array_equal(again.read(wins[0]), ref[0])
    assert handle.closed and str(v.dem) not in terrain._handles()
    for a, b in zip(got, ref):
        np.testing.assert_array_equal(a, b)


def _modules_after(code: str) -> set:
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys, json; print(json.dumps(sorted(sys.modules)))"],
                         capture_output=True, text=True, check=True)
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


def test_check_and_run_import_only_what_their_stages_need(tmp_path):
    # Measured with sys.modules in a fresh interpreter: check loads no mapping, plotting or cluster
    # code; an in-process run with reports leaves matplotlib to its report process (2+ CPUs).
    v = multi_valley(tmp_path, n_reaches=1, length=300.0)
    cfg = config_for(v, tmp_path / "imp", "out_imp")
    checked = _modules_after(f"from geoflow.batch import check\ncheck({str(cfg)!r})")
    assert not {"matplotlib", "geoflow.mapping", "geoflow.report", "scipy.ndimage", "dask"} & checked
    ran = _modules_after(f"from geoflow.batch import run\nassert not run({str(cfg)!r}).failed")
    assert (v.dem.parent / "out_imp" / "report" / "r1.html").is_file()
    assert "geoflow.mapping" in ran and "dask" not in ran
    if (os.cpu_count() or 1) >= 2:
        assert "matplotlib" not in ran


def test_reports_from_the_report_process_equal_inline_ones(tmp_path, monkeypatch):
    # Reference: the same report drawn inline (write_reach_report in this process), the minute
    # stamp aside; and a report process that dies leaves the task to draw the report itself.
    from geoflow.batch import reach, tasks
    from geoflow.batch.inputs import open_inputs
    from geoflow.config import load_config

    v = multi_valley(tmp_path, n_reaches=1, length=300.0)
    cfg_path = config_for(v, tmp_path / "rep", "out_rep")
    res = run(cfg_path)
    page = (res.output_dir / "report" / "r1.html").read_text()
    cfg = load_config(cfg_path)
    inputs = open_inputs(cfg)
    geom = reach.build_geometry(cfg, inputs, "r1", inputs.line_of("r1"))
    inline = tasks.write_reach_report(cfg, inputs, geom)[0].read_text()
    stamp = re.compile(r"\d{4}-\d\d-\d\d \d\d:\d\d")
    assert stamp.sub("", page) == stamp.sub("", inline)

    class Dead:
        def submit(self, *args):
            fut = cf.Future()
            fut.set_exception(cf.process.BrokenProcessPool("helper killed"))
            return fut

        submit_index = submit

        def close(self):
            pass
    monkeypatch.setattr(reports, "start", lambda *a: Dead())
    (res.output_dir / "report" / "r1.html").unlink()
    (res.output_dir / "report" / "index.html").unlink()
    again = run(cfg_path)
    assert not again.failed and (again.output_dir / "report" / "r1.html").is_file()
    assert (again.output_dir / "report" / "index.html").is_file()


def _random_polyline(rng, k: int, most: int) -> np.ndarray:
    """(n, 2) vertices of a random walk in projected metres; every third one repeats a vertex."""
    n = int(rng.integers(2, most))
    xy = np.cumsum(rng.normal(size=(n, 2)) * rng.uniform(0.1, 50.0), axis=0) + [3e5, 5.2e6]
    if k % 3 == 0 and n > 3:
        xy[2] = xy[1]
    return xy


def test_points_along_a_line_equal_shapely_exactly():
    # Reference: shapely.line_interpolate_point (GEOS), bit for bit, on random polylines with
    # repeated vertices, points at vertices, at both ends and beyond the end.
    import shapely

    from geoflow.sections.common import points_along
    rng = np.random.default_rng(5)
    for k in range(60):
        xy = _random_polyline(rng, k, 80)
        n = len(xy)
        line = shapely.LineString(xy)
        at_vertices = np.cumsum(np.hypot(*np.diff(xy, axis=0).T))[: min(5, n - 1)]
        d = np.concatenate([rng.uniform(0.0, line.length, 40), [0.0, line.length, line.length + 3.0], at_vertices])
        ref = shapely.get_coordinates(shapely.line_interpolate_point(line, d))
        np.testing.assert_array_equal(points_along(line, d), ref)


def test_locating_points_along_a_line_equals_shapely_exactly():
    # Reference: shapely.line_locate_point (GEOS), bit for bit, on random polylines with repeated
    # vertices and tight zig-zags (points equally near two segments: the first must win), points
    # at vertices, beyond both ends and far from the line.
    import shapely

    from geoflow.sections.common import locate_along
    rng = np.random.default_rng(7)
    for k in range(60):
        xy = _random_polyline(rng, k, 120)
        n = len(xy)
        if k % 4 == 1:                                    # a zig-zag of equal legs
            xy = np.column_stack((np.arange(n) * 10.0, np.where(np.arange(n) % 2, 10.0, 0.0))) + [3e5, 5.2e6]
        line = shapely.LineString(xy)
        lo, hi = xy.min(axis=0) - 30.0, xy.max(axis=0) + 30.0
        pts = np.vstack([rng.uniform(lo, hi, size=(300, 2)), xy, [xy.mean(axis=0)],
                         xy[:-1] + 0.5 * np.diff(xy, axis=0) + [0.0, 5.0]])
        ref = shapely.line_locate_point(line, shapely.points(pts))
        np.testing.assert_array_equal(locate_along(line, pts), ref)


def test_in_place_distances_to_dog_leg_sections_equal_the_plain_expression():
    # Reference: point_polyline_distance (the plain numpy expression, checked against shapely in
    # tests/test_mapping.py), bit for bit, on sections of one to three straight pieces.
    import shapely

    from geoflow.mapping.blocks import Surface, point_polyline_distance
    from geoflow.records import Section
    rng = np.random.default_rng(11)
    secs = []
    for k in range(12):
        legs = 1 + k % 3
        xy = np.cumsum(rng.normal(size=(legs + 1, 2)) * 40.0, axis=0) + [k * 30.0, 0.0]
        line = shapely.LineString(xy)
        st = np.linspace(0.0, line.length, 5)
        secs.append(Section(reach_id="r", section_id=k, chainage=k * 30.0, line=line, station=st,
                            elevation=np.zeros(5)))
    surface = Surface(secs, np.linspace(10.0, 9.0, 12))
    x, y = rng.uniform(-50, 400, 5000), rng.uniform(-150, 150, 5000)
    which = rng.integers(0, 12, 5000)
    np.testing.assert_array_equal(surface._distance_to(x, y, which), point_polyline_distance(x, y, surface.pieces[which]))


def test_validation_on_workers_finds_what_validation_here_finds(tmp_path):
    # Reference: the same run validated in this process. r2's stage boundary lies below its
    # ground, a problem found only once its sections are cut; on 2 workers each reach is
    # validated there, with the same message, and nothing is written.
    from geoflow.errors import GeoflowError
    v = multi_valley(tmp_path, n_reaches=3, length=400.0)
    cfg = config_for(v, tmp_path / "val", "out_val")
    cfg.write_text(cfg.read_text() + '\n[boundary.reaches.r2]\ndownstream = { type = "stage", wse = 1.0 }\n')
    messages = []
    for workers in (1, 2):
        with pytest.raises(GeoflowError) as err:
            run(cfg, workers=workers)
        messages.append(str(err.value))
        assert not (v.dem.parent / "out_val").exists()
    assert messages[0] == messages[1] and "r2" in messages[0] and "below the lowest ground" in messages[0]
    kept = run(cfg, workers=2, keep_going=True)
    assert kept.failed == ["r2"] and "below the lowest ground" in kept.reaches["r2"]["error"]


def test_dem_sampled_tile_by_tile_equals_one_read(tmp_path, monkeypatch):
    # Reference: the same bilinear interpolation from one window read (the tile size set above the
    # box), bit for bit, at random points, points on tile edges and points off the DEM.
    import rasterio
    from affine import Affine

    from geoflow import terrain
    rng = np.random.default_rng(3)
    z = rng.normal(100.0, 5.0, size=(300, 410)).astype("float32")
    z[50:60, 70:80] = -9999.0
    path = tmp_path / "dem.tif"
    with rasterio.open(path, "w", driver="GTiff", width=410, height=300, count=1, dtype="float32",
                       crs="EPSG:32630", transform=Affine(2.0, 0, 5000.0, 0, -2.0, 9000.0), nodata=-9999.0) as ds:
        ds.write(z, 1)
    dem = terrain.open_dem(path)
    x = np.concatenate([rng.uniform(4990.0, 5830.0, 4000), 5000.0 + 2.0 * np.arange(0, 410, 32) + 1.0])
    y = np.concatenate([rng.uniform(8390.0, 9010.0, 4000), np.full(13, 8700.0)])
    monkeypatch.setattr(terrain, "SAMPLE_TILE_CELLS", 10_000)
    whole = dem.sample(x, y)
    monkeypatch.setattr(terrain, "SAMPLE_TILE_CELLS", 32)
    np.testing.assert_array_equal(dem.sample(x, y), whole)
    assert np.isnan(whole).any() and np.isfinite(whole).sum() > 3000
