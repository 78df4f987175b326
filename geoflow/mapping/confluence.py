"""Where a reach that ends in a junction stops mapping: the receiving reach's side of the confluence.

A tributary's last cross-sections reach into the river it joins, and the map between them would
give the river's channel cells the tributary's water level and friction slope. On the demo that
made the tributary's velocity raster show 3.7 m/s in the main river's channel (local depth 1.7 m
under the tributary's friction slope of its last section, 0.012), where the main river's own map
gives 1.3 m/s. Those cells belong to the receiving reach's map, so the tributary leaves them dry:
every point nearer the receiving reach's centreline than the tributary's own is excluded.

"Nearer" is measured with the Voronoi diagram of both centrelines, each densified to ``step``
(shapely.voronoi_polygons), so the boundary is the bisector of the two lines to within
``step`` / 2.
"""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import box


def receiving_side(own_line, receiving_line, bounds, step: float):
    """(Multi)Polygon inside ``bounds`` of the points nearer ``receiving_line`` than ``own_line``.

    ``bounds``: (left, bottom, right, top) of the area that matters (the reach's map window);
    ``step``: densification of both lines, m (the output cell size). Empty when the receiving
    line does not come near the window.
    """
    left, bottom, right, top = bounds
    reach = max(right - left, top - bottom)
    area = box(*bounds)
    wide = box(left - reach, bottom - reach, right + reach, top + reach)
    receiving = shapely.clip_by_rect(shapely.force_2d(receiving_line), *wide.bounds)
    if receiving.is_empty:
        return shapely.Polygon()
    own = shapely.clip_by_rect(shapely.force_2d(own_line), *wide.bounds)
    pts_recv = shapely.get_coordinates(shapely.segmentize(receiving, step))
    pts_own = shapely.get_coordinates(shapely.segmentize(own, step)) if not own.is_empty else np.zeros((0, 2))
    pts_own = pts_own[~_rows_in(pts_own, pts_recv)]          # a shared vertex (the junction) counts as receiving
    pts = np.vstack([pts_recv, pts_own])
    pts, first = np.unique(pts, axis=0, return_index=True)
    is_recv = first < len(pts_recv)
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=wide))
    point_idx, cell_idx = shapely.STRtree(cells).query(shapely.points(pts), predicate="within")
    mine = cell_idx[is_recv[point_idx]]
    if mine.size == 0:
        return shapely.Polygon()
    return shapely.intersection(shapely.union_all(cells[np.unique(mine)]), area)


def _rows_in(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Which rows of ``a`` also occur in ``b`` (exact coordinates)."""
    if len(a) == 0 or len(b) == 0:
        return np.zeros(len(a), dtype=bool)
    view = np.dtype((np.void, a.dtype.itemsize * 2))
    return np.isin(np.ascontiguousarray(a).view(view).ravel(), np.ascontiguousarray(b).view(view).ravel())
