"""Tests for geoflow.mapping on a synthetic DEM with an analytic trapezoidal channel.

DEM (1 m cells, 200 x 100, projected CRS): a straight channel along +x at local y = 50,
bed 0 m, bottom width b = 10 m, side slope m = 2 (H:V) up to a floodplain at 3 m; a closed
depression (ground 0.5 m) at local x 80..120, y 80..90 behind that 3 m ground.
Flow runs +x, so the left end of each section is at high y.
"""
from __future__ import annotations

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.crs import CRS
from shapely.geometry import LineString

from geoflow.errors import ConfigError, GeometryError
from geoflow.mapping import ReachMap, map_reach
from geoflow.mapping.blocks import Surface, point_segment_distance
from geoflow.records import ReachGeometry, Section
from geoflow.terrain import open_dem

X0, Y0 = 500000.0, 4000000.0          # lower-left corner of the DEM
W, H = 200, 100
B, M, FLOODPLAIN = 10.0, 2.0, 3.0     # bottom width, side slope H:V, floodplain level
CRS_UTM = CRS.from_epsg(32633)


def ground(xl: np.ndarray, yl: np.ndarray) -> np.ndarray:
    """Analytic ground elevation at local coordinates (m from the lower-left corner)."""
    dist = np.abs(yl - 50.0)
    z = np.clip((dist - B / 2) / M, 0.0, FLOODPLAIN)
    pit = (xl >= 80) & (xl < 120) & (yl >= 80) & (yl < 90)
    return np.where(pit, 0.5, z)


@pytest.fixture(scope="module")
def dem(tmp_path_factory):
    path = tmp_path_factory.mktemp("dem") / "dem.tif"
    cols, rows = np.meshgrid(np.arange(W), np.arange(H))
    z = ground(cols + 0.5, H - rows - 0.5).astype(np.float32)
    transform = Affine(1.0, 0.0, X0, 0.0, -1.0, Y0 + H)
    with rasterio.open(path, "w", driver="GTiff", width=W, height=H, count=1, dtype="float32",
                       crs=CRS_UTM, transform=transform, nodata=-9999.0) as ds:
        ds.write(z, 1)
    return open_dem(path)


def make_geom(xs, left_y=98.0, right_y=2.0, lines=None) -> ReachGeometry:
    """Sections as straight lines across the valley at local x = xs (left end at high y)."""
    if lines is None:
        lines = [LineString([(X0 + x, Y0 + left_y), (X0 + x, Y0 + right_y)]) for x in xs]
    secs = tuple(
        Section(reach_id="r1", section_id=i, chainage=float(np.hypot(*(np.asarray(ln.coords[0]) - lines[0].coords[0]))),
                line=ln, station=np.array([0.0, ln.length]), elevation=np.array([3.0, 3.0]))
        for i, ln in enumerate(lines)
    )
    centre = LineString([(X0 + 10, Y0 + 50), (X0 + 190, Y0 + 50)])
    return ReachGeometry(reach_id="r1", centreline=centre, sections=secs,
                         lengths=np.zeros((len(secs) - 1, 3)))


def cell_centres(m: ReachMap):
    """Local x, y of every cell centre of the map window."""
    rows, cols = np.indices(m.depth.shape)
    x, y = m.transform @ (cols + 0.5, rows + 0.5)
    return np.asarray(x) - X0, np.asarray(y) - Y0


def test_constant_wse_depth_and_width(dem):
    wse = 1.3
    m = map_reach(dem, make_geom([20.0, 180.0]), np.array([wse, wse]))
    xl, yl = cell_centres(m)
    wet = np.isfinite(m.depth)
    # Analytic: depth = WSE - z at cell centres (float32 rounding only).
    np.testing.assert_allclose(m.depth[wet], wse - ground(xl[wet], yl[wet]), atol=1e-5)
    np.testing.assert_allclose(m.wse[wet], wse, atol=1e-6)
    assert np.all(np.isnan(m.wse[~wet]))
    # Analytic trapezoid top width T = b + 2 m h, within one cell, at every wet column.
    top_width = B + 2 * M * wse
    widths = wet.sum(axis=0)[wet.any(axis=0)] * abs(m.transform.e)
    assert np.all(np.abs(widths - top_width) <= 1.0)
    # Wet columns span the quad between the two sections (cell centres 20.5 .. 179.5).
    assert xl[wet].min() == pytest.approx(20.5) and xl[wet].max() == pytest.approx(179.5)
    assert m.wet_area_m2 == pytest.approx(wet.sum() * 1.0)
    assert m.max_depth == pytest.approx(wse, abs=1e-6)


def test_disconnected_depression_stays_dry(dem):
    m = map_reach(dem, make_geom([20.0, 180.0]), np.array([2.0, 2.0]))
    xl, yl = cell_centres(m)
    pit = (xl >= 80) & (xl < 120) & (yl >= 80) & (yl < 90)
    assert pit.sum() == 400
    assert np.all(np.isnan(m.depth[pit]))        # 0.5 m ground below WSE, but cut off by 3 m ground
    # Control: above the floodplain the pit joins the channel and is wet at WSE - 0.5 (analytic).
    m2 = map_reach(dem, make_geom([20.0, 180.0]), np.array([3.5, 3.5]))
    np.testing.assert_allclose(m2.depth[pit], 3.0, atol=1e-6)


def test_linear_wse_between_sections(dem):
    xs, levels = [20.0, 60.0, 180.0], [2.0, 1.8, 1.0]
    m = map_reach(dem, make_geom(xs), np.array(levels))
    xl, yl = cell_centres(m)
    wet = np.isfinite(m.wse)
    # Analytic: parallel sections -> WSE linear in x between neighbours (numpy.interp as reference).
    expected = np.interp(xl[wet], xs, levels)
    np.testing.assert_allclose(m.wse[wet], expected, atol=1e-5)
    np.testing.assert_allclose(m.depth[wet], expected - ground(xl[wet], yl[wet]), atol=1e-5)
    # Not nearest-section blocks: many distinct levels along the reach.
    assert np.unique(np.round(m.wse[wet], 4)).size > 100


def test_grid_alignment_and_crs(dem):
    m = map_reach(dem, make_geom([20.0, 180.0]), np.array([1.5, 1.5]))
    assert m.crs == dem.crs
    assert (m.transform.a, m.transform.b, m.transform.d, m.transform.e) == (1.0, 0.0, 0.0, -1.0)
    col_off = (m.transform.c - dem.transform.c) / dem.transform.a
    row_off = (m.transform.f - dem.transform.f) / dem.transform.e
    assert col_off == int(col_off) and row_off == int(row_off)
    assert m.depth.dtype == np.float32 and m.wse.dtype == np.float32
    # Window = section bounds + 3 cells, clipped to the DEM rows (100), narrower than the DEM.
    assert m.depth.shape == (min(96 + 6, H), 160 + 6)


def test_coarser_cell_size_block_average(dem):
    m = map_reach(dem, make_geom([20.0, 180.0]), np.array([1.3, 1.3]), cell_size=2.0)
    assert m.transform.a == 2.0 and m.transform.e == -2.0
    assert ((m.transform.c - X0) / 2.0).is_integer() and ((m.transform.f - Y0 - H) / 2.0).is_integer()
    xl, yl = cell_centres(m)
    wet = np.isfinite(m.depth)
    # Analytic: coarse ground = mean of the four fine cell centres of the 2 x 2 block.
    offs = np.array([-0.5, 0.5])
    z4 = np.mean([ground(xl[wet] + dx, yl[wet] + dy) for dx in offs for dy in offs], axis=0)
    np.testing.assert_allclose(m.depth[wet], 1.3 - z4, atol=1e-5)


def test_cell_size_not_a_multiple_is_config_error(dem):
    with pytest.raises(ConfigError, match=r"\[mapping\] cell_size"):
        map_reach(dem, make_geom([20.0, 180.0]), np.array([1.3, 1.3]), cell_size=1.5)


def test_extent_polygons(dem):
    m = map_reach(dem, make_geom([20.0, 180.0]), np.array([1.3, 1.3]))
    assert len(m.extent) == 1
    poly = m.extent[0]
    assert poly.geom_type == "Polygon" and poly.is_valid
    # Analytic: 160 m x 16 cells rectangle (cell-centre rule), unchanged by simplification.
    assert poly.area == pytest.approx(160 * 16.0)
    assert m.wet_area_m2 == pytest.approx(160 * 16.0)
    minx, miny, maxx, maxy = poly.bounds
    assert (minx - X0, maxx - X0) == (20.0, 180.0)


def test_crossing_sections_in_a_bend(dem):
    # Consecutive lines cross at local (60, 66) on the left floodplain (inside of a bend):
    # the quad self-intersects (bow tie) and is split into two triangles.
    lines = [LineString([(X0 + 70, Y0 + 98), (X0 + 40, Y0 + 2)]),
             LineString([(X0 + 50, Y0 + 98), (X0 + 80, Y0 + 2)])]
    geom = make_geom(None, lines=lines)
    m = map_reach(dem, geom, np.array([2.0, 1.0]))
    wet = np.isfinite(m.wse)
    assert wet.sum() > 50
    # Interpolation between the two sections stays within their levels (convex weights).
    assert np.all((m.wse[wet] >= 1.0 - 1e-6) & (m.wse[wet] <= 2.0 + 1e-6))
    # Both lobes of the bow tie carry a surface (checked on the raw surface, before wet/dry).
    surf = Surface(geom.sections, np.array([[2.0, 1.0]])).interpolate(m.transform, 0, 0, m.wse.shape)[0]
    _, yl = cell_centres(m)
    assert np.any(np.isfinite(surf) & (yl > 70)) and np.any(np.isfinite(surf) & (yl < 60))


def test_nan_wse_leaves_pair_dry(dem):
    m = map_reach(dem, make_geom([20.0, 100.0, 180.0]), np.array([2.0, 2.0, np.nan]))
    xl, _ = cell_centres(m)
    assert np.all(np.isnan(m.depth[xl > 100.5]))
    assert np.any(np.isfinite(m.depth[xl < 99.5]))


def test_bad_inputs_raise(dem):
    with pytest.raises(GeometryError, match="r1"):
        map_reach(dem, make_geom([20.0]), np.array([1.0]))
    with pytest.raises(GeometryError, match="one per section"):
        map_reach(dem, make_geom([20.0, 180.0]), np.array([1.0, 1.0, 1.0]))
    far = [LineString([(0, 10), (0, 0)]), LineString([(10, 10), (10, 0)])]
    with pytest.raises(GeometryError, match="outside the DEM"):
        map_reach(dem, make_geom(None, lines=far), np.array([1.0, 1.0]))


coord = st.floats(-100, 100, allow_nan=False)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(coord, coord, coord, coord, coord, coord), min_size=1, max_size=20))
def test_point_segment_distance_matches_shapely(rows):
    # Reference library: shapely.distance(Point, LineString).
    a = np.array(rows)
    px, py, seg = a[:, 0], a[:, 1], a[:, 2:6]
    got = point_segment_distance(px, py, seg)
    lines = shapely.linestrings(np.stack([seg[:, :2], seg[:, 2:]], axis=1))
    ref = shapely.distance(shapely.points(px, py), lines)
    # GEOS returns inf for segments of length ~1e-298; treat near-zero segments as points.
    degenerate = np.hypot(seg[:, 2] - seg[:, 0], seg[:, 3] - seg[:, 1]) < 1e-9
    ref = np.where(degenerate, np.hypot(px - seg[:, 0], py - seg[:, 1]), ref)
    np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-9)
