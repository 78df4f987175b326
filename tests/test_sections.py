"""Section cutting: checks against analytic geometry, shapely predicates and hand arithmetic."""
from __future__ import annotations

import itertools

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin

from geoflow.errors import GeometryError
from geoflow.records import ReachGeometry
from geoflow.sections import cut_sections, fill_small_gaps
from geoflow.terrain import open_dem

PLANE = (50.0, 0.01, -0.02)  # z = a + b x + c y


def write_plane_dem(tmp_path, nx=400, ny=400, cell=1.0, x0=0.0, y0=0.0, holes=(), name="dem.tif"):
    """GeoTIFF (float64, EPSG:32633) of the plane z = a + b x + c y at cell centres; ``holes`` = (row, col) slices set to nodata."""
    a, b, c = PLANE
    x = x0 + (np.arange(nx) + 0.5) * cell
    y = y0 + ny * cell - (np.arange(ny) + 0.5) * cell
    z = a + b * x[None, :] + c * y[:, None]
    for rows, cols in holes:
        z[rows, cols] = -9999.0
    path = tmp_path / name
    with rasterio.open(path, "w", driver="GTiff", width=nx, height=ny, count=1, dtype="float64",
                       crs="EPSG:32633", transform=from_origin(x0, y0 + ny * cell, cell, cell), nodata=-9999.0) as ds:
        ds.write(z, 1)
    return open_dem(path)


def plane(x, y):
    a, b, c = PLANE
    return a + b * np.asarray(x) + c * np.asarray(y)


def section_xy(sec):
    """Coordinates of the sample points of a section (stations measured from the left end)."""
    (x0, y0), (x1, y1) = np.asarray(sec.line.coords)
    f = sec.station / sec.station[-1]
    return x0 + f * (x1 - x0), y0 + f * (y1 - y0)


def arc_line(centre, radius, theta0, theta1, n=4000):
    th = np.linspace(theta0, theta1, n)
    return shapely.LineString(np.column_stack((centre[0] + radius * np.cos(th), centre[1] + radius * np.sin(th))))


def test_straight_centreline_matches_hand_geometry(tmp_path):
    # Hand geometry: flow due east along y = 200, so left (looking downstream) is north (+y).
    dem = write_plane_dem(tmp_path)
    geom = cut_sections("r1", shapely.LineString([(100, 200), (300, 200)]), dem, spacing=50, width=60, sample_step=2)
    assert isinstance(geom, ReachGeometry)
    assert [s.section_id for s in geom.sections] == [0, 1, 2, 3, 4]
    np.testing.assert_allclose([s.chainage for s in geom.sections], [0, 50, 100, 150, 200])
    for k, sec in enumerate(geom.sections):
        np.testing.assert_allclose(np.asarray(sec.line.coords), [[100 + 50 * k, 230], [100 + 50 * k, 170]], atol=1e-9)
        np.testing.assert_allclose(sec.station, np.arange(0, 61, 2.0))
        x, y = section_xy(sec)
        np.testing.assert_allclose(y, 230 - sec.station)
    np.testing.assert_allclose(geom.lengths, np.full((4, 3), 50.0))


@pytest.mark.parametrize("length, expected_tail", [(210.0, [200.0, 210.0]), (203.0, [150.0, 203.0])])
def test_chainages_include_downstream_end(tmp_path, length, expected_tail):
    # Documented rule of cut_sections (common practice, no source): sections every spacing from 0,
    # the downstream end always included, a last gap under spacing/10 merged.
    dem = write_plane_dem(tmp_path, nx=300, ny=100)
    geom = cut_sections("r", shapely.LineString([(20, 50), (20 + length, 50)]), dem, spacing=50, width=20)
    chain = [s.chainage for s in geom.sections]
    assert chain[0] == 0.0 and chain[-2:] == pytest.approx(expected_tail)
    np.testing.assert_allclose(geom.lengths[:, 1], np.diff(chain))


def test_circular_arc_sections_are_radial():
    # Analytic geometry: on a circle of radius R about O, arc length s = R·(theta - theta0), the
    # tangent at angle theta is (-sin, cos) for counter-clockwise flow, and the left side is towards O.
    class FlatDem:
        cell_size, bounds = 1.0, (-1000.0, -1000.0, 2000.0, 2000.0)

        def sample(self, x, y):
            return np.zeros(np.shape(x))

    o, r, th0 = np.array([500.0, 500.0]), 200.0, np.radians(-30)
    line = arc_line(o, r, th0, np.radians(130))
    geom = cut_sections("arc", line, FlatDem(), spacing=25, width=150)
    assert geom.warnings == ()
    for sec in geom.sections:
        theta = th0 + sec.chainage / r
        on_circle = o + r * np.array([np.cos(theta), np.sin(theta)])
        left, right = np.asarray(sec.line.coords)
        np.testing.assert_allclose((left + right) / 2, on_circle, atol=0.01)
        tangent = np.array([-np.sin(theta), np.cos(theta)])
        along = (right - left) / np.linalg.norm(right - left)
        angle = np.degrees(np.arccos(np.clip(abs(along @ tangent), 0, 1)))
        assert angle == pytest.approx(90.0, abs=1.0)
        assert np.linalg.norm(left - o) == pytest.approx(r - 75, abs=0.05)
        assert np.linalg.norm(right - o) == pytest.approx(r + 75, abs=0.05)
    assert geom.sections[-1].chainage == pytest.approx(r * np.radians(160), rel=1e-5)


@pytest.mark.parametrize("bearing_deg", [0, 73, 160, 245, 300])
def test_left_end_is_left_of_flow(tmp_path, bearing_deg):
    # Analytic geometry: a point is left of the direction t when the 2-D cross product t x (p - c) > 0.
    dem = write_plane_dem(tmp_path, nx=300, ny=300)
    t = np.array([np.cos(np.radians(bearing_deg)), np.sin(np.radians(bearing_deg))])
    start = np.array([150.0, 150.0]) - 60 * t
    geom = cut_sections("r", shapely.LineString([start, start + 120 * t]), dem, spacing=40, width=50)
    for sec in geom.sections:
        left, right = np.asarray(sec.line.coords)
        c = (left + right) / 2
        cross = lambda u, v: u[0] * v[1] - u[1] * v[0]  # noqa: E731
        assert cross(t, left - c) > 0 > cross(t, right - c)
        assert abs((right - left) @ t) < 1e-6


def test_smoothing_ignores_short_wiggles():
    # Analytic geometry: a zigzag of amplitude 0.5 m and period 6 m about the x axis has legs at
    # atan(1/3) = 18.4 deg; a chord over +-10 m (default smoothing = spacing/2) has both ends within
    # 0.5 m of the axis, so its direction is within atan(1/20) = 2.9 deg of the mean flow (+x).
    class FlatDem:
        cell_size, bounds = 1.0, (-100.0, -100.0, 400.0, 100.0)

        def sample(self, x, y):
            return np.zeros(np.shape(x))

    x = np.arange(0, 301, 1.5)
    y = 0.5 * np.array([0, 1, 0, -1])[np.arange(x.size) % 4]
    line = shapely.LineString(np.column_stack((x, y)))

    def worst_angle(geom):  # interior sections: the window shrinks to spacing/10 at the two ends
        d = np.array([np.subtract(*np.asarray(s.line.coords)) for s in geom.sections[1:-1]])
        return np.degrees(np.max(np.abs(np.arctan2(d[:, 0], d[:, 1]))))  # 0 when the section runs N-S

    assert worst_angle(cut_sections("z", line, FlatDem(), spacing=20, width=40)) < np.degrees(np.arctan(1 / 20))
    assert worst_angle(cut_sections("z", line, FlatDem(), spacing=20, width=40, smoothing=0.2)) > 10.0


def test_bilinear_sampling_reproduces_a_plane(tmp_path):
    # Bilinear interpolation is exact for z = a + b x + c y (it reproduces 1, x, y and xy;
    # Press et al. 1992, Numerical Recipes 2nd ed., sec. 3.6). Oblique line: samples fall off-grid.
    dem = write_plane_dem(tmp_path, nx=200, ny=200, cell=2.0, x0=1000.0, y0=5000.0)
    line = shapely.LineString([(1100.3, 5080.7), (1290.1, 5230.2)])
    geom = cut_sections("p", line, dem, spacing=30, width=80, sample_step=1.3)
    for sec in geom.sections:
        x, y = section_xy(sec)
        np.testing.assert_allclose(sec.elevation, plane(x, y), atol=1e-9)
        assert np.all(np.diff(sec.station) <= 1.3 + 1e-9) and sec.station[-1] == pytest.approx(80.0)


def test_tight_meander_sections_do_not_cross():
    # Sine-generated meander, direction theta(s) = omega·sin(2 pi s / M) (Langbein & Leopold 1966);
    # its least radius of curvature M / (2 pi omega) = 16.6 m is far below the 60 m half-width.
    class FlatDem:
        cell_size, bounds = 1.0, (-1000.0, -1000.0, 2000.0, 2000.0)

        def sample(self, x, y):
            return np.zeros(np.shape(x))

    ds, m, omega = 0.5, 200.0, np.radians(110)
    s = np.arange(0, 2 * m + ds / 2, ds)
    th = omega * np.sin(2 * np.pi * s / m)
    xy = np.column_stack((np.r_[0, np.cumsum(np.cos(th[:-1]) * ds)], np.r_[0, np.cumsum(np.sin(th[:-1]) * ds)]))
    line = shapely.LineString(xy)
    assert m / (2 * np.pi * omega) < 60.0

    def n_crossings(g):
        return sum(a.line.intersects(b.line) for a, b in itertools.combinations(g.sections, 2))

    raw = cut_sections("m", line, FlatDem(), spacing=10, width=120, repair=False)
    assert n_crossings(raw) > 0 and any("crosses_section" in s.flags for s in raw.sections)
    geom = cut_sections("m", line, FlatDem(), spacing=10, width=120)
    assert n_crossings(geom) == 0
    shortened = [s for s in geom.sections if "shortened" in s.flags]
    assert shortened and len(geom.warnings) == len(shortened)
    for sec in geom.sections:  # shortening is symmetric: the line stays centred on the centreline
        centre = shapely.get_coordinates(line.interpolate(sec.chainage))[0]
        np.testing.assert_allclose(np.asarray(sec.line.coords).mean(axis=0), centre, atol=1e-6)
        assert sec.station[-1] <= 120.0 + 1e-9


def test_small_nodata_gap_is_filled_along_the_section(tmp_path):
    # A one-cell hole poisons the bilinear samples within one cell of it (<= 3 samples at a 1 m
    # step); linear interpolation along the section restores the plane exactly (plane is linear).
    dem = write_plane_dem(tmp_path, nx=200, ny=200, holes=[(slice(119, 120), slice(100, 101))])
    geom = cut_sections("g", shapely.LineString([(100.5, 150), (100.5, 10)]), dem, spacing=70, width=60, sample_step=1.0)
    sec = geom.sections[1]  # at chainage 70: x from 130.5 (left, looking south) to 70.5, y = 80
    assert "ground_gap_filled" in sec.flags and any("interpolated" in w for w in geom.warnings)
    x, y = section_xy(sec)
    np.testing.assert_allclose(sec.elevation, plane(x, y), atol=1e-9)
    assert "ground_gap_filled" not in geom.sections[0].flags


def test_large_nodata_hole_names_section_and_chainage(tmp_path):
    dem = write_plane_dem(tmp_path, nx=200, ny=200, holes=[(slice(114, 125), slice(90, 111))])
    with pytest.raises(GeometryError) as err:
        cut_sections("big-hole", shapely.LineString([(100.5, 150), (100.5, 10)]), dem, spacing=70, width=60)
    msg = str(err.value)
    assert "\n" not in msg and "big-hole" in msg and "section 1" in msg and "chainage 70.0" in msg


def test_centreline_outside_dem_and_too_short(tmp_path):
    dem = write_plane_dem(tmp_path, nx=100, ny=100)
    with pytest.raises(GeometryError, match=r"reach out: 50\.0 m of the 130\.0 m centreline lies outside"):
        cut_sections("out", shapely.LineString([(20, 50), (150, 50)]), dem, spacing=20, width=20)
    with pytest.raises(GeometryError, match="reach tiny: centreline is 15.0 m long") as err:
        cut_sections("tiny", shapely.LineString([(20, 50), (35, 50)]), dem, spacing=20, width=20)
    assert "\n" not in str(err.value)
    with pytest.raises(GeometryError, match=r"\[sections\] width"):
        cut_sections("w", shapely.LineString([(20, 50), (80, 50)]), dem, spacing=20, width=-5)


def test_section_off_the_dem_edge_is_an_error(tmp_path):
    dem = write_plane_dem(tmp_path, nx=100, ny=100)
    with pytest.raises(GeometryError, match="section 0 .*nodata"):
        cut_sections("edge", shapely.LineString([(10, 95), (10, 5)]), dem, spacing=30, width=40, sample_step=1.0)


def test_fill_small_gaps_hand_values():
    # Hand arithmetic: linear interpolation between 2 and 5; end runs take the nearest value.
    out, n = fill_small_gaps(np.array([np.nan, 1.0, 2.0, np.nan, np.nan, 5.0, np.nan]))
    np.testing.assert_allclose(out, [1, 1, 2, 3, 4, 5, 5])
    assert n == 4
    assert fill_small_gaps(np.array([1.0, np.nan, np.nan, np.nan, np.nan, 6.0]))[0] is None
    assert fill_small_gaps(np.array([1.0, np.nan, np.nan, np.nan, np.nan, 6.0]), max_gap=4)[0][3] == pytest.approx(4.0)
