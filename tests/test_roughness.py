"""Manning's n overlay and reference n: checks against hand geometry and published values."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import shapely

from geoflow.errors import RoughnessError
from geoflow.layers import LandCover
from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN
from geoflow.roughness import assign_roughness, landcover_classes
from geoflow.roughness.tables import CHOW_1959, cowan_n, reference_entry
from geoflow.sections import cut_sections

N_TABLE = {"grass": 0.035, "water": 0.030, "forest": 0.100}
SRC = Path("cover.gpkg")


class SurfaceDem:
    """Duck-typed DEM: an analytic surface z(x, y) (sections only call sample/cell_size/bounds)."""

    cell_size, bounds = 1.0, (-500.0, -500.0, 1000.0, 1000.0)

    def __init__(self, z=lambda x, y: np.zeros(np.shape(x))):
        self.z = z

    def sample(self, x, y):
        return self.z(np.asarray(x, float), np.asarray(y, float))


def cover(*pairs) -> LandCover:
    return LandCover(np.array([g for g, _ in pairs], dtype=object), np.array([c for _, c in pairs], dtype=str), SRC)


def straight_reach(dem=None):
    # Flow due east along y = 0: station s lies at y = 50 - s (left end north).
    return cut_sections("r1", shapely.LineString([(0, 0), (200, 0)]), dem or SurfaceDem(), spacing=50, width=100, sample_step=1)


def bands(pond=True):
    grass = shapely.box(-10, 10, 210, 60)
    pairs = [(shapely.difference(grass, shapely.box(-10, 30, 210, 35)) if pond else grass, "grass"),
             (shapely.box(-10, -10, 210, 10), "water"), (shapely.box(-10, -60, 210, -10), "forest")]
    if pond:
        pairs.append((shapely.box(-10, 30, 210, 35), "water"))
    return pairs


def test_three_bands_give_n_and_parts_by_hand_geometry():
    # Hand geometry: segment mid-point y = 50 - s_mid decides the band; the channel is the water
    # band through the centreline, the pond (water, 30 < y < 35) stays left floodplain.
    geom = straight_reach()
    out = assign_roughness(geom, cover(*bands()), "water", N_TABLE)
    for sec in out.sections:
        y = 50 - 0.5 * (sec.station[:-1] + sec.station[1:])
        water = (np.abs(y) < 10) | ((y > 30) & (y < 35))
        expected_cls = np.where(water, "water", np.where(y > 0, "grass", "forest"))
        np.testing.assert_array_equal(sec.landcover, expected_cls)
        np.testing.assert_allclose(sec.n, [N_TABLE[c] for c in expected_cls])
        expected_part = np.where(np.abs(y) < 10, CHANNEL, np.where(y > 0, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN))
        np.testing.assert_array_equal(sec.part, expected_part)
        assert sec.part.dtype == np.int8 and sec.channel_edges == (40.0, 60.0)
    assert geom.sections[0].n is None  # input records untouched (frozen, replaced)
    # Straight parallel sections: every path between them is the 50 m spacing (hand geometry).
    np.testing.assert_allclose(out.lengths, 50.0)


def test_overlapping_polygons_take_the_first_and_warn():
    pairs = bands(pond=False) + [(shapely.box(-10, 20, 210, 60), "forest")]  # overlaps the grass band
    out = assign_roughness(straight_reach(), cover(*pairs), "water", N_TABLE)
    assert set(out.sections[0].landcover[:30]) == {"grass"}
    assert any("overlapping" in w and "cover.gpkg" in w for w in out.warnings)


def test_gap_without_and_with_default_n():
    pairs = bands(pond=False)[:2]  # no forest: stations 60..100 (y < -10) lie in a gap
    with pytest.raises(RoughnessError) as err:
        assign_roughness(straight_reach(), cover(*pairs), "water", N_TABLE)
    msg = str(err.value)
    assert "\n" not in msg
    # First gap: section 0 at chainage 0, segment 60-61 m, mid-point (0, -10.5) (hand geometry).
    assert "reach r1" in msg and "section 0" in msg and "chainage 0.0" in msg and "x=0.0, y=-10.5" in msg
    assert "default_n" in msg and "cover.gpkg" in msg
    out = assign_roughness(straight_reach(), cover(*pairs), "water", N_TABLE, default_n=0.06)
    sec = out.sections[2]
    np.testing.assert_allclose(sec.n[60:], 0.06)
    assert set(sec.landcover[60:]) == {""} and "landcover_gap" in sec.flags
    np.testing.assert_array_equal(sec.part[60:], RIGHT_FLOODPLAIN)


def test_class_missing_from_table_is_named():
    table = {"grass": 0.035, "water": 0.030}
    with pytest.raises(RoughnessError) as err:
        assign_roughness(straight_reach(), cover(*bands()), "water", table)
    msg = str(err.value)
    assert "\n" not in msg and "forest" in msg and "cover.gpkg" in msg and "[roughness.classes.<name>]" in msg
    out = assign_roughness(straight_reach(), cover(*bands()), "water", table, default_n=0.08)
    np.testing.assert_allclose(out.sections[0].n[60:], 0.08)
    assert any("forest" in w for w in out.warnings)
    assert landcover_classes(cover(*bands())) == ["forest", "grass", "water"]


def test_no_channel_cover_takes_lowest_point():
    # V-shaped valley z = |y - 7|: the lowest ground is at y = 7, i.e. station 43 (hand geometry);
    # the channel is that point +- one sample step, stations 42 to 44.
    geom = straight_reach(SurfaceDem(lambda x, y: np.abs(y - 7.0)))
    out = assign_roughness(geom, cover((shapely.box(-10, -60, 210, 60), "grass")), "water", N_TABLE)
    for sec in out.sections:
        assert "no_channel_cover" in sec.flags and sec.channel_edges == (42.0, 44.0)
    assert len([w for w in out.warnings if "no 'water' cover" in w]) == len(out.sections)


def arc_centreline(r: float) -> shapely.LineString:
    """Counter-clockwise arc of radius ``r`` about the origin, 1 radian long (analytic bend)."""
    th = np.linspace(0.0, 1.0, 3000)
    return shapely.LineString(np.column_stack((r * np.cos(th), r * np.sin(th))))


def annulus(r0: float, r1: float) -> shapely.Polygon:
    """Annular sector between radii ``r0`` and ``r1`` covering the arc of :func:`arc_centreline`."""
    t = np.linspace(-0.2, 1.2, 800)
    return shapely.Polygon(np.vstack((np.column_stack((r0 * np.cos(t), r0 * np.sin(t))),
                                      np.column_stack((r1 * np.cos(t[::-1]), r1 * np.sin(t[::-1]))))))


def test_floodplain_lengths_on_a_bend_follow_the_arc():
    # Analytic geometry: counter-clockwise arc of radius R, sections radial, so the left (inner)
    # floodplain mid-point lies on radius R - 30 and consecutive ones are a chord
    # 2 (R - 30) sin(dtheta / 2) apart, dtheta = spacing / R; right (outer) on R + 30.
    r, spacing = 300.0, 50.0
    line = arc_centreline(r)

    geom = cut_sections("bend", line, SurfaceDem(), spacing=spacing, width=100, sample_step=1)
    lc = cover((annulus(r - 60, r - 10), "grass"), (annulus(r - 10, r + 10), "water"), (annulus(r + 10, r + 60), "forest"))
    out = assign_roughness(geom, lc, "water", N_TABLE)
    dth = np.diff([s.chainage for s in out.sections]) / r
    # End sections use a shorter one-sided direction window (about 0.5 deg off radial here): 1 %.
    for col, radius in ((0, r - 30), (2, r + 30)):
        chord = 2 * radius * np.sin(dth / 2)
        np.testing.assert_allclose(out.lengths[1:-1, col], chord[1:-1], rtol=2e-3)
        np.testing.assert_allclose(out.lengths[:, col], chord, rtol=1e-2)
    np.testing.assert_allclose(out.lengths[:, 1], r * dth, rtol=1e-9)
    assert all(s.channel_edges == pytest.approx((40.0, 60.0), abs=1.0) for s in out.sections)


def test_bad_n_value_names_the_class():
    with pytest.raises(RoughnessError, match=r"\[roughness.classes.forest\] n = -0.1 must be positive"):
        assign_roughness(straight_reach(), cover(*bands()), "water", {**N_TABLE, "forest": -0.1})


@pytest.mark.parametrize("parts, documented, computed", [
    # Cowan (1956) point values and the documented examples of a public roughness calculator that
    # implements Cowan's table (Arcement & Schneider 1989, Tables 1-2): (n_b, n1, n2, n3, n4, m).
    ((0.020, 0.000, 0.000, 0.000, 0.0075, 1.00), 0.028, 0.0275),    # earth/smooth/gradual/negligible/low/minor
    ((0.025, 0.005, 0.005, 0.0125, 0.0175, 1.15), 0.075, 0.0748),   # rock cut/minor/occasional/minor/medium/appreciable
    ((0.024, 0.010, 0.0125, 0.025, 0.0375, 1.30), 0.142, 0.1417),   # fine gravel/moderate/frequent/appreciable/high/severe
])
def test_cowan_composite_n(parts, documented, computed):
    n = cowan_n(*parts)
    assert n == pytest.approx(computed, abs=6e-5)  # the sums, to 4 places
    assert n == pytest.approx(documented, abs=6e-4)  # the documented values are rounded to 3 places
    np.testing.assert_allclose(cowan_n(np.array([parts[0]] * 2), *parts[1:]), [n, n])
    with pytest.raises(RoughnessError, match="meander factor m"):
        cowan_n(*parts[:5], m=0.9)


def test_chow_table_rows():
    # Chow (1959) Table 5-6, flood-plain rows.
    row = reference_entry("Pasture_Short_Grass")
    assert (row.minimum, row.normal, row.maximum) == (0.025, 0.030, 0.035) and "Chow (1959)" in row.source
    assert reference_entry("dense_brush_summer").normal == 0.100
    assert all(r.minimum <= r.normal <= r.maximum for r in CHOW_1959)
    with pytest.raises(RoughnessError, match="known cover types"):
        reference_entry("asphalt")


def test_files_to_roughness_end_to_end(tmp_path):
    # The three-band case again, now through a GeoTIFF DEM (rasterio) and a GeoPackage (geopandas):
    # hand geometry gives the banks at stations 40 and 60 and z = 5 + 0.01 x on the DEM plane.
    import geopandas as gpd
    import rasterio
    from rasterio.transform import from_origin

    from geoflow.layers import read_centrelines, read_landcover
    from geoflow.terrain import open_dem

    x = np.arange(-50, 250) + 0.5
    z = np.tile(5.0 + 0.01 * x, (160, 1))
    with rasterio.open(tmp_path / "dem.tif", "w", driver="GTiff", width=300, height=160, count=1, dtype="float64",
                       crs="EPSG:32633", transform=from_origin(-50, 80, 1, 1)) as ds:
        ds.write(z, 1)
    dem = open_dem(tmp_path / "dem.tif")
    gpd.GeoDataFrame({"rid": [5]}, geometry=[shapely.LineString([(0, 0), (200, 0)])], crs="EPSG:32633").to_file(
        tmp_path / "c.gpkg", engine="pyogrio")
    pairs = bands(pond=False)
    gpd.GeoDataFrame({"lc": [c for _, c in pairs]}, geometry=[g for g, _ in pairs], crs="EPSG:32633").to_file(
        tmp_path / "lc.gpkg", engine="pyogrio")
    (rid, line), = read_centrelines(tmp_path / "c.gpkg", dem.crs, id_field="rid")
    geom = cut_sections(rid, line, dem, spacing=50, width=100)
    out = assign_roughness(geom, read_landcover(tmp_path / "lc.gpkg", dem.crs, "lc"), "water", N_TABLE)
    assert out.reach_id == "5" and len(out.sections) == 5
    for sec in out.sections:
        assert sec.channel_edges == (40.0, 60.0)
        np.testing.assert_allclose(sec.elevation, 5.0 + 0.01 * sec.chainage, atol=1e-9)


def test_composite_n_by_part_hand_arithmetic():
    # Horton/Einstein composite n_c = [sum(P_i n_i^1.5) / P]^(2/3) (Chow 1959, ch. 6), by hand:
    # left: P = 1, 1 with n = 0.04, 0.09 -> (0.008 + 0.027) / 2 = 0.0175; channel: a 1 x 0.75 m
    # slope (P = 1.25, n = 0.04) and a flat 1 m (n = 0.09) -> (0.010 + 0.027) / 2.25; no right floodplain.
    import dataclasses

    from geoflow.records import Section
    from geoflow.roughness import composite_n_by_part

    sec = Section("r", 0, 0.0, shapely.LineString([(0, 0), (4, 0)]), np.arange(5.0),
                  np.array([2.0, 2.0, 2.0, 1.25, 1.25]))
    sec = dataclasses.replace(sec, n=np.array([0.04, 0.09, 0.04, 0.09]),
                              part=np.array([LEFT_FLOODPLAIN, LEFT_FLOODPLAIN, CHANNEL, CHANNEL], dtype=np.int8))
    n_left, n_ch, n_right = composite_n_by_part(sec)
    assert n_left == pytest.approx(0.0175 ** (2 / 3), rel=1e-12)
    assert n_ch == pytest.approx((0.037 / 2.25) ** (2 / 3), rel=1e-12)
    assert np.isnan(n_right)
    with pytest.raises(RoughnessError, match="assign_roughness"):
        composite_n_by_part(dataclasses.replace(sec, n=None))


def test_read_class_table(tmp_path):
    from geoflow.errors import InputDataError
    from geoflow.roughness import read_class_table

    good = tmp_path / "n.csv"
    good.write_text("\ufeffClass, n ,n_low,n_high\nwater,0.030,0.025,0.033\ngrass, 0.035 ,,\n\nforest,0.1,0.08,0.12\n")
    assert read_class_table(good) == {"water": {"n": 0.03, "n_low": 0.025, "n_high": 0.033},
                                      "grass": {"n": 0.035}, "forest": {"n": 0.1, "n_low": 0.08, "n_high": 0.12}}
    cases = [
        ("class,n\nwater,0.03\ngrass,1.5\n", "row 3 (class 'grass'): n = 1.5 is outside 0.005-1"),
        ("class,n\nwater,abc\n", "row 2 (class 'water'): n = 'abc' is not a number"),
        ("class,n\nwater,0.03\nwater,0.04\n", "row 3: class 'water' is listed twice"),
        ("class,n,n_low\nwater,0.03,0.04\n", "row 2 (class 'water'): need n_low <= n <= n_high"),
        ("class,n,n_hi\nwater,0.03,0.04\n", "unknown column 'n_hi' (did you mean 'n_high'?)"),
        ("class,manning\nwater,0.03\n", "column 'n' not found"),
        ("class,n\n,0.03\n", "row 2 has no class name"),
        ("class,n\n", "no rows"),
    ]
    for k, (text, words) in enumerate(cases):
        path = tmp_path / f"bad{k}.csv"
        path.write_text(text)
        with pytest.raises(InputDataError) as err:
            read_class_table(path)
        assert words in str(err.value) and str(path) in str(err.value) and "\n" not in str(err.value)
    with pytest.raises(InputDataError, match="cannot read"):
        read_class_table(tmp_path / "missing.csv")


def test_reference_entry_suggests_the_closest_key():
    from geoflow.roughness.tables import reference_entry

    assert reference_entry(" Dense_Willows ").normal == 0.150  # Chow (1959) Table 5-6
    with pytest.raises(RoughnessError) as err:
        reference_entry("pasture_short_gras")
    msg = str(err.value)
    assert "did you mean 'pasture_short_grass'?" in msg and "concrete_float" in msg and "\n" not in msg


def test_segments_of_a_dog_leg_section_take_the_cover_under_them():
    # A dog-legged user section runs 20 m north-south, then 20 m east-west: its segment mid-points
    # follow the polyline (shapely line_interpolate_point), so the east-west leg lies in the forest box.
    from geoflow.sections import sections_from_lines

    dem = SurfaceDem()
    centre = shapely.LineString([(0, 0), (200, 0)])
    lines = [shapely.LineString([(50, 10), (50, -10), (70, -10)]), shapely.LineString([(150, 10), (150, -10)])]
    geom = sections_from_lines("d", centre, lines, dem, sample_step=1.0)
    lc = cover((shapely.box(-10, -9, 210, 20), "water"), (shapely.box(-10, -20, 210, -9), "forest"))
    out = assign_roughness(geom, lc, "water", N_TABLE)
    sec = out.sections[0]
    np.testing.assert_array_equal(sec.landcover, ["water"] * 19 + ["forest"] * 21)
    assert sec.channel_edges == (0.0, 19.0)


def test_floodplain_paths_through_weighted_centroids_on_a_bend():
    # Analytic geometry: ground z = 0.1 |r - R| on a bend of radius R, radial sections 100 m wide,
    # channel cover R - 10 < r < R + 10. The inner floodplain strip runs r = R - 50 .. R - 10 with
    # weight (z_max - z) = 0.1 (r - (R - 50)), linear in r, so its centroid lies two thirds of the
    # way to the bank, at r = R - 50 + 40 x 2/3; the outer one mirrors it at R + 50 - 40 x 2/3.
    # Path length between sections dtheta apart: chord 2 r sin(dtheta / 2). Unweighted: r = R -+ 30.
    from geoflow.sections import floodplain_lengths

    r, spacing = 300.0, 50.0
    line = arc_centreline(r)

    dem = SurfaceDem(lambda x, y: 0.1 * np.abs(np.hypot(x, y) - r))
    geom = cut_sections("bend", line, dem, spacing=spacing, width=100, sample_step=0.5)
    lc = cover((annulus(r - 60, r - 10), "grass"), (annulus(r - 10, r + 10), "water"), (annulus(r + 10, r + 60), "forest"))
    out = assign_roughness(geom, lc, "water", N_TABLE)
    dth = np.diff([s.chainage for s in out.sections]) / r
    for col, radius in ((0, r - 50 + 40 * 2 / 3), (2, r + 50 - 40 * 2 / 3)):
        np.testing.assert_allclose(out.lengths[1:-1, col], (2 * radius * np.sin(dth / 2))[1:-1], rtol=2e-3)
    flat = floodplain_lengths(out, weighted=False)
    np.testing.assert_allclose(flat[1:-1, 0], (2 * (r - 30) * np.sin(dth / 2))[1:-1], rtol=2e-3)
