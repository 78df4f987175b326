"""Block-wise mapping (geoflow.mapping.write_reach_maps / geoflow.mapping.blocks) on an analytic DEM.

DEM (1 m cells, 192 rows x 256 cols, row/column indices from the top-left corner), built
so the wet set is known by construction (no labelling code involved in the reference):
  * floodplain at 3 m;
  * main channel along row 160: ground = clip((|r + 0.5 - 160| - 5) / 2, 0, 3), the
    centreline runs along it;
  * a side arm (bed 1 m) that leaves the channel up column band 40..45, runs along rows
    20..25 to column band 186..191 and comes back down to row 127: it leaves and re-enters
    blocks and rows of blocks, connected to the channel only far away;
  * pond P3 (bed 1 m, rows 128..139, cols 192..209) touching the arm only diagonally,
    cell (127, 191) to cell (128, 192): a block corner for blocks of 32, 64 and 128;
  * a branch of the arm down column band 160..165 to row 127 and pond P4 (bed 1 m, rows
    128..139, cols 140..159) touching it only anti-diagonally, (127, 160) to (128, 159): a
    block corner for blocks of 16 and 32;
  * pond P1 (bed 0.5 m, rows 50..89, cols 80..129) behind 3 m ground, split across block
    edges: it must stay dry (no bathtub ponds).
Sections at x = 0, 128, 256 m span the whole DEM, so the reach window is the whole DEM.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.crs import CRS
from rasterio.enums import Compression
from scipy import ndimage
from shapely.geometry import LineString

from geoflow.errors import ConfigError, GeometryError
from geoflow.mapping import join as mapjoin
from geoflow.mapping import map_reach, write_reach_maps
from geoflow.records import ReachGeometry, Section
from geoflow.terrain import Dem, open_dem

X0, Y0 = 600000.0, 5000000.0
H, W = 192, 256
CRS_UTM = CRS.from_epsg(32632)
XS = [0.0, 128.0, 256.0]
LEVELS = [2.2, 2.0, 1.9]


def ground_rc() -> np.ndarray:
    """The analytic DEM as a (H, W) array (row 0 at the top)."""
    r = np.arange(H)[:, None] + 0.5
    z = np.clip((np.abs(r - 160.0) - 5.0) / 2.0, 0.0, 3.0) * np.ones((1, W))
    z[20:153, 40:46] = 1.0          # arm: down to the channel
    z[20:26, 40:192] = 1.0          # arm: across
    z[20:128, 186:192] = 1.0        # arm: back down to row 127
    z[128:140, 192:210] = 1.0       # P3, diagonal to (127, 191)
    z[26:128, 160:166] = 1.0        # arm branch down to row 127 at column 160
    z[128:140, 140:160] = 1.0       # P4, anti-diagonal to (127, 160)
    z[50:90, 80:130] = 0.5          # P1, cut off
    return z


def expected_depth() -> np.ndarray:
    """Analytic depth: WSE linear in x (parallel sections) minus ground on the connected set."""
    z = ground_rc()
    x = np.arange(W) + 0.5
    wse = np.broadcast_to(np.interp(x, XS, LEVELS), (H, W))
    connected = np.zeros((H, W), dtype=bool)
    connected[140:180] = True                       # channel rows (dry sides fall out below)
    connected[20:153, 40:46] = connected[20:26, 40:192] = connected[20:128, 186:192] = True
    connected[128:140, 192:210] = connected[26:128, 160:166] = connected[128:140, 140:160] = True
    depth = np.where(connected & (wse > z), wse - z, np.nan)
    return depth


@pytest.fixture(scope="module")
def dem(tmp_path_factory):
    path = tmp_path_factory.mktemp("bdem") / "dem.tif"
    with rasterio.open(path, "w", driver="GTiff", width=W, height=H, count=1, dtype="float32", crs=CRS_UTM,
                       transform=Affine(1.0, 0.0, X0, 0.0, -1.0, Y0 + H), nodata=-9999.0) as ds:
        ds.write(ground_rc().astype(np.float32), 1)
    return open_dem(path)


def make_geom(xs=XS) -> ReachGeometry:
    lines = [LineString([(X0 + x, Y0 + H + 5), (X0 + x, Y0 - 5)]) for x in xs]
    secs = tuple(Section(reach_id="rb", section_id=i, chainage=float(x - xs[0]), line=ln,
                         station=np.array([0.0, ln.length]), elevation=np.array([3.0, 3.0]))
                 for i, (x, ln) in enumerate(zip(xs, lines)))
    centre = LineString([(X0 + 1, Y0 + H - 160), (X0 + W - 1, Y0 + H - 160)])
    return ReachGeometry(reach_id="rb", centreline=centre, sections=secs, lengths=np.zeros((len(xs) - 1, 3)))


def read(path):
    with rasterio.open(path) as ds:
        return ds.read(1, masked=True).filled(np.nan), ds


@pytest.fixture(scope="module")
def whole(dem):
    return map_reach(dem, make_geom(), np.array(LEVELS))


def test_in_memory_matches_analytic_construction(whole):
    exp = expected_depth()
    assert whole.depth.shape == (H, W)
    np.testing.assert_array_equal(np.isnan(whole.depth), np.isnan(exp))      # same wet set
    np.testing.assert_allclose(whole.depth, exp, atol=1e-5, equal_nan=True)
    assert np.all(np.isnan(whole.depth[50:90, 80:130]))                       # P1 dry
    assert np.all(np.isfinite(whole.depth[128:140, 192:210]))                 # P3 wet via the corner
    assert np.all(np.isfinite(whole.depth[128:140, 140:160]))                 # P4 wet via the corner
    assert whole.wet_area_m2 == pytest.approx(np.isfinite(exp).sum())


@pytest.mark.parametrize("block", [16, 23, 32, 64, 100])
def test_blocks_in_memory_equal_one_block(dem, whole, block):
    m = map_reach(dem, make_geom(), np.array(LEVELS), block=block)
    np.testing.assert_array_equal(m.depth, whole.depth)      # cell for cell, NaN included
    np.testing.assert_array_equal(m.wse, whole.wse)
    assert m.wet_area_m2 == whole.wet_area_m2 and m.max_depth == whole.max_depth
    # Outline: union across block edges gives the same region as one polygonisation
    # (shapely as reference; simplification may move vertices by < half a cell).
    a, b = shapely.union_all(m.extent), shapely.union_all(whole.extent)
    assert a.symmetric_difference(b).area < 0.01 * b.area
    assert all(p.is_valid and p.geom_type == "Polygon" for p in m.extent)


@pytest.mark.parametrize("small_pocket", [0, 4096])      # cut-off pond cleared by recompute / by its cells
@pytest.mark.parametrize("block", [32, 37, 64])
def test_written_rasters_equal_in_memory(dem, whole, tmp_path, monkeypatch, block, small_pocket):
    monkeypatch.setattr(mapjoin, "SMALL_POCKET", small_pocket)
    paths = {"wse": tmp_path / "o" / "wse.tif", "depth": tmp_path / "o" / "depth.tif"}
    s = write_reach_maps(dem, make_geom(), np.array(LEVELS), paths, block=block)
    depth, _ = read(paths["depth"])
    wse, _ = read(paths["wse"])
    np.testing.assert_array_equal(depth, whole.depth)
    np.testing.assert_array_equal(wse, whole.wse)
    assert s.shape == (H, W) and s.transform == whole.transform and s.crs == dem.crs
    assert s.wet_area_m2 == whole.wet_area_m2 and s.max_depth == whole.max_depth
    assert s.paths == paths
    assert not any(".tmp-" in p.name for p in (tmp_path / "o").iterdir())


def test_cog_readback(dem, tmp_path):
    path = tmp_path / "depth.tif"
    write_reach_maps(dem, make_geom(), np.array(LEVELS), {"depth": path}, block=64)
    # Reference reader: rasterio / GDAL metadata of the file.
    with rasterio.open(path) as ds:
        assert ds.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"
        assert ds.dtypes == ("float32",) and ds.nodata == -9999.0
        assert ds.crs == CRS_UTM and ds.transform == Affine(1.0, 0.0, X0, 0.0, -1.0, Y0 + H)
        # 256 x 256 blocks on a 192-row raster can only be tiles (rasterio's "tiled" flag
        # reads False when the tile width equals the raster width, so check the block shape).
        assert ds.block_shapes == [(256, 256)]
        assert ds.compression == Compression.deflate
        assert len(ds.overviews(1)) >= 1
        assert ds.read(1)[50, 100] == -9999.0            # dry pond cell is nodata


def test_coarse_grid_blocks_equal_in_memory(dem, tmp_path):
    ref = map_reach(dem, make_geom(), np.array(LEVELS), cell_size=2.0)
    s = write_reach_maps(dem, make_geom(), np.array(LEVELS), {"depth": tmp_path / "d.tif"}, cell_size=2.0, block=16)
    depth, ds = read(tmp_path / "d.tif")
    assert ds.transform == ref.transform and s.shape == ref.depth.shape
    np.testing.assert_array_equal(depth, ref.depth)


class CountingDem:
    """A Dem wrapper that records every window read (and can fail on the k-th read)."""

    def __init__(self, dem, fail_at=None):
        self._dem, self.windows, self.fail_at = dem, [], fail_at

    def __getattr__(self, name):
        return getattr(self._dem, name)

    def read(self, window=None):
        self.windows.append(window)
        if self.fail_at is not None and len(self.windows) >= self.fail_at:
            raise OSError("simulated read failure")
        return self._dem.read(window)


def test_dem_read_per_block_only(dem, tmp_path):
    spy = CountingDem(dem)
    # Sections only over x 0..100 m: blocks of 32 columns beyond x = 110 are never read.
    write_reach_maps(spy, make_geom([0.0, 100.0]), np.array([2.0, 2.0]), {"depth": tmp_path / "d.tif"}, block=32)
    assert spy.windows and all(w is not None and w.width <= 32 and w.height <= 32 for w in spy.windows)
    assert max(w.col_off + w.width for w in spy.windows) <= 128


def test_failed_write_leaves_nothing(dem, tmp_path):
    out = tmp_path / "f"
    with pytest.raises(OSError, match="simulated"):
        write_reach_maps(CountingDem(dem, fail_at=5), make_geom(), np.array(LEVELS), {"depth": out / "d.tif"},
                         block=32)
    assert list(out.iterdir()) == []


def test_bad_arguments(dem, tmp_path):
    with pytest.raises(ConfigError, match="did you mean 'depth'"):
        write_reach_maps(dem, make_geom(), np.array(LEVELS), {"depht": tmp_path / "d.tif"})
    with pytest.raises(ConfigError, match="velocity"):
        write_reach_maps(dem, make_geom(), np.array(LEVELS), {"velocity": tmp_path / "v.tif"})
    with pytest.raises(GeometryError, match="rb"):
        write_reach_maps(dem, make_geom(), np.array([2.0, 2.0]), {"depth": tmp_path / "d.tif"})


@dataclass(frozen=True)
class ArrayDem(Dem):
    """A Dem whose cells come from an in-memory array (read by window like the file one)."""

    z: np.ndarray = None

    def read(self, window=None):
        return np.asarray(self.z[window.toslices()], dtype=np.float64)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), block=st.integers(3, 40), level=st.floats(0.3, 0.7))
def test_random_terrain_matches_whole_array_labelling(seed, block, level):
    # Reference: scipy.ndimage.label on the whole array (8-neighbour), components holding a
    # cell of the seed row kept -- no blocks involved. Ground: random field smoothed 3 x 3.
    rows, cols, seed_row = 40, 52, 20
    rng = np.random.default_rng(seed)
    z = ndimage.uniform_filter(rng.uniform(0, 1, (rows, cols)), 3)
    t = Affine(1.0, 0.0, X0, 0.0, -1.0, Y0 + rows)
    adem = ArrayDem(path=Path("random"), crs=CRS_UTM, transform=t, width=cols, height=rows, nodata=None, z=z)
    lines = [LineString([(X0 + x, Y0 + rows + 5), (X0 + x, Y0 - 5)]) for x in (0.0, float(cols))]
    secs = tuple(Section(reach_id="rr", section_id=i, chainage=float(i), line=ln, station=np.array([0.0, 1.0]),
                         elevation=np.array([0.0, 0.0])) for i, ln in enumerate(lines))
    y_centre = Y0 + rows - seed_row - 0.5          # along the centres of row seed_row
    geom = ReachGeometry(reach_id="rr", centreline=LineString([(X0 + 0.5, y_centre), (X0 + cols - 0.5, y_centre)]),
                         sections=secs, lengths=np.zeros((1, 3)))
    got = map_reach(adem, geom, np.array([level, level]), block=block)
    wet = z < level
    labels, _ = ndimage.label(wet, structure=np.ones((3, 3), dtype=bool))
    kept = np.isin(labels, labels[seed_row][wet[seed_row]]) & wet
    np.testing.assert_array_equal(np.isfinite(got.depth), kept)
    np.testing.assert_allclose(got.depth[kept], level - z[kept], atol=1e-6)
    assert got.wet_area_m2 == kept.sum()


# ---------------------------------------------------------------- the channel below the DEM surface
# The sections cut a trapezoid (bottom 4 m, side slope 1) into the flat 10 m bed of the channel along
# row 160, deeper downstream: 0.8, 1.2, 1.6 m at x = 0, 128, 256 (geoflow.sections.burn). Reference: the
# lowering of each cell written out here: each section's cut at the cell's offset from the channel
# centre, linear in x between the sections (parallel sections, fixed channel edges, so equal
# normalised station is equal offset), plus the analytic depth above.
CUT_DEPTHS = [0.8, 1.2, 1.6]


def channel_ground(station):
    """Ground along a section line (station from its top end, 5 m north of the DEM): the analytic channel."""
    return np.clip((np.abs(station - 165.0) - 5.0) / 2.0, 0.0, 3.0)


def make_cut_geom() -> ReachGeometry:
    from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN
    from geoflow.sections.burn import cut_trapezoid
    geom = make_geom()
    secs = []
    for s, depth in zip(geom.sections, CUT_DEPTHS):
        st = np.arange(0.0, s.line.length + 1e-9, 0.5)
        mid = 0.5 * (st[:-1] + st[1:])
        part = np.where(mid < 154, LEFT_FLOODPLAIN, np.where(mid > 176, RIGHT_FLOODPLAIN, CHANNEL)).astype(np.int8)
        sec = Section(reach_id="rb", section_id=s.section_id, chainage=s.chainage, line=s.line, station=st,
                      elevation=channel_ground(st), n=np.full(mid.size, 0.03), part=part)
        secs.append(cut_trapezoid(sec, bottom_width=4.0, side_slope=1.0, depth=depth))
    return ReachGeometry(reach_id="rb", centreline=geom.centreline, sections=tuple(secs), lengths=geom.lengths)


def expected_cut_depth() -> np.ndarray:
    dy = np.abs(np.arange(H) + 0.5 - 160.0)
    x = np.arange(W) + 0.5
    at_sections = [np.where(dy <= 5.0, np.clip(d - np.clip(dy - 2.0, 0.0, None), 0.0, None), 0.0) for d in CUT_DEPTHS]
    lowering = np.array([np.interp(x, XS, [a[r] for a in at_sections]) for r in range(H)])
    base = expected_depth()
    return np.where(np.isfinite(base), base + lowering, np.nan)


@pytest.fixture(scope="module")
def whole_cut(dem):
    return map_reach(dem, make_cut_geom(), np.array(LEVELS))


def test_channel_cut_lowers_the_mapped_ground(whole_cut):
    np.testing.assert_allclose(whole_cut.depth, expected_cut_depth(), atol=1e-5, equal_nan=True)
    assert whole_cut.max_depth == pytest.approx(LEVELS[-1] + CUT_DEPTHS[-1], abs=0.01)


@pytest.mark.parametrize("block", [16, 37, 64])
def test_channel_cut_blocks_equal_in_memory(dem, whole_cut, tmp_path, block):
    m = map_reach(dem, make_cut_geom(), np.array(LEVELS), block=block)
    np.testing.assert_array_equal(m.depth, whole_cut.depth)
    paths = {"wse": tmp_path / "wse.tif", "depth": tmp_path / "depth.tif"}
    s = write_reach_maps(dem, make_cut_geom(), np.array(LEVELS), paths, block=block)
    np.testing.assert_array_equal(read(paths["depth"])[0], whole_cut.depth)
    assert s.max_depth == whole_cut.max_depth and s.wet_area_m2 == whole_cut.wet_area_m2


@pytest.mark.parametrize("cut", [False, True])
def test_several_profiles_in_one_pass_equal_each_alone(dem, tmp_path, monkeypatch, cut):
    """write_reach_maps_many maps several profiles (events) in one pass over the blocks, sharing the
    ground reads and the section weights: each profile's rasters and totals are the same, cell for
    cell, as its own write_reach_maps, and each is also checked against the analytic depth of the
    module notes (WSE linear in x on the connected set). A profile with a dry section pair (NaN)
    has other quads, so it is mapped apart from the rest. Two of the profiles are wetter than the
    lowest one, so the shared cells are a superset of some profiles' cells."""
    from geoflow.mapping import MapJob, write_reach_maps_many
    monkeypatch.setattr(mapjoin, "SMALL_POCKET", 0)          # cut-off ponds cleared by recomputing
    geom = make_cut_geom() if cut else make_geom()
    profiles = [np.array(LEVELS), np.array(LEVELS) + 0.4, np.array(LEVELS) - 0.3, np.array([2.2, 2.0, np.nan])]
    jobs = [MapJob(w, {"wse": tmp_path / f"many{k}_wse.tif", "depth": tmp_path / f"many{k}_depth.tif"})
            for k, w in enumerate(profiles)]
    many = write_reach_maps_many(dem, geom, jobs, block=37)
    for k, (w, m) in enumerate(zip(profiles, many)):
        alone = write_reach_maps(dem, geom, w, {"wse": tmp_path / f"one{k}_wse.tif",
                                                "depth": tmp_path / f"one{k}_depth.tif"}, block=37)
        for kind in ("wse", "depth"):
            np.testing.assert_array_equal(read(m.paths[kind])[0], read(alone.paths[kind])[0])
        assert (m.wet_area_m2, m.max_depth) == (alone.wet_area_m2, alone.max_depth)
        assert shapely.union_all(m.extent).equals(shapely.union_all(alone.extent))
    depth0 = read(many[0].paths["depth"])[0]
    exp = expected_cut_depth() if cut else expected_depth()
    np.testing.assert_allclose(depth0, exp, atol=1e-5, equal_nan=True)
