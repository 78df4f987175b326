"""Sampling sections on the DEM's bilinear surface and splitting them at land-cover edges.

References: scipy.interpolate.RegularGridInterpolator (method "linear" on cell-centre values)
is the bilinear DEM surface; along a section parallel to a grid axis that surface is piecewise
linear with kinks only where the section crosses rows or columns of cell centres, so a
polyline through our samples must match it everywhere (analytic property of bilinear
interpolation). Polygon edge positions come from the hand geometry of the test polygons.
"""
import geopandas as gpd
import numpy as np
import rasterio
from rasterio.transform import from_origin
from scipy.interpolate import RegularGridInterpolator
from shapely.geometry import LineString, box

from geoflow.layers import read_landcover
from geoflow.roughness import assign_roughness
from geoflow.sections import cut_sections
from geoflow.terrain import open_dem

CRS = "EPSG:32630"


def dem_file(tmp_path):
    rng = np.random.default_rng(7)
    z = np.round(rng.normal(10.0, 1.0, (60, 80)), 2)
    with rasterio.open(tmp_path / "dem.tif", "w", driver="GTiff", width=80, height=60, count=1, dtype="float64",
                       crs=CRS, transform=from_origin(0.0, 60.0, 1.0, 1.0)) as ds:
        ds.write(z, 1)
    return open_dem(tmp_path / "dem.tif"), z


def test_default_sampling_follows_the_bilinear_surface(tmp_path):
    dem, z = dem_file(tmp_path)
    line = LineString([(10.0, 30.0), (70.0, 30.0)])             # flow to +x: sections run along y
    geom = cut_sections("r", line, dem, spacing=20.0, width=40.0)
    yc = 60.0 - (np.arange(60) + 0.5)
    ref = RegularGridInterpolator((yc[::-1], np.arange(80) + 0.5), z[::-1], method="linear")
    for sec in geom.sections:
        (x0, y0), (x1, y1) = sec.line.coords
        dense = np.linspace(0.0, sec.station[-1], 4001)
        t = dense / sec.station[-1]
        truth = ref(np.column_stack([y0 + t * (y1 - y0), x0 + t * (x1 - x0)]))
        ours = np.interp(dense, sec.station, sec.elevation)
        assert np.max(np.abs(ours - truth)) < 1e-9
        assert np.max(np.diff(sec.station)) <= 1.0 + 1e-9        # never coarser than sample_step


def test_sections_split_exactly_at_landcover_edges(tmp_path):
    dem, _ = dem_file(tmp_path)
    cover = gpd.GeoDataFrame({"c": ["grass", "water", "wood"]},
                             geometry=[box(0, 0, 80, 22.3), box(0, 22.3, 80, 37.7), box(0, 37.7, 80, 60)], crs=CRS)
    cover.to_file(tmp_path / "lc.gpkg", driver="GPKG")
    lc = read_landcover(tmp_path / "lc.gpkg", dem.crs, "c")
    geom = cut_sections("r", LineString([(10.0, 30.0), (70.0, 30.0)]), dem, spacing=20.0, width=40.0)
    out = assign_roughness(geom, lc, "water", {"grass": 0.03, "water": 0.04, "wood": 0.1})
    for sec in out.sections:
        # the section runs from y = 50 (left, looking downstream to +x) to y = 10
        edges = [50.0 - 37.7, 50.0 - 22.3]
        for e in edges:
            assert np.min(np.abs(sec.station - e)) < 1e-9
        np.testing.assert_allclose(sec.channel_edges, edges, atol=1e-9)
        mid = 0.5 * (sec.station[:-1] + sec.station[1:])
        expected = np.where(mid < edges[0], 0.1, np.where(mid < edges[1], 0.04, 0.03))
        np.testing.assert_allclose(sec.n, expected)


def test_grid_stations_of_a_piece_between_two_grid_lines():
    # Hand geometry: cell centres at 0.5, 1.5, ... (1 m cells from 0); a 0.3 m piece from x = 0.6 to
    # 0.9 at y = 0.6 crosses no row or column of centres, so only its ends (and centre) are kept.
    from geoflow.sections import grid_stations
    t = from_origin(0.0, 10.0, 1.0, 1.0)
    st = grid_stations(t, np.array([0.6, 0.6]), np.array([0.9, 0.6]), np.array([0.0, 0.15, 0.3]), 1.0,
                       centre_station=0.15)
    np.testing.assert_allclose(st, [0.0, 0.15, 0.3])
