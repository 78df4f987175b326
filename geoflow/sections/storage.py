"""Parts of sections that hold water but carry no flow: storage, not conveyance.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``.

A floodplain segment is storage when (rules of common practice, no source; thresholds ours):

* it lies in a polygon the user drew as carrying no flow (``[sections] storage_areas``); or
* the obvious cases are detected (``detect``): the flow path from the segment to the next section
  downstream, or to the previous one upstream, crosses ground that stands more than
  ``BLOCK_M`` above both of the path's ends. The path runs down the valley (along the valley axis
  when the reach has one, else along the channel) until it meets the neighbour section. So the
  floodplain behind an embankment across the valley, away from its opening, is storage on the
  sections at its faces; so are a side valley's floor that neighbouring sections meet as a wall,
  a pit behind its bund, and a dead-end backwater cut off downstream.

Channel segments are never storage. The hydraulic tables count a storage segment's area and top
width but give it no conveyance (:func:`geoflow.hydraulics.build_table`, ``storage``).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import shapely

from ..records import CHANNEL, ReachGeometry
from .common import locate_along, points_along, sample_many

BLOCK_M = 0.5             # a ridge this much higher than both ends of a flow path blocks it
PROBE_STEPS = 2           # flow paths start every this many sample steps along a section
RAY_CHUNK = 5_000         # flow paths sampled together (bounds memory on long reaches: ~60 MB at 1 m steps)


def mark_storage(geom: ReachGeometry, dem=None, areas=None, detect: bool = True,
                 step: float | None = None) -> ReachGeometry:
    """``geom`` with each section's ``storage`` mask set (and flag ``storage`` where any is set).

    ``areas``: polygons that carry no flow (DEM CRS), or None. ``part`` must be set.
    """
    secs = geom.sections
    mids = [_segment_midpoints(s) for s in secs]
    masks = [np.zeros(s.station.size - 1, dtype=bool) for s in secs]
    if areas is not None and len(areas):
        tree = shapely.STRtree(np.asarray(areas, dtype=object))
        for k, xy in enumerate(mids):
            hit, _ = tree.query(shapely.points(xy), predicate="intersects")
            masks[k][np.unique(hit)] = True
    if detect and dem is not None and len(secs) > 1:
        step = float(step if step is not None else dem.cell_size)
        for k, blocked in enumerate(_blocked_paths(geom, mids, dem, step)):
            masks[k] |= blocked
    out, warnings = [], list(geom.warnings)
    for sec, mask in zip(secs, masks):
        mask &= np.asarray(sec.part) != CHANNEL
        flags = tuple(sec.flags) + (("storage",) if mask.any() and "storage" not in sec.flags else ())
        out.append(dataclasses.replace(sec, storage=mask if mask.any() else None, flags=flags))
        if mask.any():
            width = float(np.sum(np.diff(sec.station)[mask]))
            warnings.append(f"reach {geom.reach_id}: section {sec.section_id} (chainage {sec.chainage:.1f} m): "
                            f"{width:.0f} m of floodplain carry no flow (storage)")
    return dataclasses.replace(geom, sections=tuple(out), warnings=tuple(warnings))


def _segment_midpoints(sec) -> np.ndarray:
    mid = 0.5 * (sec.station[:-1] + sec.station[1:]) * (sec.line.length / sec.station[-1])
    return points_along(sec.line, mid)


def _direction(geom: ReachGeometry, xy: np.ndarray) -> np.ndarray:
    """Unit down-valley direction at points (the valley axis, else the centreline), (K, 2)."""
    ref = geom.valley_axis if geom.valley_axis is not None else geom.centreline
    length = float(ref.length)
    u = locate_along(ref, xy)
    h = max(1.0, 0.005 * length)
    a = points_along(ref, np.clip(u - h, 0, length))
    b = points_along(ref, np.clip(u + h, 0, length))
    d = b - a
    return d / np.maximum(np.hypot(d[:, 0], d[:, 1]), 1e-12)[:, None]


def _blocked_paths(geom: ReachGeometry, mids: list, dem, step: float) -> list[np.ndarray]:
    """Per section: whether each segment's path to a neighbour section crosses a blocking ridge.

    Paths start every PROBE_STEPS sample steps along the floodplain; each segment takes the
    answer of the nearest start. All paths of the reach are sampled in one DEM read.
    """
    secs = geom.sections
    chain = np.array([s.chainage for s in secs])
    reach = 1.5 * float(np.max(np.diff(chain))) + step
    lines = np.asarray([s.line for s in secs], dtype=object)
    probes, xy_all, t_all, target, owner = [], [], [], [], []
    for k, sec in enumerate(secs):
        fp = np.flatnonzero(np.asarray(sec.part) != CHANNEL)
        if fp.size == 0:
            probes.append((fp, fp, fp))
            continue
        mid_st = 0.5 * (sec.station[:-1] + sec.station[1:])[fp]
        probe_st = np.arange(mid_st[0], mid_st[-1] + PROBE_STEPS * step, PROBE_STEPS * step)
        probe = np.unique(np.clip(np.searchsorted(mid_st, probe_st), 0, fp.size - 1))
        probes.append((fp, mid_st, probe))
        xy = mids[k][fp[probe]]
        t = _direction(geom, xy)
        for j, sign in ((k + 1, 1.0), (k - 1, -1.0)):
            if 0 <= j < len(secs):
                xy_all.append(xy)
                t_all.append(sign * t)
                target.append(np.full(len(xy), j))
                owner.append(np.stack((np.full(len(xy), k), np.arange(len(xy))), axis=1))
    if not xy_all:
        return [np.zeros(s.station.size - 1, dtype=bool) for s in secs]
    who = np.concatenate(owner)
    hit = ridge_between(np.concatenate(xy_all), np.concatenate(t_all), lines[np.concatenate(target)], reach, dem, step)
    out = []
    for k, (sec, (fp, mid_st, probe)) in enumerate(zip(secs, probes)):
        blocked = np.zeros(sec.station.size - 1, dtype=bool)
        if fp.size:
            mine = who[:, 0] == k
            h = np.zeros(probe.size, dtype=bool)
            np.logical_or.at(h, who[mine, 1], hit[mine])
            at = np.clip(np.searchsorted(0.5 * (mid_st[probe][1:] + mid_st[probe][:-1]), mid_st), 0, probe.size - 1)
            blocked[fp] = h[at]
        out.append(blocked)
    return out


def first_crossing(xy: np.ndarray, ray: np.ndarray, target) -> tuple[np.ndarray, np.ndarray]:
    """Whether each segment xy -> xy + ray (K, 2) meets its polyline ``target`` (K geometries)
    and the distance from xy to the nearest common point (0 where they do not meet).

    The distance from xy to ``shapely.intersection(segment, target)``, solved for every piece of
    the targets at once (padded to the longest): the crossing with a piece A -> B at
    xy + u ray = A + v (B - A), 0 <= u, v <= 1; a piece on the same line as the segment meets it
    where their spans overlap. Instead of one GEOS overlay per ray.
    """
    coords, which = shapely.get_coordinates(target, return_index=True)
    k = len(xy)
    if coords.size == 0:
        return np.zeros(k, dtype=bool), np.zeros(k)
    count = np.bincount(which, minlength=k)
    first = np.concatenate(([0], np.cumsum(count)[:-1]))
    m = max(int(count.max()) - 1, 1)
    j = np.arange(m)[None, :]
    valid = j < (count - 1)[:, None]                                         # (K, m) pieces
    ia = np.minimum(first[:, None] + j, len(coords) - 1)
    ib = np.minimum(ia + 1, len(coords) - 1)
    a, e = coords[ia], coords[ib] - coords[ia]                               # (K, m, 2)
    d = ray[:, None, :]
    w = a - xy[:, None, :]
    denom = d[..., 0] * e[..., 1] - d[..., 1] * e[..., 0]
    cross_wd = w[..., 0] * d[..., 1] - w[..., 1] * d[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        u = (w[..., 0] * e[..., 1] - w[..., 1] * e[..., 0]) / denom
        v = cross_wd / denom
        meets = valid & (denom != 0) & (u >= 0) & (u <= 1) & (v >= 0) & (v <= 1)
        dd = (d[..., 0] * d[..., 0] + d[..., 1] * d[..., 1])
        ua = (w[..., 0] * d[..., 0] + w[..., 1] * d[..., 1]) / dd              # A and B along the ray
        ub = ua + (e[..., 0] * d[..., 0] + e[..., 1] * d[..., 1]) / dd
    lo, hi = np.maximum(np.minimum(ua, ub), 0.0), np.minimum(np.maximum(ua, ub), 1.0)
    along = valid & (denom == 0) & (cross_wd == 0) & (lo <= hi)
    u = np.where(meets, u, np.where(along, lo, np.inf)).min(axis=1)
    ok = np.isfinite(u)
    return ok, np.where(ok, u, 0.0) * np.sqrt(ray[:, 0] ** 2 + ray[:, 1] ** 2)


def ridge_between(xy: np.ndarray, t: np.ndarray, target, reach: float, dem, step: float) -> np.ndarray:
    """Whether the straight path from each point along ``t`` to ``target`` (within ``reach`` m)
    crosses ground more than BLOCK_M above both of its ends (sampled every ``step`` m)."""
    if len(xy) == 0:
        return np.zeros(0, dtype=bool)
    if len(xy) > RAY_CHUNK:          # each ray on its own: chunks bound the (rays x samples) arrays
        return np.concatenate([ridge_between(xy[k:k + RAY_CHUNK], t[k:k + RAY_CHUNK], target[k:k + RAY_CHUNK],
                                             reach, dem, step) for k in range(0, len(xy), RAY_CHUNK)])
    ok, dist = first_crossing(xy, reach * t, target)
    n = max(int(np.ceil(reach / step)), 2) + 1
    f = np.linspace(0.0, 1.0, n)
    px = xy[:, 0, None] + (dist[:, None] * f[None, :]) * t[:, 0, None]
    py = xy[:, 1, None] + (dist[:, None] * f[None, :]) * t[:, 1, None]
    z = sample_many(dem, [px.ravel()], [py.ravel()])[0].reshape(px.shape)
    ends = np.fmax(z[:, 0], z[:, -1])
    with np.errstate(invalid="ignore"):
        high = np.nanmax(np.where(np.isfinite(z[:, 1:-1]), z[:, 1:-1], -np.inf), axis=1) - ends > BLOCK_M
    return ok & np.asarray(high, dtype=bool)
