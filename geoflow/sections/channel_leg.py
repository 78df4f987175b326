"""Where the channel ends across each section: the bend points of dog-leg sections.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``.

Channel edges along the channel normal come from the channel land-cover polygons when given (the
piece of the normal inside a channel polygon that holds, or is nearest to, the centre point), or
else from the ground by break in slope (:func:`geoflow.sections.banks.detect_banks`). The bend of
a dog-leg lies ``margin`` beyond each edge: max(a sample step, 0.15 x the channel's top
width), so the whole channel and its banks lie on the channel leg (common practice, no source).
"""
from __future__ import annotations

import numpy as np
import shapely

from .banks import detect_banks
from .common import sample_many


def channel_edges(centre: np.ndarray, normal: np.ndarray, max_half: float, step: float, dem=None,
                  channel=None) -> tuple[np.ndarray, np.ndarray]:
    """(N, 2) distances (m) from each centre to the left / right channel edge, and (N,) found-in-cover mask."""
    n = centre.shape[0]
    edges = np.full((n, 2), np.nan)
    if channel is not None and len(channel):
        edges = _edges_from_polygons(centre, normal, max_half, channel)
    found = np.isfinite(edges).all(axis=1)
    missing = np.flatnonzero(~found)
    if missing.size and dem is not None:
        edges[missing] = _edges_from_ground(centre[missing], normal[missing], max_half, step, dem)
    edges = np.where(np.isfinite(edges), edges, step)
    return np.clip(edges, 0.0, max_half), found


def bend_distances(edges: np.ndarray, step: float) -> np.ndarray:
    """(N, 2) bend distances from the centre: each edge plus the margin of the module notes."""
    width = edges.sum(axis=1, keepdims=True)
    return edges + np.maximum(step, 0.15 * width)


def _edges_from_polygons(centre, normal, max_half, channel) -> np.ndarray:
    polys = np.asarray(channel, dtype=object)
    tree = shapely.STRtree(polys)
    lines = shapely.linestrings(np.stack((centre + max_half * normal, centre - max_half * normal), axis=1))
    li, pi = tree.query(lines, predicate="intersects")
    out = np.full((centre.shape[0], 2), np.nan)
    if li.size == 0:
        return out
    pieces = shapely.intersection(lines[li], polys[pi])
    parts, owner = shapely.get_parts(pieces, return_index=True)
    owner = li[owner]
    keep = shapely.get_type_id(parts) == shapely.GeometryType.LINESTRING
    parts, owner = parts[keep], owner[keep]
    if parts.size == 0:
        return out
    ends = np.stack([shapely.get_coordinates(shapely.get_point(parts, k)) for k in (0, -1)], axis=1)
    # signed offsets of the piece ends along the left normal; the piece spans [lo, hi]
    rel = ends - centre[owner][:, None, :]
    off = np.einsum("pek,pk->pe", rel, normal[owner])
    lo, hi = off.min(axis=1), off.max(axis=1)
    gap = np.maximum(lo, 0.0) + np.maximum(-hi, 0.0)        # 0 when the piece holds the centre
    best = np.full(centre.shape[0], np.inf)
    np.minimum.at(best, owner, gap)
    chosen = gap <= best[owner] + 1e-9
    for p in np.flatnonzero(chosen):                         # a few pieces per section
        k = owner[p]
        out[k, 0] = max(hi[p], 0.0) if np.isnan(out[k, 0]) else max(out[k, 0], hi[p])
        out[k, 1] = max(-lo[p], 0.0) if np.isnan(out[k, 1]) else max(out[k, 1], -lo[p])
    return out


def _edges_from_ground(centre, normal, max_half, step, dem) -> np.ndarray:
    half = min(max_half, 60.0 * step)
    k = max(int(np.ceil(half / step)), 2)
    offs = np.linspace(half, -half, 2 * k + 1)                 # left end first
    xs = list(centre[:, 0, None] + offs[None, :] * normal[:, 0, None])
    ys = list(centre[:, 1, None] + offs[None, :] * normal[:, 1, None])
    out = np.full((centre.shape[0], 2), np.nan)
    for i, z in enumerate(sample_many(dem, xs, ys)):
        if not np.all(np.isfinite(z)):
            continue
        st = half - offs
        left, right = detect_banks(st, z, half)
        out[i] = (half - left, right - half)
    return out


def typical_channel_half_width(line, channel, samples: int = 25, reach: float = 200.0) -> float:
    """Median half top width (m) of the channel polygons along ``line`` (10 m if none are found).

    Measured at ``samples`` points along the line, across it (normal from a chord of +-1 m).
    """
    length = float(line.length)
    s = np.linspace(0.05, 0.95, samples) * length
    c = shapely.get_coordinates(shapely.line_interpolate_point(line, s))
    a = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(s - 1.0, 0, length)))
    b = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(s + 1.0, 0, length)))
    t = (b - a) / np.maximum(np.hypot(*(b - a).T), 1e-12)[:, None]
    if channel is None or not len(channel):
        return 10.0
    edges = _edges_from_polygons(c, np.column_stack((-t[:, 1], t[:, 0])), reach, channel)
    ok = np.isfinite(edges).all(axis=1)
    return float(np.median(0.5 * edges[ok].sum(axis=1))) if ok.any() else 10.0
