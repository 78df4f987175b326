"""Vector inputs: reprojection checked against pyproj directly, and one-line error messages."""
from __future__ import annotations

import pickle

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import Transformer
from rasterio.crs import CRS as RioCRS
from shapely.geometry import LineString, MultiLineString, Point

from geoflow.errors import InputDataError
from geoflow.layers import LandCover, read_centrelines, read_landcover
from geoflow.roughness import landcover_classes

UTM = "EPSG:32633"


def write_layer(path, rows, crs=UTM, layer="data", **columns):
    gdf = gpd.GeoDataFrame(columns, geometry=list(rows), crs=crs)
    gdf.to_file(path, layer=layer, driver="GPKG", engine="pyogrio")
    return path


def one_line_error(func, *args, **kwargs) -> str:
    with pytest.raises(InputDataError) as err:
        func(*args, **kwargs)
    msg = str(err.value)
    assert "\n" not in msg
    return msg


def test_centreline_in_wgs84_is_reprojected_like_pyproj(tmp_path):
    # Reference: pyproj Transformer EPSG:4326 -> UTM 33N applied to the same vertices (always_xy).
    lonlat = np.array([[15.00, 52.00], [15.01, 52.005], [15.02, 52.012]])
    path = write_layer(tmp_path / "c.gpkg", [LineString(lonlat)], crs="EPSG:4326", reach_id=["a"])
    reaches = read_centrelines(path, RioCRS.from_epsg(32633), layer="data")
    assert [r[0] for r in reaches] == ["a"]
    ex, ey = Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(lonlat[:, 0], lonlat[:, 1])
    np.testing.assert_allclose(shapely.get_coordinates(reaches[0][1]), np.column_stack((ex, ey)), atol=1e-6)


def test_reach_ids_become_strings_and_multilines_are_merged(tmp_path):
    # Reference: shapely.line_merge joins parts sharing end points; total length is preserved.
    # Parts listed downstream first still give a line starting at the upstream end.
    parts = MultiLineString([[(50, 0), (100, 20)], [(0, 0), (50, 0)]])
    path = write_layer(tmp_path / "c.gpkg", [parts, LineString([(0, 100), (80, 100)])], reach_id=[7, 12])
    reaches = dict(read_centrelines(path, UTM))
    assert set(reaches) == {"7", "12"}
    assert reaches["7"].geom_type == "LineString"
    assert reaches["7"].length == pytest.approx(50 + np.hypot(50, 20))
    np.testing.assert_allclose(reaches["7"].coords[0], (0, 0))


@pytest.mark.parametrize("parts", [
    [[(0, 0), (50, 0)], [(60, 0), (100, 0)]],   # gap between parts
    [[(50, 0), (0, 0)], [(50, 0), (100, 0)]],   # a part drawn against the flow
])
def test_multiline_that_cannot_join_names_the_reach(tmp_path, parts):
    path = write_layer(tmp_path / "c.gpkg", [MultiLineString(parts)], reach_id=["upper"])
    msg = one_line_error(read_centrelines, path, UTM)
    assert "reach upper" in msg and "c.gpkg" in msg


def test_centreline_errors_name_file_layer_and_field(tmp_path):
    line = LineString([(0, 0), (10, 0)])
    path = write_layer(tmp_path / "c.gpkg", [line, line], reach_id=["a", "a"], name=["x", "y"])
    msg = one_line_error(read_centrelines, path, UTM)
    assert "duplicate" in msg and "'reach_id'" in msg and "c.gpkg" in msg and "'data'" in msg
    msg = one_line_error(read_centrelines, path, UTM, id_field="reachid")
    assert "'reachid'" in msg and "fields present: reach_id, name" in msg and "did you mean 'reach_id'" in msg
    msg = one_line_error(read_centrelines, path, UTM, layer="rivers")
    assert "'rivers' not found" in msg and "layers present: data" in msg
    msg = one_line_error(read_centrelines, tmp_path / "none.gpkg", UTM)
    assert "none.gpkg" in msg and "not found" in msg
    bad = tmp_path / "junk.gpkg"
    bad.write_text("not a geopackage")
    assert "junk.gpkg" in one_line_error(read_centrelines, bad, UTM)


def test_geometry_and_crs_errors(tmp_path):
    pts = write_layer(tmp_path / "p.gpkg", [Point(0, 0)], reach_id=["a"])
    assert "Point" in one_line_error(read_centrelines, pts, UTM)
    null = write_layer(tmp_path / "n.gpkg", [LineString([(0, 0), (1, 0)]), None], reach_id=["a", "b"])
    assert "null or empty" in one_line_error(read_centrelines, null, UTM)
    nocrs = write_layer(tmp_path / "x.gpkg", [LineString([(0, 0), (1, 0)])], crs=None, reach_id=["a"])
    assert "no coordinate reference system" in one_line_error(read_centrelines, nocrs, UTM)
    two = write_layer(tmp_path / "two.gpkg", [LineString([(0, 0), (1, 0)])], reach_id=["a"], layer="one")
    write_layer(two, [LineString([(0, 0), (1, 0)])], reach_id=["b"], layer="other")
    msg = one_line_error(read_centrelines, two, UTM)
    assert "one" in msg and "other" in msg
    assert read_centrelines(two, UTM, layer="other")[0][0] == "b"


def test_landcover_read_reprojects_and_lists_classes(tmp_path):
    # Reference: pyproj Transformer for the polygon vertices; class names kept as str.
    ring = np.array([[15.0, 52.0], [15.01, 52.0], [15.01, 52.01], [15.0, 52.01], [15.0, 52.0]])
    polys = [shapely.Polygon(ring), shapely.Polygon(ring + [0.01, 0])]
    path = write_layer(tmp_path / "lc.gpkg", polys, crs="EPSG:4326", cover=["wood", "grass"])
    cover = read_landcover(path, UTM, "cover")
    assert isinstance(cover, LandCover) and list(cover.classes) == ["wood", "grass"]
    assert landcover_classes(cover) == ["grass", "wood"]
    ex, ey = Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(ring[:, 0], ring[:, 1])
    np.testing.assert_allclose(shapely.get_coordinates(cover.geometries[0]), np.column_stack((ex, ey)), atol=1e-6)
    # The spatial index is rebuilt after pickling (Dask workers), giving the same answer.
    probe = shapely.points([[ex.mean(), ey.mean()]])
    again = pickle.loads(pickle.dumps(cover))
    np.testing.assert_array_equal(cover.tree.query(probe, predicate="intersects"),
                                  again.tree.query(probe, predicate="intersects"))


def test_landcover_bbox_and_errors(tmp_path):
    boxes = [shapely.box(0, 0, 10, 10), shapely.box(100, 0, 110, 10)]
    path = write_layer(tmp_path / "lc.gpkg", boxes, cover=["a", "b"])
    assert list(read_landcover(path, UTM, "cover", bbox=(-5, -5, 20, 20)).classes) == ["a"]
    msg = one_line_error(read_landcover, path, UTM, "landuse")
    assert "'landuse'" in msg and "fields present: cover" in msg and "lc.gpkg" in msg
    lines = write_layer(tmp_path / "l.gpkg", [LineString([(0, 0), (1, 1)])], cover=["a"])
    assert "polygon layer is needed" in one_line_error(read_landcover, lines, UTM, "cover")
    empty = write_layer(tmp_path / "e.gpkg", boxes, cover=["a", None])
    assert "'cover' is empty" in one_line_error(read_landcover, empty, UTM, "cover")


def test_numeric_class_codes_become_text(tmp_path):
    # Common practice, no source: land-cover layers often store integer class codes.
    path = write_layer(tmp_path / "codes.gpkg", [shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2, 1)], code=[3, 41])
    assert list(read_landcover(path, UTM, "code").classes) == ["3", "41"]


def test_section_lines_grouped_by_reach_and_reprojected(tmp_path):
    # Reference: pyproj Transformer EPSG:4326 -> UTM 33N on the same vertices (always_xy); a
    # MultiLineString whose parts join end to end becomes one line; file order is kept per reach.
    from geoflow.layers import read_section_lines

    a1 = LineString([(15.000, 52.000), (15.001, 52.001)])
    a2 = MultiLineString([[(15.010, 52.000), (15.011, 52.001)], [(15.011, 52.001), (15.012, 52.001)]])
    b1 = LineString([(15.020, 52.000), (15.020, 52.002)])
    path = write_layer(tmp_path / "xs.gpkg", [a1, b1, a2], crs="EPSG:4326", reach_id=["a", "b", "a"])
    out = read_section_lines(path, RioCRS.from_epsg(32633))
    assert sorted(out) == ["a", "b"] and len(out["a"]) == 2 and len(out["b"]) == 1
    to_utm = Transformer.from_crs("EPSG:4326", UTM, always_xy=True)
    np.testing.assert_allclose(np.asarray(out["a"][0].coords), np.column_stack(to_utm.transform(*np.asarray(a1.coords).T)),
                               atol=1e-6)
    assert out["a"][1].geom_type == "LineString" and len(out["a"][1].coords) == 3
    bad = write_layer(tmp_path / "bad.gpkg", [a1, b1], reach_id=["a", ""])
    msg = one_line_error(read_section_lines, bad, UTM)
    assert "bad.gpkg" in msg and "feature 1" in msg and "reach_id" in msg
    split = write_layer(tmp_path / "split.gpkg", [MultiLineString([[(0, 0), (1, 1)], [(5, 5), (6, 6)]])], reach_id=["a"])
    assert "feature 0" in one_line_error(read_section_lines, split, UTM)
