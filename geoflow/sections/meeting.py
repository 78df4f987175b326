"""Where reaches meet: sections kept whole and off another reach's channel, and bent around its area.

Pure geometry on shapely/numpy; helpers of :mod:`geoflow.sections.valleycut` that apply the rule of
:mod:`geoflow.sections.territory` to one reach's sections (``ctx`` is its cut context).
"""
from __future__ import annotations

import numpy as np
import shapely

from ..errors import GeometryError
from .common import sample_many
from .doglegs import Sides
from .territory import own_extent


def off_other_channels(ctx, chain, territory, who, flags_extra, warnings, fixed=None) -> np.ndarray:
    """Sections whose channel leg would reach into another reach's channel moved along the centreline.

    At a confluence a section centred where the tributary's channel meets this one would end in
    that channel's trench. It is moved, a sample step at a time (at most half a spacing, keeping a
    fifth of a spacing from its neighbours), to the nearest position whose channel leg is clear.
    ``fixed`` (N,): sections never moved (the faces of a structure).
    """
    foreign = territory.other_channels(who)
    if foreign.is_empty:
        return chain

    def touches(c) -> np.ndarray:
        sides, _ = ctx.sides(np.atleast_1d(np.asarray(c, dtype=float)))
        reach = np.minimum(sides.channel_leg, sides.length)
        ends = sides.centre[:, None, :] + reach[..., None] * sides.first
        return shapely.intersects(shapely.linestrings(ends), foreign)

    new = chain.copy()
    movable = np.ones(chain.size, dtype=bool) if fixed is None else ~np.asarray(fixed, dtype=bool)
    for k in np.flatnonzero(touches(chain) & movable):
        lo = new[k - 1] + 0.2 * ctx.spacing if k > 0 else chain[k]
        hi = new[k + 1] - 0.2 * ctx.spacing if k + 1 < chain.size else chain[k]
        j = np.arange(1, int(0.5 * ctx.spacing / ctx.step) + 1) * ctx.step
        cand = np.concatenate([(chain[k] - d, chain[k] + d) for d in j])
        cand = cand[(cand >= lo) & (cand <= hi)]
        clear = ~touches(cand) if cand.size else np.zeros(0, dtype=bool)
        if not clear.any():
            continue
        new[k] = float(cand[int(np.argmax(clear))])
        flags_extra.setdefault(float(new[k]), []).append("moved_off_confluence")
        warnings.append(f"reach {ctx.rid}: section at chainage {chain[k]:.1f} m would end in another reach's "
                        f"channel; moved to chainage {new[k]:.1f} m")
    return new


def edges_added(ctx, chain, sides: Sides, area, flags_extra) -> np.ndarray:
    """Sections added where another reach's area begins between two sections (the receiving river's
    sections bend around a tributary's mouth area instead of leaving a gap beside it).

    Where one of two neighbouring sections is cut short by another reach's area on a side and the
    other is not (their lengths differ by over a quarter of the half-width), the chainage between
    them where that side's kept length falls is found by bisection and a section added a sample
    step before the fall, on the long side.
    """
    territory, who, drafting = area
    add = []
    half = 0.5 * ctx.width
    for k in range(chain.size - 1):
        for side in (0, 1):
            a, b = sides.length[k, side], sides.length[k + 1, side]
            if abs(a - b) < 0.25 * half:
                continue
            long_at_lo = a > b
            lo, hi = float(chain[k]), float(chain[k + 1])
            target = 0.5 * (a + b)
            for _ in range(8):
                mid = 0.5 * (lo + hi)
                one, _ = ctx.sides(np.array([mid]))
                kept = own_extent(territory, who, one, ctx.step, 0.5 * ctx.step, drafting)[0, side]
                if (kept >= target) == long_at_lo:
                    lo = mid
                else:
                    hi = mid
            c = lo - ctx.step if long_at_lo else hi + ctx.step        # a step clear of the other area
            if min(c - chain[k], chain[k + 1] - c) > 2.0 * ctx.step:
                add.append(c)
    return np.unique(np.concatenate((chain, add))) if add else chain


def whole_channel_leg(ctx, territory, who, drafting, end: float) -> float:
    """The last chainage up to ``end`` whose section keeps its whole channel leg in the reach's territory.

    Where a tributary meets the receiving channel at an angle, a section centred on that channel's
    edge would have one side cut to nothing; the last section moves upstream, a sample step at a
    time (at most a spacing), until both sides reach their bends.
    """
    for back in np.arange(0.0, ctx.spacing + ctx.step, ctx.step):
        c = max(end - back, 0.0)
        sides, _ = ctx.sides(np.array([c]))
        dist = np.minimum(sides.channel_leg, sides.length)[..., None] * np.linspace(0.0, 1.0, 9)[None, None, :]
        if territory.owns(who, sides.points(dist).reshape(-1, 2), drafting).all():
            return c
    return end


def low_end_at_other_reach(ctx, sides: Sides, territory, who) -> np.ndarray:
    """(N, 2) sides whose full-length end borders another reach's area (by the final rule) on ground no
    more than 1 m above the section's higher channel edge: water spilling there is that reach's."""
    beyond = sides.points((sides.length + 2.0 * ctx.step)[..., None])[:, :, 0]
    foreign = ~territory.owns(who, beyond.reshape(-1, 2)).reshape(beyond.shape[:2])
    if not foreign.any():
        return foreign
    ends = sides.points(sides.length[..., None])[:, :, 0]
    edge = sides.points(np.minimum(np.where(sides.channel_leg > 0, sides.channel_leg, ctx.step), sides.length)[..., None])
    z_end, z_edge = (sample_many(ctx.dem, [p[..., 0].ravel()], [p[..., 1].ravel()])[0].reshape(foreign.shape)
                     for p in (ends, edge[:, :, 0]))
    with np.errstate(invalid="ignore"):
        low = z_end <= np.nanmax(z_edge, axis=1, keepdims=True) + 1.0
    return foreign & low


def drop_squeezed(rid, sides: Sides, chain, flags, warnings, step, fixed=None):
    """Sections left with under two sample steps between other reaches' areas are dropped.

    ``fixed``: (N,) sections that must stay (the faces of a structure); one of them squeezed is an error.
    """
    total = sides.length.sum(axis=1)
    keep = total >= 2.0 * step
    if keep.all():
        return sides, chain, flags
    if fixed is not None and (~keep & fixed).any():
        k = int(np.flatnonzero(~keep & fixed)[0])
        raise GeometryError(f"reach {rid}: the structure face at chainage {chain[k]:.1f} m lies in another reach's "
                            f"area (it keeps only {total[k]:.1f} m); move the structure's chainage away from the "
                            "junction")
    if keep.sum() < 2:
        k = int(np.flatnonzero(~keep)[0])
        raise GeometryError(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) keeps only {total[k]:.1f} m between "
                            "other reaches' areas and fewer than 2 sections remain; end this reach's centreline where "
                            "it meets the other reach")
    for k in np.flatnonzero(~keep):
        warnings.append(f"reach {rid}: the section at chainage {chain[k]:.1f} m lies in another reach's area (it kept "
                        f"{total[k]:.1f} m) and was left out")
    return sides.subset(keep), chain[keep], [f for f, k in zip(flags, keep) if k]
