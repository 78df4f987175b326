"""Mapping engine across blocks: label join, patches, totals and outline of one reach.

The output grid (the reach window of the DEM grid, or a coarser grid aligned to it) is cut
into square blocks (:mod:`geoflow.mapping.blocks` computes one block). Nothing larger than one
block is held, except per-label summaries, the label strips along block edges and the
outline pieces.

Pass 1, per block in row-major order:
  * blocks that no section quad touches are skipped without reading the DEM (all dry);
  * the block's wet cells are labelled (``scipy.ndimage.label``, 8-neighbour) and given
    global ids (a running offset); the ids under the rasterised centreline are seeded;
  * a component that touches no inner block edge is complete inside the block, so it is
    kept (seeded) or dropped (not seeded) at once; components on an inner edge stay
    pending, and the edge strips of ids are kept;
  * the block is written (seeded + pending components) and those components are
    polygonised (``rasterio.features.shapes`` on the label image: one piece per id).
Join: ids facing each other across block edges (same column across a horizontal edge, the
same row across a vertical edge, the two diagonal neighbours, and the block corners) are
joined with ``scipy.sparse.csgraph.connected_components`` (a union-find); an id is kept
when its class holds a seeded id.
Patches: the cells of a pending id that ends up not kept (e.g. a pond behind high ground
that reaches a block edge) are cleared in the written output; small ids (at most
``SMALL_POCKET`` cells) by their recorded cells, larger ones by recomputing the block.
Totals come from the per-id summaries. Outline: the kept pieces (polygonised 4-connected,
so each is valid; a diagonal step gives two pieces) that lie on a block line have their
outer rings merged with ``shapely.union_all`` (pieces meeting across a block edge join
exactly, pixel edges on the same lines) and their holes put back into the merged polygon
that contains them; then each polygon is simplified to half a cell (Douglas-Peucker),
invalid results are repaired with make_valid, and parts under ``MIN_OUTLINE_PART_CELLS`` cells
(:mod:`geoflow.constants`: cells that touch the flood only at a corner) are dropped. The rasters and totals do not depend on the block size (tests
check it cell for cell); the outline only through the simplification (< half a cell).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
import shapely
from affine import Affine
from rasterio.features import shapes
from rasterio.windows import Window
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..constants import MIN_OUTLINE_PART_CELLS
from .blocks import BlockData, Grid, block_layers, compute_block, compute_blocks

SMALL_POCKET = 4096          # pending ids up to this many cells are patched by their cells
MIN_HOLE_CELLS = 4           # outline holes (dry islands) up to this many cells are filled


@dataclass
class _Ledger:
    """What pass 1 keeps between blocks."""

    total: int = 0
    offsets: dict = field(default_factory=dict)    # (bi, bj) -> id offset
    strips: dict = field(default_factory=dict)     # (bi, bj) -> (top, bottom, left, right) global ids
    seeded: list = field(default_factory=list)     # global ids under the centreline
    seeded_cells: int = 0
    seeded_max: float = 0.0
    pend_ids: list = field(default_factory=list)   # pending global ids, their cell counts, max depth
    pend_cells: list = field(default_factory=list)
    pend_max: list = field(default_factory=list)
    big: dict = field(default_factory=dict)        # (bi, bj) -> pending ids patched by recomputing
    pockets: dict = field(default_factory=dict)    # (bi, bj) -> (rows, cols, ids) of small pending ids
    pieces: list = field(default_factory=list)
    piece_ids: list = field(default_factory=list)
    finished: list = field(default_factory=list)   # outline parts of pieces off every block line, final


def _record(ledger: _Ledger, key, data: BlockData, inner: tuple) -> np.ndarray:
    """Enter one block into the ledger; return keep_local (seeded or pending ids)."""
    off, n, lab = ledger.total, data.count, data.labels
    ledger.offsets[key] = off
    ledger.total += n
    strips = (lab[0], lab[-1], lab[:, 0], lab[:, -1])
    ledger.strips[key] = tuple(np.where(s > 0, s.astype(np.int64) + off, 0) for s in strips)
    on_edge = np.zeros(n + 1, dtype=bool)
    on_edge[np.concatenate([s for s, is_inner in zip(strips, inner) if is_inner] + [np.zeros(0, np.int32)])] = True
    seeded = np.zeros(n + 1, dtype=bool)
    seeded[data.seeded] = True
    seeded[0] = on_edge[0] = False
    pending = on_edge & ~seeded
    ledger.seeded.append(np.flatnonzero(seeded) + off)
    smask = seeded[lab]
    if smask.any():
        ledger.seeded_cells += int(np.count_nonzero(smask))
        ledger.seeded_max = max(ledger.seeded_max, float(data.depth[smask].max()))
    if pending.any():
        _record_pending(ledger, key, data, pending, off)
    keep_local = seeded | pending
    mask = keep_local[lab]
    if mask.any():
        pieces, values = polygonise(lab, mask, data.transform)
        ledger.pieces.append(pieces)
        ledger.piece_ids.append(values.astype(np.int64) + off)
    return keep_local


def polygonise(lab: np.ndarray, mask: np.ndarray, transform: Affine) -> tuple[np.ndarray, np.ndarray]:
    """4-connected pixel polygons of the labels under ``mask`` (``rasterio.features.shapes``),
    built into shapely polygons in one vectorised call; returns (polygons, label values)."""
    coords, ring_len, rings_per_poly, values = [], [], [], []
    for geom, value in shapes(lab, mask=mask, transform=transform, connectivity=4):
        rings = geom["coordinates"]
        coords.extend(itertools.chain.from_iterable(rings))
        ring_len.extend(len(r) for r in rings)
        rings_per_poly.append(len(rings))
        values.append(value)
    ring_idx = np.repeat(np.arange(len(ring_len)), ring_len)
    rings = shapely.linearrings(np.asarray(coords, dtype=np.float64), indices=ring_idx)
    polys = shapely.polygons(rings, indices=np.repeat(np.arange(len(values)), rings_per_poly))
    return polys, np.asarray(values)


def _record_pending(ledger: _Ledger, key, data: BlockData, pending: np.ndarray, off: int) -> None:
    """Cell counts, largest depth and (small ones) cells of the pending ids of a block."""
    lab = data.labels
    ids = np.flatnonzero(pending)
    cells = np.bincount(lab.ravel(), minlength=pending.size)
    pmask = pending[lab]
    maxd = np.zeros(pending.size)
    np.maximum.at(maxd, lab[pmask], data.depth[pmask])
    ledger.pend_ids.append(ids + off)
    ledger.pend_cells.append(cells[ids])
    ledger.pend_max.append(maxd[ids])
    small = pending & (cells <= SMALL_POCKET)
    rows, cols = np.nonzero(small[lab])
    if rows.size:
        ledger.pockets[key] = (rows.astype(np.int32), cols.astype(np.int32), lab[rows, cols].astype(np.int64) + off)
    big = ids[cells[ids] > SMALL_POCKET]
    if big.size:
        ledger.big[key] = big + off


def _edge_pairs(a: np.ndarray, b: np.ndarray) -> list:
    """8-neighbour id pairs between two facing strips of equal length (same, left, right)."""
    return [np.stack([a, b]), np.stack([a[1:], b[:-1]]), np.stack([a[:-1], b[1:]])]


def join_labels(ledger: _Ledger) -> np.ndarray:
    """keep[global id] after joining ids across block edges; keep[0] is False."""
    pairs = [np.zeros((2, 0), dtype=np.int64)]
    for (bi, bj), (_, bottom, _, right) in ledger.strips.items():
        below, beside = ledger.strips.get((bi + 1, bj)), ledger.strips.get((bi, bj + 1))
        if below is not None:
            pairs += _edge_pairs(bottom, below[0])
        if beside is not None:
            pairs += _edge_pairs(right, beside[2])
        diag, anti = ledger.strips.get((bi + 1, bj + 1)), ledger.strips.get((bi + 1, bj - 1))
        if diag is not None:
            pairs.append(np.array([[bottom[-1]], [diag[0][0]]]))     # bottom-right corner, top-left
        if anti is not None:
            pairs.append(np.array([[bottom[0]], [anti[0][-1]]]))     # bottom-left corner, top-right
    n = ledger.total + 1
    edges = np.concatenate(pairs, axis=1)
    edges = edges[:, (edges[0] > 0) & (edges[1] > 0)]
    graph = coo_matrix((np.ones(edges.shape[1], dtype=np.int8), (edges[0], edges[1])), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    seeded_comp = np.zeros(comp.max() + 1, dtype=bool)
    seeded_comp[comp[np.concatenate(ledger.seeded + [np.zeros(0, dtype=np.int64)])]] = True
    keep = seeded_comp[comp]
    keep[0] = False
    return keep


@dataclass(frozen=True)
class EngineResult:
    """Totals of a mapped reach: wet area (m2), largest depth (m), outline polygons."""

    wet_area_m2: float
    max_depth: float
    extent: list


def run_blocks(ctx, grid: Grid, sink) -> EngineResult:
    """Map a reach block by block into ``sink`` (``write(layers, window)``, ``clear(window, mask)``)."""
    return run_blocks_many([ctx], grid, [sink])[0]


def run_blocks_many(ctxs: list, grid: Grid, sinks: list) -> list[EngineResult]:
    """:func:`run_blocks` of several WSE profiles of one reach on one grid (``ctxs[k]`` into
    ``sinks[k]``) in one pass over the blocks: each block's ground is read, and its quad labels
    and weights computed, once for all (:func:`geoflow.mapping.blocks.compute_blocks`). The same
    results as one :func:`run_blocks` per profile."""
    ledgers = [_Ledger() for _ in ctxs]
    for bi, bj, win in grid.blocks():
        inner = (bi > 0, win.row_off + win.height < grid.shape[0], bj > 0, win.col_off + win.width < grid.shape[1])
        for data, ledger, sink in zip(compute_blocks(ctxs, grid, win), ledgers, sinks):
            if data is None or data.count == 0:
                continue
            sink.write(block_layers(data, _record(ledger, (bi, bj), data, inner)), win)
            _finish_inner_pieces(ledger, grid)
    return [_result(ctx, grid, sink, ledger) for ctx, sink, ledger in zip(ctxs, sinks, ledgers)]


def _result(ctx, grid: Grid, sink, ledger: _Ledger) -> EngineResult:
    """Join the labels of one profile, patch its output, total it and outline it."""
    keep = join_labels(ledger)
    _patch(ctx, grid, sink, ledger, keep)
    ids = np.concatenate(ledger.pend_ids + [np.zeros(0, dtype=np.int64)])
    kept = keep[ids]
    cells = ledger.seeded_cells + int(np.concatenate(ledger.pend_cells + [np.zeros(0, np.int64)])[kept].sum())
    maxd = np.concatenate(ledger.pend_max + [np.zeros(0)])[kept]
    max_depth = max([ledger.seeded_max] + ([float(maxd.max())] if maxd.size else []))
    pieces = np.concatenate(ledger.pieces + [np.zeros(0, dtype=object)])
    pieces = pieces[keep[np.concatenate(ledger.piece_ids + [np.zeros(0, dtype=np.int64)])]]
    return EngineResult(float(cells) * abs(grid.transform.a * grid.transform.e), max_depth,
                        outline(pieces, grid.transform, grid.block, finished=ledger.finished))


def _finish_inner_pieces(ledger: _Ledger, grid: Grid) -> None:
    """Outline now the new pieces of seeded ids (kept whatever the join finds) that touch no block
    line; pieces on a block line wait for the merge, those of pending ids for the join. The same
    outline parts (some in another order), and memory holds simplified polygons instead of every
    pixel corner of a long reach's flood."""
    if not ledger.pieces or len(ledger.finished) == len(ledger.pieces):
        return
    pieces, ids = ledger.pieces[-1], ledger.piece_ids[-1]
    cell_area = abs(grid.transform.a * grid.transform.e)
    ready = _rings_op(np.asarray(pieces, dtype=object), MIN_HOLE_CELLS * cell_area, None)
    now = ~_on_block_line(ready, grid.transform, grid.block) & np.isin(ids, ledger.seeded[-1])
    ledger.finished.append(final_parts(ready[now], grid.transform))
    ledger.pieces[-1], ledger.piece_ids[-1] = pieces[~now], ids[~now]


def _patch(ctx, grid: Grid, sink, ledger: _Ledger, keep: np.ndarray) -> None:
    """Clear the pending components that the join did not keep."""
    redo = {key for key, ids in ledger.big.items() if not keep[ids].all()}
    for key in sorted(redo):
        win = grid.window(*key)
        data = compute_block(ctx, grid, win)
        off = ledger.offsets[key]
        keep_local = keep[off:off + data.count + 1] & (np.arange(data.count + 1) > 0)
        sink.write(block_layers(data, keep_local), win)
    for key, (rows, cols, ids) in ledger.pockets.items():
        drop = ~keep[ids]
        if key in redo or not drop.any():
            continue
        r, c = rows[drop], cols[drop]
        r0, c0 = int(r.min()), int(c.min())
        mask = np.zeros((int(r.max()) - r0 + 1, int(c.max()) - c0 + 1), dtype=bool)
        mask[r - r0, c - c0] = True
        block = grid.window(*key)
        sink.clear(Window(block.col_off + c0, block.row_off + r0, mask.shape[1], mask.shape[0]), mask)


def outline(pieces: list, transform: Affine, block: int | None = None, finished: list | None = None) -> list:
    """Polygons of the union of pixel pieces (see module docstring), valid, no parts under
    ``MIN_OUTLINE_PART_CELLS`` cells.

    ``pieces`` are valid polygons whose vertices lie on cell corners (4-connected
    polygonisation); with ``block`` only pieces on an inner block line are merged.
    Holes of at most ``MIN_HOLE_CELLS`` cells are filled (the rasters keep them).
    ``finished``: arrays of parts already outlined (:func:`final_parts`) of pieces on no block
    line; they come first, as they would if passed among ``pieces``.
    """
    done = list(finished or [])
    if len(pieces) == 0:
        return list(np.concatenate(done)) if done else []
    cell_area = abs(transform.a * transform.e)
    arr = _rings_op(np.asarray(pieces, dtype=object), MIN_HOLE_CELLS * cell_area, None)
    seam = _on_block_line(arr, transform, block)
    polys = np.concatenate([arr[~seam], _merge(arr[seam])])
    return list(np.concatenate(done + [final_parts(polys, transform)]))


def final_parts(polys: np.ndarray, transform: Affine) -> np.ndarray:
    """Outline parts of whole polygons: small holes filled, rings simplified to half a cell,
    repaired, polygon parts of at least ``MIN_OUTLINE_PART_CELLS`` cells (elementwise, so any split
    gives the same)."""
    if polys.size == 0:
        return np.zeros(0, dtype=object)
    cell_area = abs(transform.a * transform.e)
    simple = _rings_op(polys, MIN_HOLE_CELLS * cell_area, max(abs(transform.a), abs(transform.e)) / 2.0)
    bad = ~shapely.is_valid(simple)
    simple[bad] = shapely.make_valid(simple[bad])
    parts = shapely.get_parts(shapely.get_parts(simple))
    parts = parts[shapely.get_type_id(parts) == 3]                 # polygons only
    return parts[shapely.area(parts) >= MIN_OUTLINE_PART_CELLS * cell_area - 1e-9 * cell_area]


def _rings_op(polys: np.ndarray, min_hole_area: float, tolerance: float | None) -> np.ndarray:
    """Drop holes of area <= ``min_hole_area`` and, with ``tolerance``, simplify every ring
    (Douglas-Peucker, ring by ring: fast; validity is checked by the caller). Polygons whose
    outer ring collapses are dropped."""
    rings, owner = shapely.get_rings(polys, return_index=True)
    shell = np.ones(owner.size, dtype=bool)
    shell[1:] = owner[1:] != owner[:-1]
    keep = shell | (shapely.area(shapely.polygons(rings)) > min_hole_area)
    rings, owner, shell = rings[keep], owner[keep], shell[keep]
    if tolerance is not None:
        rings = shapely.simplify(rings, tolerance, preserve_topology=False)
        ok = shapely.get_type_id(rings) == 2                        # collapsed rings become lines
        ok &= ~np.isin(owner, owner[shell & ~ok])
        rings, owner = rings[ok], owner[ok]
    if rings.size == 0:
        return np.zeros(0, dtype=object)
    _, dense = np.unique(owner, return_inverse=True)
    return shapely.polygons(rings, indices=dense)


def _on_block_line(arr: np.ndarray, t: Affine, block: int | None) -> np.ndarray:
    """Which pieces have a bounding-box side on a block line (all when ``block`` is None)."""
    if block is None:
        return np.ones(arr.size, dtype=bool)
    b = shapely.bounds(arr)
    cols = np.rint((b[:, [0, 2]] - t.c) / t.a)
    rows = np.rint((b[:, [1, 3]] - t.f) / t.e)
    on = ((cols % block == 0) & (cols > 0)) | ((rows % block == 0) & (rows > 0))
    return on.any(axis=1)


def _merge(arr: np.ndarray) -> np.ndarray:
    """Union of polygons that overlap only along edges: union of the outer rings, then each
    hole goes back into the merged polygon that contains it (holes never cross a seam)."""
    if arr.size == 0:
        return arr
    merged = shapely.get_parts(shapely.union_all(shapely.polygons(shapely.get_exterior_ring(arr))))
    rings, owner = shapely.get_rings(arr, return_index=True)
    first = np.ones(owner.size, dtype=bool)
    first[1:] = owner[1:] != owner[:-1]
    holes, owner = rings[~first], owner[~first]
    polys = np.array(merged, dtype=object)
    if holes.size:
        # Each piece lies inside exactly one merged part; its holes go there.
        piece_idx, part_idx = shapely.STRtree(merged).query(shapely.point_on_surface(arr), predicate="within")
        part_of_piece = np.full(arr.size, -1)
        part_of_piece[piece_idx] = part_idx
        hole_part = part_of_piece[owner]
        for j in np.unique(hole_part[hole_part >= 0]):
            polys[j] = shapely.polygons(shapely.get_exterior_ring(merged[j]),
                                        holes=np.concatenate([_holes(merged[j:j + 1]), holes[hole_part == j]]))
    return polys


def _holes(polygons: np.ndarray) -> np.ndarray:
    """All interior rings of an array of polygons (vectorised)."""
    rings, idx = shapely.get_rings(polygons, return_index=True)
    first = np.ones(idx.size, dtype=bool)
    first[1:] = idx[1:] != idx[:-1]
    return rings[~first]
