"""Tests for geoflow.mapping.mosaic_max; reference: numpy.fmax on the union grid, and
rasterio.merge.merge(method="max") as a second reference library; files read with rasterio."""
from __future__ import annotations

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS
from rasterio.merge import merge

from geoflow.errors import InputDataError
from geoflow.mapping import mosaic_max
from geoflow.outputs import write_raster

CRS_UTM = CRS.from_epsg(32633)
X0, Y0 = 500000.0, 4000000.0     # top-left of the union grid
CELL = 2.0


def raster(path, arr, row_off, col_off, crs=CRS_UTM, cell=CELL, shift=0.0):
    t = Affine(cell, 0.0, X0 + col_off * CELL + shift, 0.0, -cell, Y0 - row_off * CELL)
    return write_raster(path, arr, t, crs)


@pytest.fixture
def two(tmp_path):
    rng = np.random.default_rng(7)
    a = rng.uniform(10, 20, (70, 90))
    b = rng.uniform(10, 20, (60, 80))
    a[:10, :] = np.nan            # dry strips in both
    b[:, -15:] = np.nan
    pa = raster(tmp_path / "a.tif", a, 0, 0)
    pb = raster(tmp_path / "b.tif", b, 40, 50)        # overlaps a over rows 40..69, cols 50..89
    return a, b, pa, pb


def test_max_matches_numpy_fmax(two, tmp_path):
    a, b, pa, pb = two
    out = mosaic_max([pa, pb], tmp_path / "m" / "max.tif", block=32)
    # Reference: both inputs placed on the union grid (100 x 130 cells), numpy.fmax.
    ga = np.full((100, 130), np.nan, dtype=np.float32)
    gb = ga.copy()
    ga[0:70, 0:90] = a
    gb[40:100, 50:130] = b
    expected = np.fmax(ga, gb)
    with rasterio.open(out) as ds:
        got = ds.read(1, masked=True).filled(np.nan)
        assert ds.transform == Affine(CELL, 0.0, X0, 0.0, -CELL, Y0) and ds.crs == CRS_UTM
        assert ds.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG" and ds.nodata == -9999.0
    np.testing.assert_array_equal(got, expected)
    assert got[50, 60] == np.float32(max(a[50, 60], b[10, 10]))        # one overlap cell by hand
    assert not any(".tmp-" in p.name for p in (tmp_path / "m").iterdir())


def test_max_matches_rasterio_merge(two, tmp_path):
    _, _, pa, pb = two
    out = mosaic_max([pa, pb], tmp_path / "max.tif", block=64)
    with rasterio.open(pa) as da, rasterio.open(pb) as db:
        ref, ref_t = merge([da, db], method="max", nodata=-9999.0)   # reference library
    with rasterio.open(out) as ds:
        assert ds.transform == ref_t
        np.testing.assert_array_equal(ds.read(1), ref[0])


def test_off_grid_inputs_are_refused(two, tmp_path):
    a, _, pa, _ = two
    shifted = raster(tmp_path / "s.tif", a, 3, 3, shift=0.5)
    with pytest.raises(InputDataError, match="s.tif.*fraction of a cell"):
        mosaic_max([pa, shifted], tmp_path / "x.tif")
    other = raster(tmp_path / "c.tif", a, 0, 0, crs=CRS.from_epsg(32632))
    with pytest.raises(InputDataError, match="c.tif.*CRS"):
        mosaic_max([pa, other], tmp_path / "x.tif")
    coarse = raster(tmp_path / "k.tif", a, 0, 0, cell=4.0)
    with pytest.raises(InputDataError, match="k.tif.*cell size"):
        mosaic_max([pa, coarse], tmp_path / "x.tif")
    assert not (tmp_path / "x.tif").exists()
