"""Per-block computations of the mapping engine (the join across blocks is in :mod:`geoflow.mapping.join`).

A block is a window of the output grid: the reach window of the DEM grid, or a coarser grid
aligned to it. For one block: read the ground (``dem.read(window)`` only), interpolate the
WSE (and further per-section values) from the section quads whose bounds touch the block,
lower the ground inside the channel where the sections' channel was replaced
(:mod:`geoflow.mapping.channel`), wet = WSE > ground, label the wet cells (8-neighbour), find the labels under the
centreline. Values at a cell depend only on its grid position, never on the block cut.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import shapely
from affine import Affine
from rasterio.features import rasterize
from rasterio.windows import Window
from scipy import ndimage
from shapely.geometry import Polygon

from .channel import ChannelLowering

EIGHT = np.ones((3, 3), dtype=bool)
CHUNK_CELLS = 1 << 20        # interpolate at most this many cells at once (bounds temporaries)


class Surface:
    """Section quads of one reach, ready to interpolate per-section values on any block.

    ``values`` (k, N): row 0 is the WSE (m) and decides which quads exist (a NaN at either
    end leaves the quad dry); further rows (e.g. friction slope) are interpolated with the
    same weights. Quad i = section line i + reversed line i+1, repaired with make_valid, and cut
    to ``clip`` (the reach's own area, see :meth:`geoflow.sections.territory.Territory.claim`) if given.
    When some section's channel ground differs from the DEM, ``lowering`` interpolates how far
    the ground is lowered (one more row after ``values``; :mod:`geoflow.mapping.channel`, in the
    frame of the reach's ``centreline``).
    """

    def __init__(self, sections, values: np.ndarray, clip=None, centreline=None):
        self.values = np.atleast_2d(np.asarray(values, dtype=np.float64))
        wse = self.values[0]
        quads, index = [], []
        for i in np.flatnonzero(np.isfinite(wse[:-1]) & np.isfinite(wse[1:])):
            ring = list(sections[i].line.coords) + list(sections[i + 1].line.coords)[::-1]
            quad = Polygon([c[:2] for c in ring])
            quad = quad if quad.is_valid and quad.area > 0 else polygonal(shapely.make_valid(quad))  # bends
            if quad is not None and clip is not None:
                quad = polygonal(shapely.intersection(quad, clip))
            if quad is not None:
                quads.append(quad)
                index.append(i)
        self.quads = np.array(quads, dtype=object)
        self.index = np.array(index, dtype=np.int64)
        self.bounds = shapely.bounds(self.quads) if quads else np.zeros((0, 4))
        self.pieces = _pieces([s.line for s in sections])   # (N, P, 4): x0, y0, x1, y1 of each straight piece
        self._piece_columns = [_segment_columns(self.pieces[:, p]) for p in range(self.pieces.shape[1])]
        self.lowering = ChannelLowering.from_sections(sections, centreline)
        if self.lowering is not None:       # the most each section lowers the ground (0 outside its channel)
            self.most_lowered = np.maximum(self.lowering.lowering.max(axis=1), 0.0)

    def touching(self, left: float, bottom: float, right: float, top: float) -> np.ndarray:
        """Indices (into ``quads``) of the quads whose bounds meet the box."""
        b = self.bounds
        return np.flatnonzero((b[:, 0] <= right) & (b[:, 2] >= left) & (b[:, 1] <= top) & (b[:, 3] >= bottom))

    def interpolate(self, grid_transform: Affine, row_off: int, col_off: int, shape_rc, sel=None,
                    ground: np.ndarray | None = None) -> np.ndarray:
        """(k, rows, cols) values on a block of the grid (k + 1 with the lowering row); NaN outside every quad.

        Cell (r, c) of the block has its centre at grid cell (row_off + r, col_off + c), so
        the numbers do not depend on how the grid is cut into blocks. A cell inside several
        quads takes the lowest index (the most upstream pair).

        With ``ground`` (rows, cols; the DEM), only cells that can be wet are computed: the WSE in
        quad i is a weighted mean of wse_i and wse_i+1, and the channel lowering a weighted mean of
        the two sections' lowerings, so where the DEM is at or above the larger WSE plus the larger
        lowering of the two (or unknown) the cell is dry whatever the weights, and is left NaN.
        """
        rows = self.values.shape[0] + (self.lowering is not None)
        out = np.full((rows,) + tuple(shape_rc), np.nan)
        sel = self.touching(*block_bounds(grid_transform, row_off, col_off, shape_rc)) if sel is None else sel
        if sel.size == 0:
            return out
        label = self.quad_labels(grid_transform, row_off, col_off, shape_rc, sel)
        cells = np.flatnonzero(label >= 0)
        if ground is not None:
            cells = cells[self._can_be_wet(self.values[0], label[cells], np.asarray(ground).ravel()[cells])]
        flat = out.reshape(out.shape[0], -1)
        for start in range(0, cells.size, CHUNK_CELLS):
            part = cells[start:start + CHUNK_CELLS]
            flat[:, part] = self._weights_and_values(grid_transform, row_off, col_off, shape_rc[1], part, label[part])
        return out

    def quad_labels(self, grid_transform: Affine, row_off: int, col_off: int, shape_rc, sel) -> np.ndarray:
        """(rows * cols,) int32: the quad index (lowest wins) of each cell of a block, -1 outside."""
        transform = grid_transform @ Affine.translation(col_off, row_off)
        burn = [(self.quads[j], int(self.index[j])) for j in sel[::-1]]     # later shapes win
        return rasterize(burn, out_shape=shape_rc, transform=transform, fill=-1, dtype="int32").ravel()

    def _can_be_wet(self, wse: np.ndarray, idx: np.ndarray, ground_at: np.ndarray) -> np.ndarray:
        """Cells in quad ``idx`` whose ground lies below the larger WSE ``wse`` (N,) of the quad's two
        sections plus the larger lowering (NaN ground: False, dry)."""
        top = np.maximum(wse[idx], wse[idx + 1])
        if self.lowering is not None:
            top = top + np.maximum(self.most_lowered[idx], self.most_lowered[idx + 1])
        return ground_at < top

    def _weights_and_values(self, gt, row_off, col_off, ncols, part, idx) -> np.ndarray:
        """Inverse-distance (linear) blend of sections idx and idx+1 at the cells ``part`` (distances
        to the section polylines, so dog-leg sections blend like straight ones)."""
        w_up, lowered = self._weights(gt, row_off, col_off, ncols, part, idx)
        vals = w_up * self.values[:, idx] + (1.0 - w_up) * self.values[:, idx + 1]
        return vals if lowered is None else np.vstack([vals, lowered[None, :]])

    def _weights(self, gt, row_off, col_off, ncols, part, idx) -> tuple[np.ndarray, np.ndarray | None]:
        """Weight of section idx (that of idx + 1 is 1 - w) at the cells ``part``, and the channel
        lowering there (None without one): both set by the geometry alone."""
        rows, cols = np.divmod(part, ncols)
        x = gt.c + gt.a * (cols + col_off + 0.5)
        y = gt.f + gt.e * (rows + row_off + 0.5)
        d_up = self._distance_to(x, y, idx)
        d_dn = self._distance_to(x, y, idx + 1)
        total = d_up + d_dn
        w_up = np.divide(d_dn, total, out=np.ones_like(total), where=total > 0)
        return w_up, (None if self.lowering is None else self.lowering.at(x, y, idx, w_up))

    def shared_weights(self, grid_transform: Affine, row_off: int, col_off: int, shape_rc, sel,
                       ground: np.ndarray, wse_top: np.ndarray) -> "SharedWeights":
        """The geometry part of :meth:`interpolate` on a block, once for several WSE profiles
        that share this surface's quads: the cells that can be wet under the highest profile
        ``wse_top`` (N,), their quad index, weight and channel lowering. Each profile then takes
        its own cells and values with :meth:`interpolate_shared`, the same numbers as
        :meth:`interpolate` gives it (every operation is cell by cell)."""
        label = self.quad_labels(grid_transform, row_off, col_off, shape_rc, sel)
        cells = np.flatnonzero(label >= 0)
        ground_flat = np.asarray(ground).ravel()
        cells = cells[self._can_be_wet(wse_top, label[cells], ground_flat[cells])]
        idx = label[cells]
        w_up, lowered = np.empty(cells.size), (None if self.lowering is None else np.empty(cells.size))
        for start in range(0, cells.size, CHUNK_CELLS):
            part = slice(start, start + CHUNK_CELLS)
            w, low = self._weights(grid_transform, row_off, col_off, shape_rc[1], cells[part], idx[part])
            w_up[part] = w
            if lowered is not None:
                lowered[part] = low
        return SharedWeights(tuple(shape_rc), cells, idx, w_up, lowered, ground_flat[cells])

    def interpolate_shared(self, share: "SharedWeights") -> np.ndarray:
        """:meth:`interpolate` (with ``ground``) of this surface's values from ``share``."""
        rows = self.values.shape[0] + (self.lowering is not None)
        out = np.full((rows,) + share.shape, np.nan)
        keep = self._can_be_wet(self.values[0], share.idx, share.ground)
        idx, w_up = share.idx[keep], share.w_up[keep]
        flat = out.reshape(rows, -1)
        flat[:self.values.shape[0], share.cells[keep]] = w_up * self.values[:, idx] + (1.0 - w_up) * self.values[:, idx + 1]
        if share.lowered is not None:
            flat[-1, share.cells[keep]] = share.lowered[keep]
        return out

    def same_quads(self, other: "Surface") -> bool:
        """True when ``other`` has the same quads (same sections, clip and wet pairs)."""
        return self.index.shape == other.index.shape and bool(np.all(self.index == other.index))


    def _distance_to(self, x: np.ndarray, y: np.ndarray, which: np.ndarray) -> np.ndarray:
        """Distance from (x, y) to the polyline of section ``which`` (row by row), as
        :func:`point_polyline_distance` on ``self.pieces[which]``, computed in place."""
        d = [_distance(x, y, *(c.take(which) for c in cols)) for cols in self._piece_columns]
        return d[0] if len(d) == 1 else np.minimum.reduce(d)


def polygonal(geom):
    """Polygon parts of ``geom`` joined into one (Multi)Polygon, or None when there is no area."""
    parts = shapely.get_parts(shapely.get_parts(geom))
    parts = parts[(shapely.get_type_id(parts) == 3) & (shapely.area(parts) > 0)]
    return shapely.union_all(parts) if len(parts) else None


def _pieces(lines) -> np.ndarray:
    """(N, P, 4) straight pieces of each section line (a dog-leg has up to three), padded by
    repeating the last piece (which leaves the minimum distance unchanged)."""
    coords = [np.asarray(g.coords)[:, :2] for g in lines]
    most = max(len(c) for c in coords) - 1
    out = np.empty((len(coords), most, 4))
    for k, c in enumerate(coords):
        seg = np.hstack((c[:-1], c[1:]))
        out[k, :len(seg)] = seg
        out[k, len(seg):] = seg[-1]
    return out


def point_polyline_distance(x: np.ndarray, y: np.ndarray, pieces: np.ndarray) -> np.ndarray:
    """Euclidean distance from points (x, y) to polylines given as pieces (K, P, 4), row by row."""
    d = np.stack([point_segment_distance(x, y, pieces[:, p]) for p in range(pieces.shape[1])])
    return d.min(axis=0)


def point_segment_distance(x: np.ndarray, y: np.ndarray, seg: np.ndarray) -> np.ndarray:
    """Euclidean distance from points (x, y) to segments ``seg[:, [x0, y0, x1, y1]]``, row by row."""
    return _distance(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64),
                     *_segment_columns(np.asarray(seg, dtype=np.float64)))


def _segment_columns(seg: np.ndarray) -> tuple[np.ndarray, ...]:
    """Contiguous x0, y0, dx, dy and squared length of segments ``seg[:, [x0, y0, x1, y1]]``."""
    x0, y0 = np.ascontiguousarray(seg[:, 0]), np.ascontiguousarray(seg[:, 1])
    dx, dy = seg[:, 2] - x0, seg[:, 3] - y0
    return x0, y0, dx, dy, dx * dx + dy * dy


def _distance(x, y, x0, y0, dx, dy, len2) -> np.ndarray:
    """Distance from (x, y) to the segments (x0, y0) + t (dx, dy), 0 <= t <= 1, row by row.

    t = ((x - x0) dx + (y - y0) dy) / len2 clipped to [0, 1] (0 for a zero-length segment); the
    distance is |(x, y) - ((x0, y0) + t (dx, dy))|. Computed in place on the (fresh) ``dx`` and
    ``dy`` rows: the same operations, in the same order, as the plain expression, without its
    temporaries.
    """
    t = x - x0
    t *= dx
    u = y - y0
    u *= dy
    t += u
    np.divide(t, len2, out=t, where=len2 > 0)
    t[~(len2 > 0)] = 0.0
    np.clip(t, 0.0, 1.0, out=t)
    px, py = dx * t, dy * t
    px += x0
    py += y0
    np.subtract(x, px, out=px)
    np.subtract(y, py, out=py)
    return np.hypot(px, py, out=px)


def block_bounds(grid_transform: Affine, row_off: int, col_off: int, shape_rc) -> tuple[float, float, float, float]:
    """(left, bottom, right, top) of a block of a north-up grid."""
    t = grid_transform
    xs = (t.c + t.a * col_off, t.c + t.a * (col_off + shape_rc[1]))
    ys = (t.f + t.e * row_off, t.f + t.e * (row_off + shape_rc[0]))
    return min(xs), min(ys), max(xs), max(ys)


@dataclass(frozen=True, eq=False)
class SharedWeights:
    """What several WSE profiles share on one block (:meth:`Surface.shared_weights`)."""

    shape: tuple[int, int]
    cells: np.ndarray          # flat indices of the cells that can be wet under the highest profile
    idx: np.ndarray            # their quad index
    w_up: np.ndarray           # weight of section idx
    lowered: np.ndarray | None  # channel lowering at them (m)
    ground: np.ndarray         # ground there (m)


@dataclass(frozen=True)
class Grid:
    """Output grid of a reach: DEM window ``dem_window``, coarsening ``factor``, block size."""

    dem_window: Window            # on the DEM grid; width/height are multiples of factor
    transform: Affine             # of the output grid
    shape: tuple[int, int]        # output rows, cols
    factor: int
    block: int

    def window(self, bi: int, bj: int) -> Window:
        """Block (bi, bj) as a Window on the output grid."""
        r0, c0 = bi * self.block, bj * self.block
        return Window(c0, r0, min(self.block, self.shape[1] - c0), min(self.block, self.shape[0] - r0))

    def blocks(self):
        """(bi, bj, Window on the output grid) in row-major order."""
        rows, cols = self.shape
        for bi, r0 in enumerate(range(0, rows, self.block)):
            for bj, c0 in enumerate(range(0, cols, self.block)):
                yield bi, bj, Window(c0, r0, min(self.block, cols - c0), min(self.block, rows - r0))

    def read_ground(self, dem, win: Window) -> np.ndarray:
        """Ground (m, float64) on an output block, k x k mean of the valid DEM cells when coarse."""
        f = self.factor
        dem_win = Window(self.dem_window.col_off + win.col_off * f, self.dem_window.row_off + win.row_off * f,
                         win.width * f, win.height * f)
        z = dem.read(dem_win)
        if f > 1:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)   # all-NaN blocks stay NaN
                z = np.nanmean(z.reshape(win.height, f, win.width, f), axis=(1, 3))
        return z


@dataclass
class BlockData:
    """Everything computed on one block (output grid)."""

    window: Window
    transform: Affine
    wse: np.ndarray
    depth: np.ndarray               # NaN where dry
    labels: np.ndarray              # int32, 0 = dry
    count: int
    seeded: np.ndarray              # local ids under the centreline
    velocity: np.ndarray | None = None


def compute_block(ctx, grid: Grid, win: Window) -> BlockData | None:
    """WSE, depth, labels (and velocity) on one block; None when no quad touches it."""
    shape_rc = (int(win.height), int(win.width))
    box = block_bounds(grid.transform, win.row_off, win.col_off, shape_rc)
    sel = ctx.surface.touching(*box)
    if sel.size == 0:
        return None
    ground = grid.read_ground(ctx.dem, win)
    vals = ctx.surface.interpolate(grid.transform, int(win.row_off), int(win.col_off), shape_rc, sel, ground=ground)
    return _block_data(ctx, grid, win, box, ground, vals)


def compute_blocks(ctxs: list, grid: Grid, win: Window) -> list:
    """:func:`compute_block` of several contexts (WSE profiles of one reach on one grid) on one
    block: the ground is read once, and contexts whose surfaces have the same quads share the
    quad labels, weights and channel lowering (:meth:`Surface.shared_weights`). The same
    BlockData, cell for cell, as :func:`compute_block` of each context."""
    if len(ctxs) == 1:
        return [compute_block(ctxs[0], grid, win)]
    shape_rc = (int(win.height), int(win.width))
    box = block_bounds(grid.transform, win.row_off, win.col_off, shape_rc)
    sels = [c.surface.touching(*box) for c in ctxs]
    out: list = [None] * len(ctxs)
    todo = [k for k, sel in enumerate(sels) if sel.size]
    if not todo:
        return out
    ground = grid.read_ground(ctxs[todo[0]].dem, win)
    while todo:
        lead = ctxs[todo[0]].surface
        group = [k for k in todo if ctxs[k].surface.same_quads(lead)]
        todo = [k for k in todo if k not in group]
        top = np.max(np.stack([ctxs[k].surface.values[0] for k in group]), axis=0)
        share = lead.shared_weights(grid.transform, int(win.row_off), int(win.col_off), shape_rc, sels[group[0]],
                                    ground, top)
        for k in group:
            out[k] = _block_data(ctxs[k], grid, win, box, ground, ctxs[k].surface.interpolate_shared(share))
    return out


def _block_data(ctx, grid: Grid, win: Window, box, ground: np.ndarray, vals: np.ndarray) -> BlockData:
    """Depth, wet labels, seeded labels (and velocity) of a block from its interpolated values."""
    shape_rc = ground.shape
    if ctx.surface.lowering is not None:
        ground = ground - np.nan_to_num(vals[-1])       # the channel the sections use, below the DEM
    with np.errstate(invalid="ignore"):
        depth = vals[0] - ground
        wet = np.isfinite(depth) & (depth > 0)
    transform = grid.transform @ Affine.translation(win.col_off, win.row_off)
    depth[~wet] = np.nan
    labels, count = ndimage.label(wet, structure=EIGHT)
    seeded = np.zeros(0, dtype=np.int32)
    line = shapely.clip_by_rect(ctx.centreline, box[0] - ctx.cell, box[1] - ctx.cell,
                                box[2] + ctx.cell, box[3] + ctx.cell)
    if count and not line.is_empty:
        seed = rasterize([(line, 1)], out_shape=shape_rc, transform=transform, fill=0, all_touched=True,
                         dtype="uint8").astype(bool)
        seeded = np.unique(labels[seed & wet])
    data = BlockData(win, transform, vals[0], depth, labels.astype(np.int32), int(count), seeded)
    if ctx.velocity is not None and count:
        data.velocity = ctx.velocity.on_block(win, transform, depth, vals[1])
    return data


def block_layers(data: BlockData, keep_local: np.ndarray) -> dict:
    """float32 layers of a block, NaN except on the components with ``keep_local[label]``."""
    mask = keep_local[data.labels]
    out = {"wse": np.where(mask, data.wse, np.nan).astype(np.float32),
           "depth": np.where(mask, data.depth, np.nan).astype(np.float32)}
    if data.velocity is not None:
        out["velocity"] = np.where(mask, data.velocity, np.nan).astype(np.float32)
    return out
