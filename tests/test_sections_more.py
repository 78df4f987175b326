"""Drawn direction, confluences, adaptive width and user section lines, on analytic DEMs."""
from __future__ import annotations

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin
from valleys import make_valley

from geoflow.errors import GeometryError
from geoflow.sections import cut_sections, orient_centreline, sections_from_lines
from geoflow.terrain import open_dem


def write_surface(tmp_path, z_of, nx=400, ny=400, cell=1.0, name="surface.tif"):
    """GeoTIFF (float64, EPSG:32633, origin 0,0) of z_of(x, y) at cell centres."""
    x = (np.arange(nx) + 0.5) * cell
    y = ny * cell - (np.arange(ny) + 0.5) * cell
    z = z_of(x[None, :], y[:, None]) + np.zeros((ny, nx))
    path = tmp_path / name
    with rasterio.open(path, "w", driver="GTiff", width=nx, height=ny, count=1, dtype="float64",
                       crs="EPSG:32633", transform=from_origin(0.0, ny * cell, cell, cell)) as ds:
        ds.write(z, 1)
    return open_dem(path)


# ---- 1. drawn direction -------------------------------------------------------------------

def test_line_drawn_upstream_is_reversed(tmp_path):
    # Analytic valley: bed falls 2 m/km towards +x, V-shaped across (thalweg y = 200.5). A line drawn
    # from x = 380 to x = 60 starts about 0.6 m lower than it ends, so it was drawn upstream.
    dem = write_surface(tmp_path, lambda x, y: 100.0 - 0.002 * x + 0.05 * np.abs(y - 200.5))
    upstream = shapely.LineString([(380, 202.0), (60, 202.0)])  # 1.5 m off the thalweg: still found
    line, warning = orient_centreline("R7", upstream, dem)
    assert warning is not None and "R7" in warning and "reversed" in warning and "\n" not in warning
    assert list(line.coords) == list(upstream.coords)[::-1]
    same, none = orient_centreline("R7", line, dem)
    assert none is None and same is line


def test_flat_reach_is_left_as_drawn(tmp_path):
    # 0.03 m fall over 300 m is under the tolerance max(0.05 m, 1e-4 x 300 m) = 0.05 m.
    dem = write_surface(tmp_path, lambda x, y: 20.0 + 1e-4 * x + 0.05 * np.abs(y - 200.5))
    line = shapely.LineString([(50, 200.5), (350, 200.5)])
    assert orient_centreline("flat", line, dem) == (line, None)


# ---- 2. confluences -------------------------------------------------------------------------

class FlatDem:
    cell_size, bounds = 1.0, (-1000.0, -1000.0, 2000.0, 2000.0)

    def sample(self, x, y):
        return np.zeros(np.shape(x))


MAIN = shapely.LineString([(0, 200), (400, 200)])            # flows east; left = north
TRIB = shapely.LineString([(150, 350), (250, 200)])          # joins MAIN at chainage 250


def test_sections_stop_short_of_the_other_centreline():
    # Checked with shapely predicates. Hand geometry: the section at x = 200 meets TRIB at y = 275,
    # 75 m left of its centre, so its left side becomes 0.98 x 75 = 73.5 m; its right side keeps 100 m.
    geom = cut_sections("main", MAIN, FlatDem(), spacing=50, width=200, others={"trib": TRIB})
    for sec in geom.sections:
        if "at_confluence" in sec.flags:
            assert sec.chainage == pytest.approx(250.0)
            continue
        assert not sec.line.intersects(TRIB)
    sec = geom.sections[4]
    assert "shortened_at_confluence" in sec.flags
    left, right = np.asarray(sec.line.coords)
    assert left == pytest.approx([200, 273.5]) and right == pytest.approx([200, 100])
    assert any("main" in w and "trib" in w and "section 4" in w for w in geom.warnings)
    assert geom.lengths[3, 0] == pytest.approx(np.hypot(50, 50 - 73.5 / 2))  # left halves' mid-points 50 m and 36.75 m north


def test_tributary_sections_do_not_cross_the_main_centreline():
    geom = cut_sections("trib", TRIB, FlatDem(), spacing=40, width=200, others=[("main", MAIN)])
    shortened = [s for s in geom.sections if "shortened_at_confluence" in s.flags]
    assert shortened
    for sec in geom.sections:
        if "at_confluence" not in sec.flags:
            assert not sec.line.intersects(MAIN)
    assert "at_confluence" in geom.sections[-1].flags  # its centre is the junction point itself
    unflagged = cut_sections("trib", TRIB, FlatDem(), spacing=40, width=200)
    assert any(s.line.intersects(MAIN) for s in unflagged.sections[:-1])
    # The reach's own centreline among ``others`` is ignored (all reaches may be passed).
    both = cut_sections("trib", TRIB, FlatDem(), spacing=40, width=200, others={"main": MAIN, "trib": TRIB})
    assert [s.line.wkt for s in both.sections] == [s.line.wkt for s in geom.sections]


# ---- 3. adaptive width ------------------------------------------------------------------------

def test_adaptive_width_on_an_asymmetric_v_valley(tmp_path):
    # Analytic V valley, thalweg on a row of cell centres (y = 200.5) so bilinear sampling is exact:
    # left (north) side rises 0.1 m/m, right side 0.05 m/m. With rise = 1.5 m the ground reaches
    # bed + rise at 15 m (left) and 30 m (right); each end lies within one sample step beyond.
    def z(x, y):
        off = y - 200.5
        return 30.0 - 0.001 * x + np.where(off > 0, 0.1, 0.05) * np.abs(off)

    dem = write_surface(tmp_path, z)
    geom = cut_sections("v", shapely.LineString([(50, 200.5), (350, 200.5)]), dem, spacing=50, width=200,
                        rise=1.5)
    for sec in geom.sections:
        bed = 30.0 - 0.001 * (50 + sec.chainage)
        left, right = np.asarray(sec.line.coords)
        assert left[1] - 200.5 == pytest.approx(15.0, abs=1.0) and 200.5 - right[1] == pytest.approx(30.0, abs=1.0)
        assert 0 <= sec.elevation[0] - (bed + 1.5) <= 0.1 * 1.0 + 1e-9      # one step on the 0.1 slope
        assert 0 <= sec.elevation[-1] - (bed + 1.5) <= 0.05 * 1.0 + 1e-9    # one step on the 0.05 slope
        assert sec.bed_elevation == pytest.approx(bed, abs=1e-9) and "width_capped" not in sec.flags
    capped = cut_sections("v", shapely.LineString([(50, 200.5), (350, 200.5)]), dem, spacing=50, width=40,
                          rise=1.5)
    for sec in capped.sections:  # left reaches 15.5 m < 20 m; right is held at 20 m
        assert "width_capped" in sec.flags and sec.station[-1] == pytest.approx(15.5 + 20.0, abs=1e-6)


@pytest.mark.parametrize("rise, reach_m", [(2.0, 10.0), (5.0, 74.0)])
def test_adaptive_width_on_a_trapezoidal_valley(tmp_path, rise, reach_m):
    # tests/valleys.py geometry: bottom 12 m, banks 1:2 for 4 m, flat floodplain 40 m, then walls 1:20.
    # bed + 2 m lies on the bank at 6 + 2 x 2 = 10 m; bed + 5 m on the wall at 6 + 8 + 40 + 1 / 0.05 = 74 m.
    v = make_valley(tmp_path, length=300.0)
    dem = open_dem(v.dem)
    line = shapely.LineString([(v.x0 + 20, v.yc), (v.x0 + 280, v.yc)])
    geom = cut_sections("t", line, dem, spacing=65, width=190, rise=rise)
    for sec in geom.sections:
        left, right = np.asarray(sec.line.coords)
        assert left[1] - v.yc == pytest.approx(reach_m + 0.5, abs=1.0)
        assert v.yc - right[1] == pytest.approx(reach_m + 0.5, abs=1.0)
        bed = v.bed_at(v.x0 + 20 + sec.chainage)
        assert sec.elevation[[0, -1]] == pytest.approx(bed + rise, abs=0.5 * 1.0 + 1e-3)


# ---- 4. user section lines -----------------------------------------------------------------

PLANE = lambda x, y: 50.0 + 0.01 * x - 0.02 * y  # noqa: E731  bilinear sampling is exact on a plane


def test_user_dog_leg_lines(tmp_path):
    # Reference: shapely project / line_interpolate_point. The straight line at x = 50 is drawn south
    # to north (right to left looking east) and must be reversed; the dog-leg crosses at (120, 100).
    dem = write_surface(tmp_path, PLANE)
    centre = shapely.LineString([(0, 100), (300, 100)])
    dog = shapely.LineString([(100, 160), (110, 120), (130, 80), (130, 40)])
    lines = [shapely.LineString([(250, 30), (250, 170)]), dog, shapely.LineString([(50, 40), (50, 150)])]
    geom = sections_from_lines("u", centre, lines, dem, sample_step=2.0)
    chain = [s.chainage for s in geom.sections]
    assert chain == pytest.approx([centre.project(shapely.Point(50, 100)), centre.project(shapely.Point(120, 100)), 250])
    np.testing.assert_allclose(np.asarray(geom.sections[0].line.coords), [[50, 150], [50, 40]])
    sec = geom.sections[1]
    assert sec.line.equals(dog)
    legs = np.cumsum([0, np.hypot(10, 40), np.hypot(20, 40), 40])
    assert sec.station[-1] == pytest.approx(legs[-1]) and np.all(np.diff(sec.station) <= 2.0 + 1e-9)
    assert np.min(np.abs(sec.station[:, None] - legs[None, 1:3]), axis=0) == pytest.approx([0, 0], abs=1e-9)
    pts = shapely.get_coordinates(shapely.line_interpolate_point(dog, sec.station))
    np.testing.assert_allclose(sec.elevation, PLANE(pts[:, 0], pts[:, 1]), atol=1e-9)
    np.testing.assert_allclose(geom.lengths[:, 1], np.diff(chain))
    left_mid = shapely.get_coordinates(shapely.line_interpolate_point(dog, dog.project(shapely.Point(120, 100)) / 2))
    assert geom.lengths[0, 0] == pytest.approx(np.hypot(*(left_mid[0] - [50, 125])))


@pytest.mark.parametrize("bad, words", [
    (shapely.LineString([(20, 120), (20, 180)]), "does not cross the centreline"),
    (shapely.LineString([(60, 40), (60, 160), (70, 160), (70, 40)]), "crosses the centreline 2 times"),
])
def test_user_line_must_cross_once(tmp_path, bad, words):
    dem = write_surface(tmp_path, PLANE)
    centre = shapely.LineString([(0, 100), (300, 100)])
    good = shapely.LineString([(150, 40), (150, 160)])
    with pytest.raises(GeometryError) as err:
        sections_from_lines("u9", centre, [good, bad], dem, source="xs.gpkg")
    msg = str(err.value)
    assert "xs.gpkg" in msg and "u9" in msg and "section line 1" in msg and words in msg and "\n" not in msg
