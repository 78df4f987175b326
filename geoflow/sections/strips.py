"""Narrow raised strips (roads, embankments, levee crests): keep sections from running along them.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``.

A section *runs along a strip* when more than ``ALONG_SHARE`` of the floodplain part of one of its
sides (beyond the channel leg) lies on one: inside one narrow land-cover polygon (not of the
channel class; a narrow strip: 2 x area / perimeter, the width of a long strip, under ``NARROW_M``,
and perimeter^2 / area over ``ELONGATED`` (a strip ten times longer than wide), so field corners and
small plots do not count), or on
a DEM ridge (the ground at a point stands more than ``RIDGE_M`` above the ground ``RIDGE_REACH``
away on both sides, across the leg). A section is clear below ``CLEAR_SHARE``. (Thresholds: common
practice, no source.)

Such a section is moved along the centreline, by whole sample steps and at most half a spacing,
to the nearest clear positions upstream and downstream; when both exist it is replaced by two
sections there, one at each face of the strip (an embankment across the valley is seen from its
faces, with its opening as it is); when only one exists it is moved there; otherwise it is kept
and flagged ``along_embankment``. The storage behind an embankment is found later
(:mod:`geoflow.sections.storage`).
"""
from __future__ import annotations

import numpy as np
import shapely

from .common import sample_many

ALONG_SHARE = 0.25
CLEAR_SHARE = 0.10
NARROW_M = 15.0
ELONGATED = 40.0
RIDGE_M = 0.5
RIDGE_REACH = 15.0


def narrow_strips(polygons, classes=None, skip=()) -> np.ndarray:
    """The polygons (array) that are narrow strips (module notes), classes in ``skip`` left out."""
    polys = np.asarray(polygons, dtype=object)
    if polys.size == 0:
        return polys
    area, perimeter = shapely.area(polys), np.maximum(shapely.length(polys), 1e-9)
    keep = (2.0 * area / perimeter < NARROW_M) & (perimeter ** 2 > ELONGATED * area)
    if classes is not None and len(skip):
        keep &= ~np.isin(np.asarray(classes).astype(str), [str(s) for s in skip])
    return polys[keep]


def along_share(sides, dem, step: float, strips=None) -> np.ndarray:
    """(N,) largest share, over both sides, of a side's floodplain part lying on a strip or a ridge."""
    start = np.where(np.isfinite(sides.bend), np.minimum(sides.bend, sides.length), sides.length / 3.0)
    span = np.maximum(sides.length - start, 0.0)
    k = max(int(np.ceil(span.max() / step)), 1) if span.size else 1
    frac = (np.arange(k) + 0.5) / k
    dist = start[..., None] + span[..., None] * frac[None, None, :]
    pts = sides.points(dist)                                  # (N, 2, k, 2)
    flat = pts.reshape(-1, 2)
    on = _on_ridge(sides, dist, pts, dem, step)
    if strips is not None and len(strips):
        on |= _in_one_strip(flat, strips).reshape(on.shape)
    share = on.mean(axis=2)
    share[span < 2.0 * step] = 0.0
    return share.max(axis=1)


def _in_one_strip(xy: np.ndarray, strips) -> np.ndarray:
    """Whether each point lies in a narrow strip polygon."""
    tree = shapely.STRtree(np.asarray(strips, dtype=object))
    hit, _ = tree.query(shapely.points(xy), predicate="intersects")
    out = np.zeros(len(xy), dtype=bool)
    out[hit] = True
    return out


def _on_ridge(sides, dist, pts, dem, step) -> np.ndarray:
    """Whether each point stands RIDGE_M above the ground RIDGE_REACH away on both sides across its leg."""
    past = dist > np.where(np.isfinite(sides.bend), sides.bend, np.inf)[..., None]
    along = np.where(past[..., None], sides.second[:, :, None, :], sides.first[:, :, None, :])
    across = np.stack((-along[..., 1], along[..., 0]), axis=-1)
    reach = max(RIDGE_REACH, 5.0 * step)
    flat = pts.reshape(-1, 2)
    off = across.reshape(-1, 2) * reach
    z0, z1, z2 = (np.concatenate(sample_many(dem, [p[:, 0]], [p[:, 1]])) for p in (flat, flat + off, flat - off))
    with np.errstate(invalid="ignore"):
        ridge = z0 - np.fmax(z1, z2) > RIDGE_M
    return ridge.reshape(dist.shape)


def face_positions(chain: np.ndarray, k: int, spacing: float, step: float, share_at) -> tuple[list, bool]:
    """New chainages for section k that runs along a strip, and whether any clear position was found.

    ``share_at(chainages)`` -> along shares. Candidates lie every ``step`` m up to half a spacing,
    and at least a fifth of a spacing from the neighbours.
    """
    lo = chain[k - 1] + 0.2 * spacing if k > 0 else chain[k]
    hi = chain[k + 1] - 0.2 * spacing if k + 1 < chain.size else chain[k]
    j = np.arange(1, int(np.floor(0.5 * spacing / step)) + 1) * step
    up, down = chain[k] - j, chain[k] + j
    up, down = up[up >= lo], down[down <= hi]
    found = []
    for cand in (up, down):
        if cand.size:
            clear = share_at(cand) <= CLEAR_SHARE
            if clear.any():
                i = int(np.argmax(clear))
                i = i + 2 if i + 2 < cand.size and clear[i + 1:i + 3].all() else i   # off the toe too
                found.append(float(cand[i]))
    return sorted(found), bool(found)


def blocked_gaps(sides, valley, dem, step: float, probe_steps: int = 4) -> np.ndarray:
    """(N-1,) share of section k's floodplain whose flow path to section k+1 crosses a ridge.

    Paths start every ``probe_steps`` sample steps on the floodplain legs (beyond each bend, or
    beyond a third of a straight side) and run down the valley (its axis normal turned by 90 deg).
    """
    from .storage import ridge_between
    n = sides.centre.shape[0]
    if n < 2:
        return np.zeros(0)
    start = np.where(np.isfinite(sides.bend), np.minimum(sides.bend, sides.length), sides.length / 3.0)
    span = np.maximum(sides.length - start, 0.0)
    k = max(int(np.ceil(span.max() / (probe_steps * step))), 1)
    dist = start[..., None] + span[..., None] * ((np.arange(k) + 0.5) / k)[None, None, :]
    xy = sides.points(dist)[:-1].reshape(-1, 2)                   # probes of sections 0 .. N-2
    owner = np.repeat(np.arange(n - 1), 2 * k)
    _, normal = valley.frame(xy)
    down = np.column_stack((normal[:, 1], -normal[:, 0]))         # the left normal turned back: downstream
    lines = np.asarray(sides.lines(), dtype=object)
    reach = 3.0 * float(np.max(np.hypot(*np.diff(sides.centre, axis=0).T))) + step
    hit = ridge_between(xy, down, lines[owner + 1], reach, dem, step)
    return np.bincount(owner, weights=hit.astype(float), minlength=n - 1) / (2 * k)
