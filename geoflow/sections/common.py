"""Shared pieces of every way of making sections: sampling the DEM, filling small gaps, checks.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size`` and ``dem.bounds``.
"""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString

from ..errors import GeometryError
from ..records import Section

MAX_GAP_SAMPLES = 3          # nodata runs up to this many samples are interpolated
ONE_READ_CELLS = 4_000_000   # sample many points in one DEM read when their box is this small


def build_sections(rid: str, chain, lines, stations, elevations, flags, warnings) -> list[Section]:
    """Section records from sampled profiles; short nodata runs filled, long ones an error."""
    sections = []
    for k in range(len(chain)):
        z, filled = fill_small_gaps(elevations[k], MAX_GAP_SAMPLES)
        if z is None:
            raise GeometryError(
                f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) has DEM nodata over more than "
                f"{MAX_GAP_SAMPLES} samples; fill the DEM holes, extend the DEM or reduce [sections] width"
            )
        if filled:
            flags[k].append("ground_gap_filled")
            warnings.append(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m): {filled} nodata sample(s) interpolated")
        sections.append(Section(reach_id=rid, section_id=k, chainage=float(chain[k]), line=lines[k],
                                station=stations[k], elevation=z, flags=tuple(flags[k])))
    return sections


def fill_small_gaps(values: np.ndarray, max_gap: int = MAX_GAP_SAMPLES) -> tuple[np.ndarray | None, int]:
    """Fill NaN runs of at most ``max_gap`` samples by linear interpolation along the profile.

    Runs touching an end take the nearest valid value. Returns (filled copy, number of
    samples filled), or (None, 0) when a longer run (or no valid sample) exists.
    """
    v = np.asarray(values, dtype=np.float64)
    bad = ~np.isfinite(v)
    if not bad.any():
        return v.copy(), 0
    if bad.all():
        return None, 0
    edges = np.diff(np.concatenate(([0], bad.astype(np.int8), [0])))
    run_len = np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)
    if run_len.max() > max_gap:
        return None, 0
    idx = np.arange(v.size)
    out = v.copy()
    out[bad] = np.interp(idx[bad], idx[~bad], v[~bad])
    return out, int(bad.sum())


def check_positive(rid: str, **values: float) -> None:
    for key, value in values.items():
        if not (value is not None and np.isfinite(value) and value > 0):
            raise GeometryError(f"reach {rid}: [sections] {key} = {value!r} must be a positive number of metres")


def check_inside(rid: str, line: LineString, bounds) -> None:
    extent = shapely.box(*bounds)
    if not shapely.covers(extent, line):
        outside = shapely.length(shapely.difference(line, extent))
        raise GeometryError(
            f"reach {rid}: {outside:.1f} m of the {line.length:.1f} m centreline lies outside the DEM extent "
            f"{tuple(round(b, 1) for b in bounds)}; use a DEM that covers the reach or clip the centreline"
        )


def sample_many(dem, xs: list[np.ndarray], ys: list[np.ndarray]) -> list[np.ndarray]:
    """Bilinear ground elevations at several point sets (one DEM read when their box is small)."""
    allx, ally = np.concatenate(xs), np.concatenate(ys)
    cells = (np.ptp(allx) / dem.cell_size + 2) * (np.ptp(ally) / dem.cell_size + 2)
    if cells <= ONE_READ_CELLS:
        z = dem.sample(allx, ally)
        return np.split(z, np.cumsum([x.size for x in xs])[:-1])
    return [dem.sample(x, y) for x, y in zip(xs, ys)]


def locate_along(line: LineString, xy: np.ndarray) -> np.ndarray:
    """Distance along ``line`` (m from its start) of the point of the line nearest to each point
    (K, 2): ``shapely.line_locate_point`` for many points on a long line.

    The same arithmetic as GEOS (the first segment at the least distance, the point's projection
    factor on it clipped to [0, 1], the lengths of the segments before it summed in order), but
    the nearest segment is found with an STRtree of the line's segments (``all_matches``: among
    segments at the same distance the first wins, as in GEOS) instead of a walk over every
    segment for every point: O((vertices + points) log vertices) instead of O(vertices x points).
    """
    pts = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    coords = shapely.get_coordinates(line)
    if len(coords) < 2 or len(pts) == 0:
        return np.zeros(len(pts))
    dx, dy = np.diff(coords[:, 0]), np.diff(coords[:, 1])
    seg_len = np.sqrt(dx * dx + dy * dy)
    before = np.concatenate(([0.0], np.cumsum(seg_len)))
    tree = shapely.STRtree(shapely.linestrings(np.stack((coords[:-1], coords[1:]), axis=1)))
    (which, seg), _ = tree.query_nearest(shapely.points(pts), all_matches=True, return_distance=True)
    first = np.full(len(pts), np.iinfo(np.int64).max)
    np.minimum.at(first, which, seg)
    k = first
    len2 = dx[k] * dx[k] + dy[k] * dy[k]
    r = np.divide((pts[:, 0] - coords[k, 0]) * dx[k] + (pts[:, 1] - coords[k, 1]) * dy[k], len2,
                  out=np.zeros(len(pts)), where=len2 > 0)
    return before[k] + np.clip(r, 0.0, 1.0) * seg_len[k]


def points_along(line: LineString, distances) -> np.ndarray:
    """(n, 2) points at ``distances`` (m from the start, clipped to the line) along a LineString.

    The same arithmetic as ``shapely.line_interpolate_point`` (GEOS walks the segments adding
    their lengths, then p = p0 + f (p1 - p0) on the segment reached), but with the cumulative
    lengths found once and ``searchsorted``: O(vertices + points) instead of O(vertices x
    points), which matters for one point per section on a long centreline.
    """
    d = np.clip(np.asarray(distances, dtype=np.float64).ravel(), 0.0, None)
    xy = shapely.get_coordinates(line)
    if len(xy) < 2:
        return np.repeat(xy[:1], d.size, axis=0)
    dx, dy = np.diff(xy[:, 0]), np.diff(xy[:, 1])
    seg = np.sqrt(dx * dx + dy * dy)
    start = np.concatenate(([0.0], np.cumsum(seg)))            # length before each vertex
    k = np.searchsorted(start, d, side="right") - 1             # last vertex at or before d ...
    k = np.clip(k, 0, len(seg) - 1)
    while True:                                                  # ... on a segment of positive length
        zero = (seg[k] == 0) & (k < len(seg) - 1)
        if not zero.any():
            break
        k[zero] += 1
    beyond = d >= start[-1]
    frac = np.divide(d - start[k], seg[k], out=np.ones_like(d), where=seg[k] > 0)
    out = np.column_stack((xy[k, 0] + frac * (xy[k + 1, 0] - xy[k, 0]), xy[k, 1] + frac * (xy[k + 1, 1] - xy[k, 1])))
    out[beyond] = xy[-1]
    return out
