"""Checks of the invented demo scenario in sample_gis/ and of the configs that use it.

The generator must be deterministic (regenerating with the default seed reproduces the committed
files), the centrelines must be drawn downhill (upstream -> downstream, the usual convention for
river centrelines), the land cover must partition the DEM extent, and configs/demo.toml must
quote the numbers the generator derives (confluence chainage, bed slopes).
"""
from __future__ import annotations

import importlib.util
import sys
import tomllib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_gis"
COMMITTED = ("make_demo.py", "README.md", "dem.tif", "centrelines.gpkg", "landcover.gpkg", "dem_lidar.tif",
             "lidar.gpkg")
LIDAR_FILES = ("dem_lidar.tif", "lidar.gpkg")


def _load_generator():
    """Import sample_gis/make_demo.py as a module."""
    spec = importlib.util.spec_from_file_location("make_demo", SAMPLE / "make_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module            # dataclasses look their module up here
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory):
    """Generate the scenario afresh with the default seed; return (folder, summary)."""
    gen = _load_generator()
    out = tmp_path_factory.mktemp("demo")
    return out, gen.generate(out, gen.DEFAULT_SEED)


def _read_dem(path: Path):
    """Band 1, profile and image-structure tags of a GeoTIFF."""
    with rasterio.open(path) as src:
        return src.read(1), src.profile, src.tags(ns="IMAGE_STRUCTURE")


@pytest.mark.parametrize("name", ["dem.tif", "dem_lidar.tif"])
def test_dem_regenerates_exactly(regenerated, name):
    """Same seed, same DEM: the committed raster is reproduced cell for cell."""
    out, _ = regenerated
    committed, prof_c, _ = _read_dem(SAMPLE / name)
    fresh, prof_f, _ = _read_dem(out / name)
    np.testing.assert_array_equal(committed, fresh)
    for key in ("crs", "transform", "nodata", "width", "height", "dtype"):
        assert prof_c[key] == prof_f[key], key


def test_dem_format():
    """float32, projected metres, <= 2 m north-up cells, nodata, tiled DEFLATE + float predictor."""
    z, prof, structure = _read_dem(SAMPLE / "dem.tif")
    assert prof["dtype"] == "float32"
    assert prof["crs"].is_projected and prof["crs"].linear_units in ("metre", "meter")
    t = prof["transform"]
    assert t.a <= 2.0 and t.e == -t.a and t.b == 0 and t.d == 0      # north-up, square cells
    assert prof["nodata"] is not None and prof["tiled"]
    assert structure["COMPRESSION"] == "DEFLATE" and structure["PREDICTOR"] == "3"
    assert np.all(z != prof["nodata"]) and np.allclose(z, np.round(z, 2), atol=1e-4)
    assert prof["width"] * t.a >= 3000 and prof["height"] * t.a >= 1000


def _vector(path: Path, layer: str) -> gpd.GeoDataFrame:
    """Read one layer of a GeoPackage."""
    return gpd.read_file(path, layer=layer)


@pytest.mark.parametrize("name,layer,fields", [
    ("centrelines.gpkg", "centrelines", ["reach_id", "name"]),
    ("landcover.gpkg", "landcover", ["cover"]),
    ("lidar.gpkg", "centreline", ["reach_id", "name"]),
    ("lidar.gpkg", "survey", ["z_m"]),
])
def test_vectors_regenerate_exactly(regenerated, name, layer, fields):
    """Same seed, same centrelines and land cover (attributes and geometry)."""
    out, _ = regenerated
    committed, fresh = _vector(SAMPLE / name, layer), _vector(out / name, layer)
    assert committed.crs == fresh.crs
    assert committed[fields].equals(fresh[fields])
    assert shapely.equals_exact(committed.geometry.values, fresh.geometry.values, 1e-6).all()


def test_readme_regenerates_exactly(regenerated):
    """sample_gis/README.md holds the numbers the generator computes (it writes the file)."""
    out, _ = regenerated
    assert (SAMPLE / "README.md").read_text(encoding="utf-8") == (out / "README.md").read_text(encoding="utf-8")


def _sample(path: Path, xy: np.ndarray) -> np.ndarray:
    """DEM values at points (nearest cell, as rasterio samples)."""
    with rasterio.open(path) as src:
        return np.array([v[0] for v in src.sample(xy)])


def test_centrelines_drawn_downhill():
    """Lines are drawn upstream -> downstream, so the DEM along them falls; vertices are dense."""
    lines = _vector(SAMPLE / "centrelines.gpkg", "centrelines")
    assert sorted(lines["reach_id"]) == ["main", "tributary"]
    for geom in lines.geometry:
        xy = shapely.get_coordinates(geom)
        bed = _sample(SAMPLE / "dem.tif", xy)
        assert np.median(bed[:10]) > np.median(bed[-10:]) + 1.0
        steps = np.hypot(*np.diff(xy, axis=0).T)
        assert steps.max() <= 5.0                                     # vertices every few metres


def test_tributary_ends_on_main_centreline():
    """The tributary's last vertex lies on the main centreline (the confluence)."""
    lines = _vector(SAMPLE / "centrelines.gpkg", "centrelines").set_index("reach_id")
    end = shapely.points(shapely.get_coordinates(lines.geometry["tributary"])[-1])
    assert shapely.distance(end, lines.geometry["main"]) < 1e-6


def test_landcover_partitions_extent():
    """Valid polygons that cover the DEM extent without gaps or overlaps (0.1 % tolerance)."""
    cover = _vector(SAMPLE / "landcover.gpkg", "landcover")
    with rasterio.open(SAMPLE / "dem.tif") as src:
        extent = shapely.box(*src.bounds)
    geoms = cover.geometry.values
    assert shapely.is_valid(geoms).all()
    assert {"channel", "grassland", "crops", "woodland", "built_up"} <= set(cover["cover"])
    union = shapely.union_all(geoms)
    assert abs(union.area - extent.area) <= 1e-3 * extent.area          # no gaps
    assert shapely.area(geoms).sum() - union.area <= 1e-3 * extent.area  # no overlaps
    assert shapely.difference(union, extent).area <= 1e-6 * extent.area   # nothing outside


def test_committed_files_small():
    """The committed demo files stay under 5 MB, the LiDAR-like stretch under 400 kB."""
    total = sum((SAMPLE / f).stat().st_size for f in COMMITTED)
    assert total < 5 * 1024**2
    assert sum((SAMPLE / f).stat().st_size for f in LIDAR_FILES) < 400 * 1024


def test_lidar_dem_shows_a_flat_water_surface_over_the_channel():
    """dem_lidar.tif is dem.tif over the first meander, except channel cells raised (never lowered) to the
    water level of the flight day: the bed line plus the flown depth, a flat level across the channel."""
    gen = _load_generator()
    lidar, prof, _ = _read_dem(SAMPLE / "dem_lidar.tif")
    with rasterio.open(SAMPLE / "dem.tif") as src:
        window = rasterio.windows.from_bounds(*rasterio.transform.array_bounds(prof["height"], prof["width"],
                                                                               prof["transform"]), src.transform)
        true = src.read(1, window=window)
    raised = lidar != true
    assert np.all(lidar[raised] > true[raised])
    assert 2000 < raised.sum() < 10000                                  # a 15 m wide strip over ~1 km
    cover = _vector(SAMPLE / "landcover.gpkg", "landcover")
    channel = shapely.union_all(cover.geometry[cover["cover"] == "channel"].values)
    rows, cols = np.nonzero(raised)
    xs, ys = rasterio.transform.xy(prof["transform"], rows, cols)
    assert shapely.contains_xy(channel, xs, ys).all()                   # only inside the channel
    # across the channel the raised cells share one level: within 2 cm of their neighbours along a row
    level = np.where(raised, lidar, np.nan)
    step = np.abs(np.diff(level, axis=1))
    assert np.nanmax(step) <= 0.02 + 1e-6
    assert gen.FLOWN_Q == 10.0


def test_lidar_demo_config_uses_the_survey_everywhere():
    """configs/demo_lidar.toml passes `geoflow check`; every section's channel comes from the survey."""
    import geoflow
    result = geoflow.check(ROOT / "configs" / "demo_lidar.toml")
    geom = result.geometries["main"]
    assert {s.bed_source for s in geom.sections} == {"survey"}
    assert len(geom.channel["survey"]["sections"]) == 5
    assert abs(geom.channel["survey"]["dem_minus_survey"]["median_m"]) < 0.02   # same datum


def test_demo_config_matches_generated_numbers(regenerated):
    """demo.toml quotes the generated confluence chainage and main bed slope; the tributary ends
    against the main river's level (junction); q2 stays below bankfull."""
    _, s = regenerated
    doc = tomllib.loads((ROOT / "configs" / "demo.toml").read_text(encoding="utf-8"))
    for event in doc["events"]:
        (change,) = event["changes"]
        assert change["reach"] == "main"
        assert change["chainage"] == pytest.approx(s["conf"], abs=0.05)
        assert change["discharge"] == pytest.approx(sum(event["discharge"].values()))
    assert doc["boundary"]["downstream"]["slope"] == pytest.approx(s["slope_main"], rel=1e-4)
    trib = doc["boundary"]["reaches"]["tributary"]["downstream"]
    assert trib == {"type": "junction", "reach": "main"}
    q2 = doc["events"][0]["discharge"]
    assert q2["main"] + q2["tributary"] < s["bankfull_main"][0]          # frequent flood in bank
