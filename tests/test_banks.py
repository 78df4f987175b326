"""Channel edges by break in slope: hand profiles and analytic trapezoids sampled from GeoTIFF DEMs."""
from __future__ import annotations

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin
from valleys import make_valley

from geoflow.errors import GeometryError
from geoflow.layers import LandCover
from geoflow.roughness import assign_roughness
from geoflow.sections import cut_sections
from geoflow.sections.banks import detect_banks
from geoflow.terrain import open_dem


def test_hand_profile():
    # Hand reading: bed 1 m from station 3 to 5, banks rise 2 m per m to 5 m at stations 1 and 7,
    # flat beyond; the flattening starts at stations 1 (left) and 7 (right).
    z = np.array([5, 5, 3, 1, 1, 1, 3, 5, 5], dtype=float)
    assert detect_banks(np.arange(9.0), z, 4.0) == (1.0, 7.0)
    # A V has no break in slope: the bank falls back to one sample either side of the thalweg.
    assert detect_banks(np.arange(9.0), np.abs(np.arange(9.0) - 4), 4.0) == (3.0, 5.0)
    with pytest.raises(GeometryError, match="NaN"):
        detect_banks(np.arange(3.0), np.array([1.0, np.nan, 1.0]), 1.0)


def test_trapezoid_from_dem_off_grid(tmp_path):
    # tests/valleys.py trapezoid: bottom 12 m, banks 1:2 for 4 m, so the analytic top of bank is
    # 6 + 2 x 4 = 14 m either side of the axis. The centreline is 2.3 m off the axis and the ground
    # is sampled every 0.7 m, so no sample sits on a DEM cell centre; banks within one 1 m cell.
    v = make_valley(tmp_path, length=300.0)
    line = shapely.LineString([(v.x0 + 10, v.yc + 2.3), (v.x0 + 290, v.yc + 2.3)])
    geom = cut_sections("t", line, open_dem(v.dem), spacing=70, width=100, sample_step=0.7)
    for sec in geom.sections:
        y_left = np.asarray(sec.line.coords)[0, 1]           # flow east: station s lies at y_left - s
        lb, rb = detect_banks(sec.station, sec.elevation, 50.0)
        assert y_left - lb == pytest.approx(v.yc + 14.0, abs=1.0)
        assert y_left - rb == pytest.approx(v.yc - 14.0, abs=1.0)


def test_asymmetric_trapezoid_and_roughness_fallback(tmp_path):
    # Analytic channel about y = 150: bed 8 m wide; left bank 1:1 for 2 m (top at 4 + 2 = 6 m),
    # right bank 1:3 for 3 m (top at 4 + 9 = 13 m); floodplains rise 1:100 beyond the tops.
    def z_of(x, y):
        off = y - 150.0
        left = np.clip(off - 4, 0, 2) * 1.0 + np.clip(off - 6, 0, None) * 0.01
        right = np.clip(-off - 4, 0, 9) / 3.0 + np.clip(-off - 13, 0, None) * 0.01
        return 10.0 - 0.001 * x + np.where(off > 0, left, right)

    nx = ny = 300
    x = (np.arange(nx) + 0.5)[None, :]
    y = ny - (np.arange(ny) + 0.5)[:, None]
    with rasterio.open(tmp_path / "dem.tif", "w", driver="GTiff", width=nx, height=ny, count=1, dtype="float64",
                       crs="EPSG:32633", transform=from_origin(0, ny, 1, 1)) as ds:
        ds.write(z_of(x, y) + np.zeros((ny, nx)), 1)
    dem = open_dem(tmp_path / "dem.tif")
    geom = cut_sections("a", shapely.LineString([(20, 151), (280, 151)]), dem, spacing=65, width=80)
    grass = LandCover(np.array([shapely.box(0, 0, 300, 300)], dtype=object), np.array(["grass"]), tmp_path / "lc.gpkg")
    out = assign_roughness(geom, grass, "water", {"grass": 0.035})
    for sec in out.sections:
        y_left = np.asarray(sec.line.coords)[0, 1]
        lb, rb = sec.channel_edges
        assert "no_channel_cover" in sec.flags
        assert y_left - lb == pytest.approx(156.0, abs=1.0) and y_left - rb == pytest.approx(137.0, abs=1.0)
