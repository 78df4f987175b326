"""Per-event mosaic of reach rasters: the maximum where reaches overlap (confluences).

All inputs must lie on one grid: same CRS, same cell size, north-up, origins a whole number
of cells apart (true for every raster geoflow writes on one DEM). The output covers the
union of the inputs' extents (or a box of it); each cell holds the largest valid input value there
(``numpy.fmax``: no data loses against any value), no data where no input has a value.
It is computed block by block (one output block and the overlapping input windows in
memory) and written as a Cloud-Optimised GeoTIFF atomically
(:func:`geoflow.outputs.block_raster_writer`).

Over a network, only rasters that overlap need merging: :func:`overlap_clusters` groups them
(connected components of the overlap graph, found with an STRtree of their extents, so the cost
grows with the number of rasters, not its square), so only where rasters overlap is a
maximum computed and written (:func:`overlap_patches`, ``mosaic_max(..., bounds=patch)``), and
:func:`write_vrt` shows the reach rasters with those patches on top as one virtual raster: the
maximum everywhere, never a network-wide grid rewritten.
"""
from __future__ import annotations

import contextlib
import html
import math
import os
from pathlib import Path

import numpy as np
import rasterio
import shapely
from affine import Affine
from rasterio.windows import Window
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from .. import outputs
from ..constants import NODATA
from ..errors import InputDataError

GRID_TOLERANCE = 1e-6        # in cells: origin offsets and cell sizes must agree to this


def mosaic_max(paths, out_path, block: int = 2048, meta: tuple | None = None, bounds=None) -> Path:
    """Merge rasters on one grid taking the cell-wise maximum; write a COG at ``out_path``.

    paths: WSE (or depth) rasters of one event, e.g. of reaches meeting at a confluence.
    ``meta``: (tags, band description, unit) written into the output's metadata.
    bounds: (left, bottom, right, top) to write only that box of the union grid (widened to
    whole cells). Returns the output path. Raises InputDataError naming the file that is off
    the grid.
    """
    paths = [Path(p) for p in paths]
    if not paths:
        raise InputDataError(f"{out_path}: mosaic_max needs at least one input raster")
    metas = [_meta(p) for p in paths]
    transform, shape_rc, offsets = _union_grid(metas)
    if bounds is not None:
        transform, shape_rc, offsets = _crop(transform, shape_rc, offsets, bounds, out_path)
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


def overlap_patches(bounds) -> list[tuple[tuple[float, float, float, float], list[int]]]:
    """Where rasters overlap: boxes to merge, each with the rasters that cover part of it.

    bounds: (N, 4) (left, bottom, right, top) of the rasters. The overlap of every pair of
    rasters whose extents overlap with positive area (found with an STRtree, so the cost grows
    with N, not N^2) is a box; boxes that overlap each other are joined (connected components)
    into one patch, the bounding box of its group. Returns [(patch box, sorted raster indices
    overlapping it)], ordered by first raster index. Extents that only touch along an edge do not
    overlap. Outside the patches at most one raster has cells, so a patch-wise maximum plus the
    rasters themselves give the maximum everywhere.
    """
    b = np.asarray(bounds, dtype=np.float64).reshape(-1, 4)
    if len(b) < 2:
        return []
    boxes = shapely.box(b[:, 0], b[:, 1], b[:, 2], b[:, 3])
    tree = shapely.STRtree(boxes)
    i, j = tree.query(boxes, predicate="intersects")
    keep = i < j
    pieces = shapely.intersection(boxes[i[keep]], boxes[j[keep]])
    pieces = pieces[shapely.area(pieces) > 0]
    if pieces.size == 0:
        return []
    a, c = shapely.STRtree(pieces).query(pieces, predicate="intersects")
    real = shapely.area(shapely.intersection(pieces[a], pieces[c])) > 0
    graph = coo_matrix((np.ones(int(real.sum())), (a[real], c[real])), shape=(pieces.size, pieces.size))
    _, label = connected_components(graph, directed=False)
    out = []
    for g in range(int(label.max()) + 1):
        box = tuple(float(v) for v in shapely.total_bounds(pieces[label == g]))
        cand = tree.query(shapely.box(*box), predicate="intersects")
        hit = cand[shapely.area(shapely.intersection(boxes[cand], shapely.box(*box))) > 0]
        out.append((box, sorted(int(k) for k in hit)))
    return sorted(out, key=lambda p: p[1])


def write_vrt(paths, out_path, meta: tuple | None = None) -> Path:
    """A virtual raster (GDAL VRT, paths relative to it) showing the rasters ``paths`` on one grid.

    All must share the grid (as for :func:`mosaic_max`). Where several have values the last listed
    wins (GDAL paints sources in order); no data never hides a value (``ComplexSource`` with
    ``NODATA``). ``meta``: (tags, band description, unit) written as the VRT's metadata items,
    band description and unit type, as :func:`mosaic_max` writes them into a GeoTIFF.
    """
    out_path = Path(out_path)
    metas = [_meta(Path(p)) for p in paths]
    if not metas:
        raise InputDataError(f"{out_path}: write_vrt needs at least one input raster")
    transform, (rows, cols), offsets = _union_grid(metas)
    sources = []
    for m, (r, c) in zip(metas, offsets):
        rel = html.escape(os.path.relpath(m["path"], out_path.parent).replace(os.sep, "/"))
        sources.append(
            f'    <ComplexSource>\n      <SourceFilename relativeToVRT="1">{rel}</SourceFilename>\n'
            f'      <SourceBand>1</SourceBand>\n'
            f'      <SrcRect xOff="0" yOff="0" xSize="{m["width"]}" ySize="{m["height"]}"/>\n'
            f'      <DstRect xOff="{c}" yOff="{r}" xSize="{m["width"]}" ySize="{m["height"]}"/>\n'
            f'      <NODATA>{NODATA:g}</NODATA>\n    </ComplexSource>')
    t = transform
    tags, band = _vrt_meta(meta)
    text = (f'<VRTDataset rasterXSize="{cols}" rasterYSize="{rows}">\n'
            f'  <SRS>{html.escape(metas[0]["crs"].to_wkt())}</SRS>\n'
            f'  <GeoTransform>{t.c!r}, {t.a!r}, {t.b!r}, {t.f!r}, {t.d!r}, {t.e!r}</GeoTransform>\n{tags}'
            f'  <VRTRasterBand dataType="Float32" band="1">\n{band}    <NoDataValue>{NODATA:g}</NoDataValue>\n'
            + "\n".join(sources) + "\n  </VRTRasterBand>\n</VRTDataset>\n")
    with outputs.atomic_path(out_path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return out_path


def _vrt_meta(meta: tuple | None) -> tuple[str, str]:
    """VRT elements for (tags, band description, unit): the dataset's Metadata, the band's lines."""
    if meta is None:
        return "", ""
    tags, description, unit = meta
    items = "".join(f'    <MDI key="{html.escape(str(k))}">{html.escape(str(v))}</MDI>\n' for k, v in tags.items())
    return (f"  <Metadata>\n{items}  </Metadata>\n",
            f"    <Description>{html.escape(description)}</Description>\n    <UnitType>{html.escape(unit)}</UnitType>\n")


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


def _crop(transform: Affine, shape_rc, offsets: list, bounds, where) -> tuple[Affine, tuple[int, int], list]:
    """The union grid cut to ``bounds`` (whole cells, kept inside the grid)."""
    left, bottom, right, top = bounds
    inv = ~transform
    cols = sorted(((inv * (left, top))[0], (inv * (right, bottom))[0]))
    rows = sorted(((inv * (left, top))[1], (inv * (right, bottom))[1]))
    c0, c1 = max(int(math.floor(cols[0] + 1e-9)), 0), min(int(math.ceil(cols[1] - 1e-9)), shape_rc[1])
    r0, r1 = max(int(math.floor(rows[0] + 1e-9)), 0), min(int(math.ceil(rows[1] - 1e-9)), shape_rc[0])
    if c1 <= c0 or r1 <= r0:
        raise InputDataError(f"{where}: mosaic box {tuple(bounds)} lies outside the input rasters")
    return transform * Affine.translation(c0, r0), (r1 - r0, c1 - c0), [(r - r0, c - c0) for r, c in offsets]


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
