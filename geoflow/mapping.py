"""Flood mapping for one reach: water-surface elevation between sections, depth, extent.

Needs: a :class:`geoflow.terrain.Dem` (read only through ``window_for`` and ``read``), a
:class:`geoflow.records.ReachGeometry` (sections upstream -> downstream, each ``line`` running
from the left end to the right end in the DEM CRS) and the computed water-surface elevation
at each section (m). Provides: a :class:`ReachMap` on a window of the DEM grid (same CRS,
same cell alignment) with WSE and depth rasters (float32, NaN where dry) and extent polygons.

Method
------
1. Window: bounds of all section lines plus a few cells, snapped to the DEM grid. Only that
   window is read, so memory is bounded by the reach, never by the whole DEM.
2. WSE surface: consecutive section lines i, i+1 form the quadrilateral
   (line i + reversed line i+1). Each quad is rasterised (cell-centre rule) with value i.
   For a cell inside quad i at distances d_i and d_{i+1} from the two section lines,
   ``WSE = (d_{i+1} * wse_i + d_i * wse_{i+1}) / (d_i + d_{i+1})`` -- linear interpolation
   between the two neighbouring sections (exactly linear in x for parallel sections).
   In bends consecutive lines may cross and the quad self-intersects; it is repaired with
   ``shapely.make_valid`` (two triangles) and still rasterised. A cell inside several quads
   takes the lowest index i (the most upstream pair). Quads with a NaN WSE at either end
   are left dry.
3. Depth = WSE - ground where positive and 8-connected (``scipy.ndimage.label``) to the
   channel seed: the wet cells under the rasterised centreline. Wet pockets behind high
   ground that do not touch the channel are dry.
4. Extent: ``rasterio.features.shapes`` on the connected wet mask -> shapely polygons,
   simplified to half a cell, repaired with ``make_valid``; parts under one cell are dropped.

Coarser output grid: with ``cell_size`` an integer multiple k of the DEM cell size, the
window is snapped to multiples of k cells from the DEM origin and the ground is block
averaged (k x k mean of the valid DEM cells), so the coarse grid stays aligned to the DEM.
Other values raise ConfigError naming ``[mapping] cell_size``.

Block-wise processing (later issue): to map a reach larger than memory, split the window
into blocks overlapping by one cell, label wet cells per block, then join labels across
block edges with a union-find over pairs of wet labels that face each other (8-neighbour,
including the corners) and keep every class that holds a seeded label. Only the label
images of the edge rows/columns need to stay in memory between passes.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import shapely
from affine import Affine
from rasterio.crs import CRS
from rasterio.features import rasterize, shapes
from rasterio.windows import Window
from scipy import ndimage
from shapely.geometry import Polygon, shape

from .errors import ConfigError, GeometryError

PAD_CELLS = 3
_EIGHT = np.ones((3, 3), dtype=bool)


@dataclass(frozen=True, eq=False)
class ReachMap:
    """Flood map of one reach on a window of the DEM grid.

    ``wse`` and ``depth`` are float32 (rows, cols) arrays in m, NaN where dry or outside the
    mapped area; ``transform`` is the affine of the window; ``extent`` holds valid shapely
    Polygons in the DEM CRS; ``wet_area_m2`` counts connected wet cells x cell area;
    ``max_depth`` is in m (0.0 when nothing is wet).
    """

    transform: Affine
    crs: CRS
    wse: np.ndarray
    depth: np.ndarray
    extent: list
    wet_area_m2: float
    max_depth: float


def map_reach(dem, geom, wse_at_section, cell_size: float | None = None, pad: int = PAD_CELLS) -> ReachMap:
    """Map the water surface of one reach onto the DEM grid (see module docstring).

    dem: geoflow.terrain.Dem; geom: ReachGeometry; wse_at_section: (N,) m, one per section;
    cell_size: output cell size in DEM CRS units (None = DEM cell size; otherwise an integer
    multiple of it); pad: cells added around the section bounds.
    """
    wse_at_section = _check_inputs(geom, wse_at_section)
    factor = _cell_factor(dem, cell_size)
    ground, transform = _read_ground(dem, geom, factor, pad)
    wse = wse_surface(geom, wse_at_section, transform, ground.shape)
    with np.errstate(invalid="ignore"):
        wet = np.isfinite(ground) & np.isfinite(wse) & (wse - ground > 0)
    seed = rasterize([(geom.centreline, 1)], out_shape=ground.shape, transform=transform,
                     fill=0, all_touched=True, dtype="uint8").astype(bool)
    connected = connected_to_seed(wet, seed)
    depth = np.where(connected, wse - ground, np.nan).astype(np.float32)
    wse_out = np.where(connected, wse, np.nan).astype(np.float32)
    cell_area = abs(transform.a * transform.e)
    wet_area = float(np.count_nonzero(connected)) * cell_area
    max_depth = float(np.nanmax(depth)) if wet_area > 0 else 0.0
    return ReachMap(transform=transform, crs=dem.crs, wse=wse_out, depth=depth,
                    extent=extent_polygons(connected, transform), wet_area_m2=wet_area, max_depth=max_depth)


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


def _read_ground(dem, geom, factor: int, pad: int) -> tuple[np.ndarray, Affine]:
    """Ground elevation (m) on the reach window, block-averaged by ``factor``; and its transform."""
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
    z = dem.read(win)
    transform = dem.window_transform(win)
    if factor > 1:
        blocks = z.reshape(z.shape[0] // factor, factor, z.shape[1] // factor, factor)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)   # all-NaN blocks stay NaN
            z = np.nanmean(blocks, axis=(1, 3))
        transform = transform @ Affine.scale(factor)
    return z, transform


def wse_surface(geom, wse_at_section: np.ndarray, transform: Affine, shape_rc: tuple[int, int]) -> np.ndarray:
    """WSE (m, float64) interpolated between consecutive sections; NaN outside every quad."""
    sections = geom.sections
    quads = []
    for i in range(len(sections) - 1):
        if not (np.isfinite(wse_at_section[i]) and np.isfinite(wse_at_section[i + 1])):
            continue
        ring = list(sections[i].line.coords) + list(sections[i + 1].line.coords)[::-1]
        quad = _polygonal(shapely.make_valid(Polygon([c[:2] for c in ring])))
        if quad is not None:
            quads.append((quad, i))
    out = np.full(shape_rc, np.nan)
    if not quads:
        return out
    # Later shapes overwrite earlier ones: burn in reverse so the lowest index wins.
    label = rasterize(quads[::-1], out_shape=shape_rc, transform=transform, fill=-1, dtype="int32")
    rows, cols = np.nonzero(label >= 0)
    idx = label[rows, cols]
    x, y = transform @ (cols + 0.5, rows + 0.5)
    ends = np.array([_end_points(s.line) for s in sections])     # (N, 4): x0, y0, x1, y1
    d_up = point_segment_distance(x, y, ends[idx])
    d_dn = point_segment_distance(x, y, ends[idx + 1])
    total = d_up + d_dn
    w_up = np.divide(d_dn, total, out=np.ones_like(total), where=total > 0)
    out[rows, cols] = w_up * wse_at_section[idx] + (1.0 - w_up) * wse_at_section[idx + 1]
    return out


def _polygonal(geom):
    """Polygon parts of ``geom`` joined into one (Multi)Polygon, or None when there is no area."""
    parts = shapely.get_parts(shapely.get_parts(geom))
    parts = parts[(shapely.get_type_id(parts) == 3) & (shapely.area(parts) > 0)]
    return shapely.union_all(parts) if len(parts) else None


def _end_points(line) -> tuple[float, float, float, float]:
    """First and last vertex of a section line (sections are straight 2-point lines)."""
    c = np.asarray(line.coords)
    return float(c[0, 0]), float(c[0, 1]), float(c[-1, 0]), float(c[-1, 1])


def point_segment_distance(x: np.ndarray, y: np.ndarray, seg: np.ndarray) -> np.ndarray:
    """Euclidean distance from points (x, y) to segments ``seg[:, [x0, y0, x1, y1]]``, row by row."""
    x0, y0, x1, y1 = seg[:, 0], seg[:, 1], seg[:, 2], seg[:, 3]
    dx, dy = x1 - x0, y1 - y0
    len2 = dx * dx + dy * dy
    t = np.divide((x - x0) * dx + (y - y0) * dy, len2, out=np.zeros_like(len2), where=len2 > 0)
    t = np.clip(t, 0.0, 1.0)
    return np.hypot(x - (x0 + t * dx), y - (y0 + t * dy))


def connected_to_seed(wet: np.ndarray, seed: np.ndarray) -> np.ndarray:
    """Wet cells 8-connected to at least one wet seed cell."""
    labels, count = ndimage.label(wet, structure=_EIGHT)
    if count == 0:
        return np.zeros_like(wet, dtype=bool)
    keep = np.zeros(count + 1, dtype=bool)
    keep[np.unique(labels[seed & wet])] = True
    keep[0] = False
    return keep[labels]


def extent_polygons(mask: np.ndarray, transform: Affine) -> list:
    """Outline polygons of ``mask`` (DEM CRS): simplified to half a cell, valid, no parts < 1 cell."""
    if not mask.any():
        return []
    cell = max(abs(transform.a), abs(transform.e))
    geoms = [shape(g) for g, _ in shapes(mask.astype(np.uint8), mask=mask, transform=transform, connectivity=8)]
    arr = shapely.make_valid(shapely.simplify(np.array(geoms, dtype=object), cell / 2.0, preserve_topology=True))
    parts = shapely.get_parts(shapely.get_parts(arr))
    parts = parts[shapely.get_type_id(parts) == 3]                 # polygons only
    parts = parts[shapely.area(parts) >= abs(transform.a * transform.e)]
    return list(parts)
