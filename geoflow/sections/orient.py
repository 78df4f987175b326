"""Drawn direction of a centreline checked against the DEM.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)`` and
``dem.cell_size``.
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString

from .common import points_along


def orient_centreline(reach_id: str, line: LineString, dem) -> tuple[LineString, str | None]:
    """Check the drawn direction of a centreline against the DEM; reverse it if drawn upstream.

    The bed near each end is the median, over the first (last) 10 % of the line, of the lowest
    ground on short perpendicular profiles (:func:`end_bed_levels`). If the
    start lies lower than the end by more than max(0.05 m, 1e-4 x length) the line was drawn
    upstream: the reversed line and a warning are returned. Flat reaches (within the tolerance)
    and ends with no DEM data are left as drawn. Returns (line, warning or None).
    """
    rid = str(reach_id)
    line2 = shapely.force_2d(line)
    z_start, z_end = end_bed_levels(line2, dem)
    tol = max(0.05, 1e-4 * float(line2.length))
    if not (np.isfinite(z_start) and np.isfinite(z_end)):
        return line, f"reach {rid}: direction of flow not checked (no DEM data near an end of the centreline)"
    if z_end - z_start > tol:
        return shapely.reverse(line), (
            f"reach {rid}: centreline drawn upstream (bed {z_start:.2f} m at its start, {z_end:.2f} m at its "
            "end); reversed - draw centrelines in the direction of flow")
    return line, None


def end_bed_levels(line: LineString, dem, fraction: float = 0.1, half_cells: int = 3) -> tuple[float, float]:
    """Channel-bed level near the start and near the end of ``line`` (m; NaN if the DEM has none).

    Over the first (last) ``fraction`` of the line, short perpendicular profiles of
    +-``half_cells`` DEM cells are sampled about every cell (at most 51 profiles per end);
    the bed is the median of the profile minima, so a centreline drawn a little off the
    thalweg, or a single low cell, does not decide it.
    """
    length = float(line.length)
    cell = float(dem.cell_size)
    span = max(fraction * length, min(cell, length))
    k = int(min(max(math.ceil(span / cell), 1), 50)) + 1
    offs = np.linspace(-half_cells * cell, half_cells * cell, 2 * half_cells + 1)
    out = []
    for s in (np.linspace(0.0, span, k), np.linspace(length - span, length, k)):
        c = points_along(line, s)
        a = points_along(line, np.clip(s - cell, 0, length))
        b = points_along(line, np.clip(s + cell, 0, length))
        t = b - a
        t /= np.maximum(np.hypot(t[:, 0], t[:, 1]), 1e-12)[:, None]
        x = c[:, 0, None] - t[:, 1, None] * offs[None, :]
        y = c[:, 1, None] + t[:, 0, None] * offs[None, :]
        z = dem.sample(x, y)
        lows = np.where(np.isfinite(z), z, np.inf).min(axis=1)
        lows = lows[np.isfinite(lows)]
        out.append(float(np.median(lows)) if lows.size else float("nan"))
    return out[0], out[1]
