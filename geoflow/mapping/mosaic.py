"""Per-event mosaic of reach rasters: the maximum where reaches overlap (confluences).

All inputs must lie on one grid: same CRS, same cell size, north-up, origins a whole number
of cells apart (true for every raster geoflow writes on one DEM). The output covers the
union of the inputs' extents; each cell holds the largest valid input value there
(``numpy.fmax``: no data loses against any value), no data where no input has a value.
It is computed block by block (one output block and the overlapping input windows in
memory) and written as a Cloud-Optimised GeoTIFF atomically
(:func:`geoflow.outputs.block_raster_writer`).
"""
from __future__ import annotations

import contextlib
import math
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine
from rasterio.windows import Window

from .. import outputs
from ..errors import InputDataError

GRID_TOLERANCE = 1e-6        # in cells: origin offsets and cell sizes must agree to this


def mosaic_max(paths, out_path, block: int = 2048, meta: tuple | None = None) -> Path:
    """Merge rasters on one grid taking the cell-wise maximum; write a COG at ``out_path``.

    paths: WSE (or depth) rasters of one event, e.g. of reaches meeting at a confluence.
    ``meta``: (tags, band description, unit) written into the output's metadata.
    Returns the output path. Raises InputDataError naming the file that is off the grid.
    """
    paths = [Path(p) for p in paths]
    if not paths:
        raise InputDataError(f"{out_path}: mosaic_max needs at least one input raster")
    metas = [_meta(p) for p in paths]
    transform, shape_rc, offsets = _union_grid(metas)
    crs = metas[0]["crs"]
    with rasterio.Env(GDAL_CACHEMAX=96 * 1024 * 1024), contextlib.ExitStack() as stack:
        sources = [stack.enter_context(rasterio.open(p)) for p in paths]
        write = stack.enter_context(outputs.block_raster_writer(out_path, shape_rc[1], shape_rc[0], transform, crs,
                                                                  meta=meta))
        for r0 in range(0, shape_rc[0], block):
            for c0 in range(0, shape_rc[1], block):
                win = Window(c0, r0, min(block, shape_rc[1] - c0), min(block, shape_rc[0] - r0))
                write(_max_block(sources, offsets, win), win)
    return Path(out_path)


def _meta(path: Path) -> dict:
    """Grid of one input raster, or InputDataError."""
    try:
        with rasterio.open(path) as ds:
            meta = dict(path=path, crs=ds.crs, transform=ds.transform, width=ds.width, height=ds.height)
    except rasterio.errors.RasterioError as exc:
        raise InputDataError(f"{path}: cannot open as a raster ({exc})") from None
    t = meta["transform"]
    if t.b != 0 or t.d != 0:
        raise InputDataError(f"{path}: raster grid is rotated; mosaic inputs must be north-up on the DEM grid")
    return meta


def _union_grid(metas: list) -> tuple[Affine, tuple[int, int], list]:
    """Transform and shape of the union of the inputs, and each input's (row, col) offset."""
    ref = metas[0]
    a, e = ref["transform"].a, ref["transform"].e
    for m in metas[1:]:
        t = m["transform"]
        if m["crs"] != ref["crs"]:
            raise InputDataError(f"{m['path']}: CRS differs from {ref['path']}; mosaic inputs must share the DEM CRS")
        if abs(t.a - a) > GRID_TOLERANCE * abs(a) or abs(t.e - e) > GRID_TOLERANCE * abs(e):
            raise InputDataError(f"{m['path']}: cell size differs from {ref['path']}; map all reaches at one cell_size")
    left = min(m["transform"].c for m in metas)
    top = max(m["transform"].f for m in metas) if e < 0 else min(m["transform"].f for m in metas)
    offsets = []
    for m in metas:
        col, row = (m["transform"].c - left) / a, (m["transform"].f - top) / e
        if abs(col - round(col)) > GRID_TOLERANCE or abs(row - round(row)) > GRID_TOLERANCE:
            raise InputDataError(f"{m['path']}: grid is shifted by a fraction of a cell from {ref['path']}; "
                                 "mosaic inputs must be on the DEM grid")
        offsets.append((int(round(row)), int(round(col))))
    rows = max(r + m["height"] for (r, _), m in zip(offsets, metas))
    cols = max(c + m["width"] for (_, c), m in zip(offsets, metas))
    return Affine(a, 0.0, left, 0.0, e, top), (math.ceil(rows), math.ceil(cols)), offsets


def _max_block(sources: list, offsets: list, win: Window) -> np.ndarray:
    """Cell-wise fmax over the inputs overlapping one output window (NaN = no data)."""
    r0, c0, h, w = int(win.row_off), int(win.col_off), int(win.height), int(win.width)
    acc = np.full((h, w), np.nan, dtype=np.float32)
    for ds, (ro, co) in zip(sources, offsets):
        rr0, cc0 = max(r0, ro), max(c0, co)
        rr1, cc1 = min(r0 + h, ro + ds.height), min(c0 + w, co + ds.width)
        if rr1 <= rr0 or cc1 <= cc0:
            continue
        vals = ds.read(1, window=Window(cc0 - co, rr0 - ro, cc1 - cc0, rr1 - rr0), masked=True)
        vals = vals.astype(np.float32).filled(np.nan)
        sub = acc[rr0 - r0:rr1 - r0, cc0 - c0:cc1 - c0]
        np.fmax(sub, vals, out=sub)
    return acc
