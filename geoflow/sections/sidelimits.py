"""How far each side of a cross-section reaches: adaptive width, confluences, drawn direction.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size`` and ``dem.bounds``. Half-widths are kept as an (N, 2) array: column 0 the
left side, column 1 the right side (looking downstream), both in metres from the centreline.

Rules (common practice, no source):

* Adaptive width: each side runs out from the centreline until the ground rises ``rise`` m
  above the section's channel bed (the lowest ground within ``bed_window`` m of the
  centreline), plus a small margin, and never beyond ``max_half``.
* Confluences: a side that crosses another reach's centreline stops at 98 % of the distance
  to the crossing. Sections of two reaches may still overlap in the floodplain; the rule only
  keeps the other reach's channel (its centreline) out of this reach's sections, so the
  other channel's conveyance is not counted twice. A section whose centre lies on another
  centreline (the junction itself) cannot be shortened that way; it is flagged
  ``at_confluence`` instead.
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString

from .common import sample_many

SHORTEN_FACTOR = 0.98        # shortened side = this x distance from the centre to the crossing


def adaptive_halves(dem, centre: np.ndarray, normal: np.ndarray, max_half: float, step: float,
                    rise: float, bed_window: float, margin: float, sides=None) -> tuple[np.ndarray, np.ndarray]:
    """(N, 2) half-widths [left, right] reaching ``rise`` m above the bed, and (N, 2) capped mask.

    The ground is sampled every ``step`` m (or a little less) along the full-width line (or,
    with ``sides`` (:class:`geoflow.sections.doglegs.Sides`), along each side's path). On each
    side the first sample at or above bed + rise is found and the crossing placed by linear
    interpolation from the sample before it; the side ends ``margin`` m beyond, capped at
    ``max_half``. NaN ground never counts as reaching the level.
    """
    k = max(int(math.ceil(max_half / step - 1e-9)), 1)
    out = np.linspace(0.0, max_half, k + 1)                      # distances from the centre, outwards
    d = out[1] - out[0]
    if sides is None:
        offs = np.concatenate((-out[:0:-1], out))               # + is left (along the normal)
        x = centre[:, 0, None] + offs[None, :] * normal[:, 0, None]
        y = centre[:, 1, None] + offs[None, :] * normal[:, 1, None]
        z = np.vstack(sample_many(dem, list(x), list(y)))
        z_sides = (z[:, k:], z[:, k::-1])
    else:
        pts = sides.points(np.broadcast_to(out, sides.length.shape + out.shape))
        zz = sample_many(dem, [pts[..., 0].ravel()], [pts[..., 1].ravel()])[0].reshape(pts.shape[:3])
        z_sides = (zz[:, 0], zz[:, 1])
    near = out <= max(bed_window, d) + 1e-9
    bed = np.minimum(*(np.where(near[None, :] & np.isfinite(zz), zz, np.inf).min(axis=1) for zz in z_sides))
    bed[np.isinf(bed)] = np.nan
    return _rise_rule(z_sides, bed + float(rise), d, max_half, float(margin))


def _rise_rule(z_sides, target, d, max_half, margin) -> tuple[np.ndarray, np.ndarray]:
    """Half-widths and capped mask from ground sampled outwards on each side (see adaptive_halves)."""
    halves, capped = np.empty((len(target), 2)), np.empty((len(target), 2), dtype=bool)
    for side, zz in enumerate(z_sides):                         # outwards from the centre
        with np.errstate(invalid="ignore"):
            above = zz >= target[:, None]
        above[:, 0] = False
        found = above.any(axis=1)
        first = np.argmax(above, axis=1)
        rows = np.arange(len(zz))
        z0, z1 = zz[rows, np.maximum(first - 1, 0)], zz[rows, first]
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.clip((target - z0) / (z1 - z0), 0.0, 1.0)
        frac = np.where(np.isfinite(frac), frac, 1.0)
        reach = (first - 1 + frac) * d + margin
        halves[:, side] = np.where(found, np.minimum(reach, max_half), max_half)
        capped[:, side] = ~found | (reach >= max_half)
    return halves, capped


def _named(others) -> tuple[list[str], np.ndarray]:
    """Names and 2-D lines of ``others``: a {reach_id: line} mapping, (id, line) pairs or bare lines."""
    if isinstance(others, dict):
        items = list(others.items())
    else:
        items = [o if isinstance(o, tuple) else (f"#{i} of others", o) for i, o in enumerate(others)]
    names = [str(n) for n, _ in items]
    return names, shapely.force_2d(np.asarray([g for _, g in items], dtype=object))


def confluence_halves(rid: str, chain: np.ndarray, centre: np.ndarray, normal: np.ndarray, half: np.ndarray,
                      others, tol: float, flags: list, warnings: list, own: LineString | None = None) -> np.ndarray:
    """Shorten each side that crosses another reach's centreline to 98 % of the distance to it.

    Pairs whose other centreline passes within ``tol`` m of the section's centre are flagged
    ``at_confluence`` and left alone (the centre cannot move off the junction). A line equal
    to ``own`` (this reach's centreline, if passed among ``others``) is ignored.
    """
    names, lines = _named(others)
    if own is not None and lines.size:
        keep = ~shapely.equals(lines, shapely.force_2d(own))
        names, lines = [n for n, k in zip(names, keep) if k], lines[keep]
    if lines.size == 0:
        return half
    new = half.copy()
    tree = shapely.STRtree(lines)
    centres = shapely.points(centre)
    at_junction: set[tuple[int, int]] = set()
    for side, sign in ((0, 1.0), (1, -1.0)):
        segs = shapely.linestrings(np.stack((centre, centre + sign * half[:, side, None] * normal), axis=1))
        s_idx, o_idx = tree.query(segs, predicate="intersects")
        if s_idx.size == 0:
            continue
        near = shapely.distance(centres[s_idx], lines[o_idx]) <= tol
        at_junction.update(zip(s_idx[near].tolist(), o_idx[near].tolist()))
        s_idx, o_idx = s_idx[~near], o_idx[~near]
        dist = shapely.distance(centres[s_idx], shapely.intersection(segs[s_idx], lines[o_idx]))
        for s, o, dd in zip(s_idx, o_idx, dist):
            if SHORTEN_FACTOR * dd < new[s, side]:
                new[s, side] = SHORTEN_FACTOR * dd
                if "shortened_at_confluence" not in flags[s]:
                    flags[s].append("shortened_at_confluence")
                warnings.append(
                    f"reach {rid}: section {s} (chainage {chain[s]:.1f} m) crossed the centreline of reach "
                    f"{names[o]} {dd:.1f} m {('left', 'right')[side]} of its centre; that side was shortened to "
                    f"{new[s, side]:.1f} m")
    for s, o in sorted(at_junction):
        if "at_confluence" not in flags[s]:
            flags[s].append("at_confluence")
        warnings.append(
            f"reach {rid}: section {s} (chainage {chain[s]:.1f} m) is centred on the centreline of reach {names[o]} "
            "(junction); it was not shortened - end the centreline at the other reach's bank to keep its channel out")
    return new


