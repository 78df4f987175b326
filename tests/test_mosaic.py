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
from geoflow.mapping.mosaic import overlap_patches, write_vrt
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


def test_overlap_patches_of_a_chain_and_a_lone_raster():
    # Hand geometry: A [0, 100] x [0, 50], B [90, 200] x [10, 60], C [190, 300] x [0, 50] form a chain
    # whose overlaps A-B = [90, 100] x [10, 50] and B-C = [190, 200] x [10, 50] are apart; D stands
    # alone and E only touches C along the edge x = 300 (no area in common).
    bounds = [(0, 0, 100, 50), (90, 10, 200, 60), (190, 0, 300, 50), (1000, 0, 1100, 50), (300, 0, 350, 50)]
    assert overlap_patches(bounds) == [((90.0, 10.0, 100.0, 50.0), [0, 1]), ((190.0, 10.0, 200.0, 50.0), [1, 2])]
    # A fourth raster over both overlaps joins them into one patch, their bounding box.
    assert overlap_patches(bounds + [(95, 20, 195, 30)]) == [((90.0, 10.0, 200.0, 50.0), [0, 1, 2, 5])]
    assert overlap_patches(bounds[3:]) == [] and overlap_patches(bounds[:1]) == []


def test_patches_under_a_virtual_raster_give_the_maximum_everywhere(tmp_path):
    # Reference: rasterio.merge.merge(method="max") over the three rasters; the VRT (reach rasters
    # first, patch maxima on top) read back through GDAL must equal it cell for cell.
    rng = np.random.default_rng(3)
    specs = [((60, 80), 0, 0), ((50, 70), 30, 60), ((40, 90), 70, 110)]
    paths = []
    for k, (shape, r, c) in enumerate(specs):
        arr = rng.uniform(10, 20, shape)
        arr[rng.uniform(size=shape) < 0.2] = np.nan
        paths.append(raster(tmp_path / f"r{k}.tif", arr, r, c))
    bounds = []
    for p in paths:
        with rasterio.open(p) as ds:
            bounds.append(tuple(ds.bounds))
    patches = [mosaic_max([paths[k] for k in members], tmp_path / "m" / f"p{n}.tif", block=32, bounds=box)
               for n, (box, members) in enumerate(overlap_patches(bounds))]
    assert len(patches) == 2
    for (box, _), p in zip(overlap_patches(bounds), patches):
        with rasterio.open(p) as ds:
            assert tuple(ds.bounds) == box                  # the patch covers only the overlap
    vrt = write_vrt(paths + patches, tmp_path / "m" / "max.vrt")
    sources = [rasterio.open(p) for p in paths]
    ref, ref_t = merge(sources, method="max", nodata=-9999.0)
    for ds in sources:
        ds.close()
    with rasterio.open(vrt) as ds:
        assert ds.transform == ref_t and ds.crs == CRS_UTM and ds.nodata == -9999.0
        np.testing.assert_array_equal(ds.read(1), ref[0])
