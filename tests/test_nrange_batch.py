"""Roughness cases, calibration and rating curves through the batch machinery: engines, junctions, resume.

References: the serial in-process run (the process pool must reproduce it byte for byte) and the
analytic normal depth of the straight trapezoidal valleys (Manning's equation, Chow 1959 ch. 6, scipy
brentq in tests/valleys.py) from which the observed levels are made.
"""
from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
from shapely.geometry import Point
from valleys import CRS, make_valley, write_config

from geoflow.batch import run

TRUE_N = 0.03


def setup(tmp_path, out="out"):
    """r1 and its tributary r2 (ending against r1's level), cases low/high, marks on r1 only, ratings."""
    v = make_valley(tmp_path, length=600.0, half_width=60.0, n_reaches=2)
    extra = ('[boundary.reaches.r2]\ndownstream = { type = "junction", reach = "r1" }\n'
             '[calibration]\nobservations = "marks.gpkg"\nadjust = ["channel"]\n'
             '[rating_curves]\ndischarges = [10.0, 20.0, 40.0]\n'
             f'downstream = {{ type = "normal_depth", slope = {v.slope} }}\n')
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.04, width=100.0, extra=extra)
    text = cfg.read_text().replace("discharge = 30.0", "discharge = { r1 = 40.0, r2 = 10.0 }")
    text = text.replace("n = 0.04\n", "n = 0.04\nn_low = 0.032\nn_high = 0.05\n", 1)
    text = text.replace('channel_class = "channel"', 'channel_class = "channel"\ncases = ["low", "high"]')
    text = text.replace('output_dir = "out"', f'output_dir = "{out}"')
    cfg.write_text(text)
    pts, wse = [], []
    for ch in (120.0, 330.0, 510.0):                          # on r1, at its normal depth for the true n
        pts.append(Point(v.x0 + ch, v.yc + 3.0))
        wse.append(float(v.bed_at(v.x0 + ch) + v.normal_depth(40.0, TRUE_N)))
    gpd.GeoDataFrame({"event": ["design"] * 3, "wse_m": wse}, geometry=pts, crs=CRS).to_file(
        tmp_path / "marks.gpkg", driver="GPKG")
    return v, cfg


def folder_contents(out):
    res = {name: (out / name).read_bytes() for name in ("profile.csv", "calibration.csv", "rating_curves.csv")}
    for tif in sorted(list((out / "rasters").rglob("*.tif")) + list((out / "uncertainty").rglob("*.tif"))):
        with rasterio.open(tif) as ds:
            res[str(tif.relative_to(out))] = ds.read(1).tobytes()
    return res


def test_pool_matches_serial_and_each_case_ends_at_the_same_case_of_the_receiving_reach(tmp_path):
    v, cfg = setup(tmp_path)
    serial = run(cfg)
    assert not serial.failed, serial.reaches
    man = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert list(man["calibration"]["reaches"]) == ["r1"]          # r2 has no marks: it keeps the table's n
    cal = man["calibration"]["reaches"]["r1"]
    assert abs(cal["calibrated_n"]["channel"] / TRUE_N - 1) < 0.03 and cal["rmse_m"] < 0.01, cal
    p = serial.profile
    for case in ("low", "normal", "high"):
        main = p[(p.reach_id == "r1") & (p.roughness_case == case)].sort_values("chainage_m")
        trib = p[(p.reach_id == "r2") & (p.roughness_case == case)].sort_values("chainage_m")
        assert abs(trib["wse_m"].iloc[-1] - main["wse_m"].iloc[-1]) < 1e-3, case
    pool_cfg = cfg.with_name("pool.toml")
    pool_cfg.write_text(cfg.read_text().replace('output_dir = "out"', 'output_dir = "out_pool"'))
    pooled = run(pool_cfg, workers=2)
    assert not pooled.failed
    assert folder_contents(tmp_path / "out") == folder_contents(tmp_path / "out_pool")


def test_resume_reuses_calibrated_units_and_an_edited_marks_file_recomputes(tmp_path):
    v, cfg = setup(tmp_path)
    first = run(cfg)
    out = tmp_path / "out"
    before = folder_contents(out)
    again = run(cfg, resume=True)
    assert again.reused_units == 2 and not again.failed
    assert folder_contents(out) == before
    assert list(json.loads((out / "manifest.json").read_text())["calibration"]["reaches"]) == ["r1"]
    marks = gpd.read_file(tmp_path / "marks.gpkg")
    marks["wse_m"] += 0.10                                     # the flood left higher marks
    marks.to_file(tmp_path / "marks.gpkg", driver="GPKG")
    edited = run(cfg, resume=True)
    assert edited.reused_units == 0
    rise = edited.profile["wse_m"].to_numpy() - first.profile["wse_m"].to_numpy()
    assert np.all(rise > 0.05)
    table = pd.read_csv(out / "calibration.csv")
    assert len(table) == 3 and np.all(np.abs(table["residual_m"]) < 0.01)
