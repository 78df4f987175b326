"""End-to-end runs on DEMs built here: a straight prismatic trapezoidal channel at constant slope.

Reference: uniform flow. With a normal-depth downstream boundary the standard-step profile of a
prismatic channel must stay at the normal depth of Manning's equation (Chow 1959, ch. 6, eq. 6-7;
solved independently here with scipy.optimize.brentq), and the wetted width of the depth raster
must equal the trapezoid's top width b + 2 z y_n (analytic geometry).
"""
from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from pyproj import CRS
from valleys import make_valley, write_config

import geoflow
from geoflow.cli import main
from geoflow.outputs import PROFILE_COLUMNS

# The documented output contract: profile.csv holds at least these columns (read by name).
CONTRACT_COLUMNS = ["reach_id", "event", "section_id", "chainage_m", "discharge_m3s", "bed_m", "wse_m",
                    "energy_m", "critical_wse_m", "velocity_ms", "froude", "alpha", "area_m2", "top_width_m",
                    "friction_slope", "flags"]


def wet_width(depth_path, valley, margin=150.0):
    """Median wetted width (m) over raster columns away from the reach ends."""
    with rasterio.open(depth_path) as ds:
        d = ds.read(1, masked=True)
        xs = ds.transform.c + (np.arange(ds.width) + 0.5) * ds.transform.a
        cell = abs(ds.transform.e)
    keep = (xs > valley.x0 + margin) & (xs < valley.x0 + valley.length - margin)
    wet = (~np.ma.getmaskarray(d)) & (d.filled(0) > 0)
    return float(np.median(wet[:, keep].sum(axis=0))) * cell, float(d.max())


@pytest.mark.parametrize("q,n,slope,b,z", [(30.0, 0.03, 0.001, 12.0, 2.0), (55.0, 0.035, 0.002, 18.0, 1.5)])
def test_uniform_flow_end_to_end(tmp_path, q, n, slope, b, z):
    v = make_valley(tmp_path, length=1000.0, bottom_width=b, side_slope=z, slope=slope, bank_height=4.0)
    yn = v.normal_depth(q, n)
    cfg = write_config(tmp_path, v, discharge=q, n=n)
    assert main(["run", str(cfg), "--quiet"]) == 0
    out = tmp_path / "out"
    prof = pd.read_csv(out / "profile.csv")
    assert set(CONTRACT_COLUMNS) <= set(prof.columns)
    assert list(prof.columns) == list(PROFILE_COLUMNS)
    depth = prof["wse_m"] - v.bed_at(v.x0 + prof["chainage_m"])
    assert np.all(np.abs(depth / yn - 1) < 0.02), (yn, depth.describe())
    width, dmax = wet_width(out / "rasters" / "r1" / "design_depth.tif", v)
    top = v.top_width(yn)
    assert abs(width / top - 1) < 0.05, (width, top)
    assert abs(dmax / yn - 1) < 0.03, (dmax, yn)
    with rasterio.open(out / "rasters" / "r1" / "design_wse.tif") as ds, rasterio.open(v.dem) as dem:
        assert CRS(ds.crs) == CRS(dem.crs)
        assert ds.dtypes[0] == "float32" and ds.nodata is not None
        assert ds.res == dem.res
        # same grid: the window origin lies on a DEM cell corner
        col = (ds.transform.c - dem.transform.c) / dem.transform.a
        row = (ds.transform.f - dem.transform.f) / dem.transform.e
        assert abs(col - round(col)) < 1e-6 and abs(row - round(row)) < 1e-6
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["reaches"]["r1"]["status"] == "complete"
    assert len(manifest["config_sha256"]) == 64
    secs = gpd.read_file(out / "sections.gpkg", layer="sections")
    assert len(secs) == len(prof) and CRS(secs.crs) == CRS(v_crs(v))
    ext = gpd.read_file(out / "inundation.gpkg", layer="extent")
    assert set(ext["event"]) == {"design"} and ext.is_valid.all()
    assert (out / "report" / "r1.html").exists()


def v_crs(v):
    with rasterio.open(v.dem) as ds:
        return ds.crs


def test_centrelines_in_another_crs_are_reprojected(tmp_path):
    v = make_valley(tmp_path, length=600.0, centreline_crs="EPSG:4326")
    yn = v.normal_depth(30.0, 0.03)
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03)
    result = geoflow.run(cfg)
    assert not result.failed
    prof = result.profile
    depth = prof["wse_m"] - v.bed_at(v.x0 + prof["chainage_m"])
    assert np.all(np.abs(depth / yn - 1) < 0.02)


def test_check_writes_nothing_and_lists_sections(tmp_path, capsys):
    v = make_valley(tmp_path, length=600.0)
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03)
    assert main(["check", str(cfg)]) == 0
    text = capsys.readouterr().out
    assert "r1" in text and "13 sections" in text     # 0, 50, ..., 600 m
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("regime", ["supercritical", "mixed"])
def test_steep_channel_supercritical_and_mixed_regimes_give_normal_depth(tmp_path, regime):
    # Steep smooth channel: Manning normal depth is supercritical (Fr > 1, Chow 1959 ch. 6 and 3);
    # with normal depth imposed upstream the supercritical profile stays at y_n.
    q, n, slope = 120.0, 0.012, 0.01   # y_n ~ 1.1 m: deep enough that the DEM rounding of the toes is < 1 %
    v = make_valley(tmp_path, length=800.0, slope=slope)
    yn = v.normal_depth(q, n)
    extra = f'upstream = {{ type = "normal_depth", slope = {slope} }}\n'
    cfg = write_config(tmp_path, v, discharge=q, n=n, boundary=f'{{ type = "normal_depth", slope = {slope} }}')
    text = cfg.read_text().replace('regime = "subcritical"', f'regime = "{regime}"')
    cfg.write_text(text.replace("downstream = {", extra + "downstream = {", 1))
    res = geoflow.run(cfg)
    assert not res.failed, res.reaches
    p = res.profile
    assert (p["froude"] > 1.0).all()
    depth = p["wse_m"] - v.bed_at(v.x0 + p["chainage_m"])
    assert np.all(np.abs(depth / yn - 1) < 0.02), (yn, depth.describe())
    assert (p["regime"] == "supercritical").all()
