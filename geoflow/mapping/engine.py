"""Flood mapping for one reach: water-surface elevation between sections, depth, extent.

Needs: a :class:`geoflow.terrain.Dem` (read only through ``window_for`` and ``read``), a
:class:`geoflow.records.ReachGeometry` (sections upstream -> downstream, each ``line`` running
from the left end to the right end in the DEM CRS) and the computed water-surface elevation
at each section (m). Provides: a :class:`ReachMap` on a window of the DEM grid (same CRS,
same cell alignment) with WSE and depth rasters (float32, NaN where dry) and extent polygons.

Method
------
1. Window: bounds of all section lines plus a few cells, snapped to the DEM grid, cut into
   blocks; only blocks that a section quad touches are read, one at a time.
2. WSE surface: consecutive section lines i, i+1 form the quadrilateral
   (line i + reversed line i+1). Each quad is rasterised (cell-centre rule) with value i.
   For a cell inside quad i at distances d_i and d_{i+1} from the two section lines,
   ``WSE = (d_{i+1} * wse_i + d_i * wse_{i+1}) / (d_i + d_{i+1})`` -- linear interpolation
   between the two neighbouring sections (exactly linear in x for parallel sections).
   In bends consecutive lines may cross and the quad self-intersects; it is repaired with
   ``shapely.make_valid`` (two triangles) and still rasterised. A cell inside several quads
   takes the lowest index i (the most upstream pair). Quads with a NaN WSE at either end
   are left dry. Where reaches meet, the quads are cut to the reach's own area (``clip``: the
   territory rule of :mod:`geoflow.sections.territory`), so no cell is mapped by two reaches and
   no reach maps another's channel.
3. Ground: the DEM, lowered inside the channel where the sections' channel ground was replaced
   by surveyed points or a cut shape (:mod:`geoflow.mapping.channel`), so depth is measured to
   the channel the profile used, not to the flown water surface.
   Depth = WSE - ground where positive and 8-connected (``scipy.ndimage.label``) to the
   channel seed: the wet cells under the rasterised centreline. Wet pockets behind high
   ground that do not touch the channel are dry.
   Across blocks the labels are joined with a union-find (:mod:`geoflow.mapping.join`).
4. Extent: ``rasterio.features.shapes`` on the connected wet components -> shapely
   polygons merged across block edges, dry holes of at most ``join.MIN_HOLE_CELLS``
   cells filled, rings simplified to half a cell, repaired with ``make_valid``; parts under
   one cell are dropped.

Coarser output grid: with ``cell_size`` an integer multiple k of the DEM cell size, the
window is snapped to multiples of k cells from the DEM origin and the ground is block
averaged (k x k mean of the valid DEM cells), so the coarse grid stays aligned to the DEM.
Other values raise ConfigError naming ``[mapping] cell_size``.

Large reaches: :func:`write_reach_maps` runs the same computation block by block
(:mod:`geoflow.mapping.blocks` per block, :mod:`geoflow.mapping.join` across blocks)
and streams the rasters into Cloud-Optimised GeoTIFFs, so memory is bounded by the block
size, not by the reach. :func:`map_reach` is the same engine with the whole window as one
block (or ``block`` cells) kept in memory; both give the same cells.

Velocity (optional): see :class:`VelocityInputs`.
"""
from __future__ import annotations

import contextlib
import difflib
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import rasterio
import shapely
from affine import Affine
from rasterio.crs import CRS
from rasterio.features import rasterize
from rasterio.windows import Window

from .. import outputs
from ..errors import ConfigError, GeometryError, RoughnessError
from ..terrain import kept_open
from .blocks import Grid, Surface
from .join import run_blocks, run_blocks_many

__all__ = ["ReachMap", "MapSummary", "MapJob", "VelocityInputs", "map_reach", "write_reach_maps",
           "write_reach_maps_many"]

PAD_CELLS = 3
MAP_KINDS = ("wse", "depth", "velocity")
GDAL_CACHE_MB = 48            # GDAL block cache while writing block-wise (bounds memory)
_EIGHT = np.ones((3, 3), dtype=bool)


@dataclass(frozen=True, eq=False)
class ReachMap:
    """Flood map of one reach on a window of the DEM grid.

    ``wse`` and ``depth`` are float32 (rows, cols) arrays in m, NaN where dry or outside the
    mapped area; ``transform`` is the affine of the window; ``extent`` holds valid shapely
    Polygons in the DEM CRS; ``wet_area_m2`` counts connected wet cells x cell area;
    ``max_depth`` is in m (0.0 when nothing is wet); ``velocity`` (m/s, float32) only when
    velocity inputs were given, else None.
    """

    transform: Affine
    crs: CRS
    wse: np.ndarray
    depth: np.ndarray
    extent: list
    wet_area_m2: float
    max_depth: float
    velocity: np.ndarray | None = None


@dataclass(frozen=True, eq=False)
class MapSummary:
    """What :func:`write_reach_maps` wrote: grid (transform, CRS, (rows, cols)), outline
    polygons, wet area (m2), largest depth (m) and the paths written, by kind."""

    transform: Affine
    crs: CRS
    shape: tuple
    extent: list
    wet_area_m2: float
    max_depth: float
    paths: dict


@dataclass(frozen=True, eq=False)
class VelocityInputs:
    """Inputs of the depth-averaged velocity raster (m/s).

    Method: the friction slope Sf of each section (from the profile computation) is
    interpolated between sections exactly like the WSE; each wet cell then carries the
    Manning velocity of a wide strip of its own depth, v = (1/n) d^(2/3) Sf^(1/2)
    (Manning's equation with hydraulic radius ~ local depth d; Chow 1959, Open-Channel
    Hydraulics, ch. 5-6). The discharge per unit width v·d = (1/n) d^(5/3) Sf^(1/2) is the
    local conveyance per unit width times Sf^(1/2), so integrating v·d across a section gives
    the section's Manning discharge when the section is wide (R ~ d); for narrow sections the
    integral exceeds it by about the ratio sum(d^(5/3) dx) / (A R^(2/3)) (a few % for
    width/depth > 40). Cells with NaN n or NaN Sf have no velocity.

    Manning's n per cell, first that is given: ``n_grid(window, transform)`` returning an
    (rows, cols) array on an output block (``window`` of the reach output grid,
    ``transform`` its affine); or ``landcover`` = (polygons, n values) rasterised per block
    with ``default_n`` (or NaN) where no polygon lies; or ``default_n`` everywhere.
    """

    friction_slope: np.ndarray
    n_grid: Callable | None = None
    landcover: tuple | None = None
    default_n: float | None = None

    def n_on_block(self, window: Window, transform: Affine) -> np.ndarray:
        """Manning's n on one output block (see class docstring)."""
        shape_rc = (int(window.height), int(window.width))
        fill = np.nan if self.default_n is None else float(self.default_n)
        if self.n_grid is not None:
            return np.broadcast_to(np.asarray(self.n_grid(window, transform), dtype=np.float64), shape_rc)
        if self.landcover is None:
            return np.full(shape_rc, fill)
        polys = np.asarray(self.landcover[0], dtype=object)
        nvals = np.asarray(self.landcover[1], dtype=np.float64)
        left, top = transform.c, transform.f
        right, bottom = left + transform.a * shape_rc[1], top + transform.e * shape_rc[0]
        b = shapely.bounds(polys)
        sel = np.flatnonzero((b[:, 0] <= right) & (b[:, 2] >= left) & (b[:, 1] <= top) & (b[:, 3] >= bottom))
        if sel.size == 0:
            return np.full(shape_rc, fill)
        return rasterize(list(zip(polys[sel], nvals[sel])), out_shape=shape_rc, transform=transform,
                         fill=fill, dtype="float64")

    def on_block(self, window: Window, transform: Affine, depth: np.ndarray, sf: np.ndarray) -> np.ndarray:
        """v = (1/n) d^(2/3) Sf^(1/2) on a block (NaN where dry or n/Sf unknown)."""
        n = self.n_on_block(window, transform)
        with np.errstate(invalid="ignore", divide="ignore"):
            v = np.power(depth, 2.0 / 3.0) * np.sqrt(np.where(sf >= 0, sf, np.nan)) / np.where(n > 0, n, np.nan)
        return v


@dataclass(frozen=True)
class _Context:
    dem: object
    surface: Surface
    centreline: object
    cell: float
    velocity: VelocityInputs | None


def map_reach(dem, geom, wse_at_section, cell_size: float | None = None, pad: int = PAD_CELLS,
              block: int | None = None, velocity: VelocityInputs | None = None, clip=None) -> ReachMap:
    """Map the water surface of one reach onto the DEM grid, in memory (see module docstring).

    dem: geoflow.terrain.Dem; geom: ReachGeometry; wse_at_section: (N,) m, one per section;
    cell_size: output cell size in DEM CRS units (None = DEM cell size; otherwise an integer
    multiple of it); pad: cells added around the section bounds; block: block size in cells
    (None = the whole window as one block); velocity: optional :class:`VelocityInputs`;
    clip: optional (Multi)Polygon (DEM CRS), the reach's own area where reaches meet
    (:meth:`geoflow.sections.territory.Territory.claim`): the section quads are cut to it, so
    cells outside it stay dry in this reach's map.
    """
    ctx, grid = _prepare(dem, geom, wse_at_section, cell_size, pad, block, velocity, clip)
    kinds = ("wse", "depth") + (("velocity",) if velocity is not None else ())
    arrays = {k: np.full(grid.shape, np.nan, dtype=np.float32) for k in kinds}
    with kept_open(dem):
        res = run_blocks(ctx, grid, _Sink({k: _ArrayWindows(a) for k, a in arrays.items()}))
    return ReachMap(transform=grid.transform, crs=dem.crs, wse=arrays["wse"], depth=arrays["depth"],
                    extent=res.extent, wet_area_m2=res.wet_area_m2, max_depth=res.max_depth,
                    velocity=arrays.get("velocity"))


class _ArrayWindows:
    """In-memory counterpart of outputs.BlockWriter: write/read windows of one array."""

    def __init__(self, array: np.ndarray):
        self.array = array

    def __call__(self, values, window) -> None:
        self.array[window.toslices()] = values

    def read(self, window) -> np.ndarray:
        return self.array[window.toslices()].copy()


class _Sink:
    """Where the engine puts blocks: one window writer per output kind."""

    def __init__(self, writers: dict):
        self.writers = writers

    def write(self, layers: dict, window) -> None:
        for kind, w in self.writers.items():
            w(layers[kind], window)

    def clear(self, window, mask: np.ndarray) -> None:
        """Set no data where ``mask`` inside ``window`` (read, modify, write back)."""
        for w in self.writers.values():
            values = w.read(window)
            values[mask] = np.nan
            w(values, window)


@dataclass(frozen=True, eq=False)
class MapJob:
    """One WSE profile of a reach to map with :func:`write_reach_maps_many`: the WSE at each
    section (m), output paths by kind, velocity inputs and file metadata as in
    :func:`write_reach_maps`."""

    wse_at_section: np.ndarray
    paths: dict
    velocity: VelocityInputs | None = None
    meta: dict | None = None


def write_reach_maps(dem, geom, wse_at_section, paths: dict, cell_size: float | None = None, block: int = 2048,
                     velocity: VelocityInputs | None = None, pad: int = PAD_CELLS, clip=None,
                     meta: dict | None = None) -> MapSummary:
    """Map one reach block by block and write its rasters as Cloud-Optimised GeoTIFFs.

    paths: {"wse" | "depth" | "velocity": output path}, any subset; each raster is float32
    on the reach window of the DEM grid (or the coarser ``cell_size`` grid), nodata -9999,
    written block-wise into a temporary tiled GeoTIFF and published as a COG with overviews
    atomically (:func:`geoflow.outputs.block_raster_writer`). Only one block of ``block``
    x ``block`` cells is in memory at a time (plus GDAL's cache, set to
    ``GDAL_CACHE_MB``). Same cells as :func:`map_reach` for any block size. ``clip`` as in
    :func:`map_reach`; ``meta``: {kind: (tags, band description, unit)} written into each file.
    Returns a :class:`MapSummary`.
    """
    return write_reach_maps_many(dem, geom, [MapJob(wse_at_section, paths, velocity, meta)], cell_size=cell_size,
                                 block=block, pad=pad, clip=clip)[0]


def write_reach_maps_many(dem, geom, jobs: list[MapJob], cell_size: float | None = None, block: int = 2048,
                          pad: int = PAD_CELLS, clip=None) -> list[MapSummary]:
    """:func:`write_reach_maps` of several WSE profiles of one reach (events, roughness cases) in
    one pass over the reach's blocks: the DEM of each block is read once and the section
    weights are computed once for the profiles that wet the same section pairs
    (:func:`geoflow.mapping.join.run_blocks_many`). Each job's files and summary are the same as
    :func:`write_reach_maps` gives for it alone; one block per job is in memory at a time."""
    checked = [(_check_paths(geom, j.paths, j.velocity), j) for j in jobs]
    prepared = [_prepare(dem, geom, j.wse_at_section, cell_size, pad, block, j.velocity, clip) for _, j in checked]
    grid = prepared[0][1] if prepared else None
    if grid is None:
        return []
    rows, cols = grid.shape
    tile = 512 if min(rows, cols) >= 4096 else 256
    with rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB * 1024 * 1024), contextlib.ExitStack() as stack:
        stack.enter_context(kept_open(dem))
        sinks = [_Sink({k: stack.enter_context(outputs.block_raster_writer(p, cols, rows, grid.transform, dem.crs,
                                                                           blocksize=tile,
                                                                           meta=(j.meta or {}).get(k)))
                        for k, p in paths.items()})
                 for paths, j in checked]
        results = run_blocks_many([ctx for ctx, _ in prepared], grid, sinks)
    return [MapSummary(transform=grid.transform, crs=dem.crs, shape=grid.shape, extent=res.extent,
                       wet_area_m2=res.wet_area_m2, max_depth=res.max_depth, paths=dict(paths))
            for res, (paths, _) in zip(results, checked)]


def _check_paths(geom, paths, velocity) -> dict:
    """Output paths by kind; unknown kinds are refused with a did-you-mean suggestion."""
    out = {}
    for kind, p in dict(paths).items():
        if kind not in MAP_KINDS:
            near = difflib.get_close_matches(str(kind), MAP_KINDS, n=1)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            raise ConfigError(f"reach {geom.reach_id}: unknown map output {kind!r} (known: "
                              f"{', '.join(MAP_KINDS)}){hint}")
        out[kind] = Path(p)
    if "velocity" in out and velocity is None:
        raise ConfigError(f"reach {geom.reach_id}: a velocity raster was asked for without velocity inputs "
                          "(friction slope per section and Manning's n); pass velocity=VelocityInputs(...)")
    return out


def _prepare(dem, geom, wse_at_section, cell_size, pad, block, velocity, clip=None) -> tuple[_Context, Grid]:
    """Validated inputs -> engine context and output grid."""
    wse = _check_inputs(geom, wse_at_section)
    values = wse[None, :]
    if velocity is not None:
        sf = np.asarray(velocity.friction_slope, dtype=np.float64)
        if sf.shape != wse.shape:
            raise GeometryError(f"reach {geom.reach_id}: {sf.size} friction slopes given for {wse.size} "
                                "cross-sections; give one per section")
        if velocity.n_grid is None and velocity.landcover is None and velocity.default_n is None:
            raise RoughnessError(f"reach {geom.reach_id}: velocity mapping needs Manning's n; give n_grid, "
                                 "landcover or default_n")
        values = np.vstack([wse, sf])
    factor = _cell_factor(dem, cell_size)
    win, transform, shape_rc = _reach_window(dem, geom, factor, pad)
    size = max(shape_rc) if block is None else int(block)
    if size < 2:
        raise ConfigError(f"reach {geom.reach_id}: block size {block} is too small; use at least 2 cells "
                          "(256 to 4096 are typical)")
    grid = Grid(dem_window=win, transform=transform, shape=shape_rc, factor=factor, block=size)
    centreline = shapely.force_2d(geom.centreline)
    ctx = _Context(dem=dem, surface=Surface(geom.sections, values, clip, centreline), centreline=centreline,
                   cell=float(max(abs(transform.a), abs(transform.e))), velocity=velocity)
    return ctx, grid


def _check_inputs(geom, wse_at_section) -> np.ndarray:
    """Validate the section count and the WSE vector; return it as float64."""
    n = len(geom.sections)
    if n < 2:
        raise GeometryError(f"reach {geom.reach_id}: {n} cross-section(s); mapping needs at least two "
                            "(reduce [sections] spacing or check the centreline length)")
    wse = np.asarray(wse_at_section, dtype=np.float64)
    if wse.shape != (n,):
        raise GeometryError(f"reach {geom.reach_id}: {wse.size} water-surface elevations given for {n} "
                            "cross-sections; give one per section")
    return wse


def _cell_factor(dem, cell_size) -> int:
    """Integer ratio of the output cell size to the DEM cell size (1 when None)."""
    if cell_size is None:
        return 1
    base = dem.cell_size
    ratio = float(cell_size) / base
    k = int(round(ratio))
    if not (cell_size > 0) or k < 1 or abs(ratio - k) > 1e-6 * max(1.0, ratio):
        raise ConfigError(f"[mapping] cell_size = {cell_size} must be a whole multiple of the DEM cell "
                          f"size {base:g} (e.g. {base:g} or {2 * base:g}) or left out")
    return k


def _reach_window(dem, geom, factor: int, pad: int) -> tuple[Window, Affine, tuple[int, int]]:
    """DEM window of the reach (multiples of ``factor``), output-grid transform and shape."""
    coords = np.concatenate([np.asarray(s.line.coords)[:, :2] for s in geom.sections])
    bounds = (coords[:, 0].min(), coords[:, 1].min(), coords[:, 0].max(), coords[:, 1].max())
    win = dem.window_for(bounds, pad=pad * factor)
    if win.width == 0 or win.height == 0:
        raise GeometryError(f"reach {geom.reach_id}: cross-sections lie outside the DEM {dem.path}; "
                            "check the centreline CRS and extent")
    if factor > 1:
        c0 = (int(win.col_off) // factor) * factor
        r0 = (int(win.row_off) // factor) * factor
        c1 = min(math.ceil((win.col_off + win.width) / factor) * factor, (dem.width // factor) * factor)
        r1 = min(math.ceil((win.row_off + win.height) / factor) * factor, (dem.height // factor) * factor)
        if c1 <= c0 or r1 <= r0:
            raise GeometryError(f"reach {geom.reach_id}: DEM {dem.path} is smaller than one output cell; "
                                "reduce [mapping] cell_size")
        win = Window(c0, r0, c1 - c0, r1 - r0)
    transform = dem.window_transform(win) @ Affine.scale(factor)
    return win, transform, (int(win.height) // factor, int(win.width) // factor)


