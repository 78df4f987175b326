"""Sections that follow the floodplain flow: dog-legs, kept in their reach's territory and off raised strips.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size``, ``dem.bounds`` and ``dem.transform``. Steps for one reach:

1. chainages every ``spacing`` m as for straight sections; with a territory
   (:mod:`geoflow.sections.territory`) the reach ends where its centreline enters another reach's
   channel (a tributary stops at the receiving channel's edge);
2. the valley axis (:mod:`geoflow.sections.valley`); layout ``"auto"`` bends the sections only when
   they reach beyond the meander belt (half the width exceeds the belt half-width plus the
   channel's half top width), otherwise they stay straight across the channel as before;
3. channel edges along the channel normal (:mod:`geoflow.sections.channel_leg`), the bends just beyond
   them, and the side paths (:mod:`geoflow.sections.doglegs`). Dog-leg sections span the same
   strip of valley, ``width`` / 2 either side of the valley axis (so a meander swinging to one
   side does not leave the far side of the valley uncovered);
4. sections that run along a narrow raised strip are moved to its faces (:mod:`geoflow.sections.strips`);
   the faces of a structure (``spans``, :mod:`geoflow.sections.faces`) are pinned: cut first, never
   moved or dropped by the later steps, no section inside a span, and a raised strip a span crosses
   takes the span ends as its faces (a bridge at a road gets one pair of faces, not two);
5. side lengths: adaptive width, then the territory, then crossings within the reach repaired
   by shortening;
6. stations along each straight piece at the DEM's creases, ground sampled.
"""
from __future__ import annotations

import numpy as np
import shapely

from ..errors import GeometryError
from ..records import ReachGeometry
from . import strips as strip_rules
from .channel_leg import bend_distances, channel_edges
from .common import build_sections, sample_many
from .doglegs import Sides, across_valley_lengths, crossing_pairs, dogleg_sides, shorten_crossings
from .lengths import flow_path_lengths
from .meeting import drop_squeezed, edges_added, low_end_at_other_reach, off_other_channels, whole_channel_leg
from .sidelimits import adaptive_halves
from .stations import chainages, chord_points, frame, grid_stations, stations_about_centre, with_spans
from .territory import own_extent, own_reach_end
from .valley import valley_of

MIN_WIDTH_FRACTION = 0.1


def cut_valley_sections(rid, line, dem, spacing, width, step, h, repair, rise, rise_margin, follow_grid,
                        layout, channel, territory, strips, spans=()) -> ReachGeometry:
    """See :func:`geoflow.sections.cut_sections` (``layout`` "valley" or "auto") and the module notes."""
    flags_extra: dict[float, list[str]] = {}
    warnings: list[str] = []
    who = territory.index(rid) if territory is not None else None
    drafting = territory is not None and territory.receiving[who] >= 0     # a tributary draws its own footprint
    length = float(line.length)
    end = length
    if territory is not None:
        end = own_reach_end(territory, who, line, step, drafting)
    valley = valley_of(line, width)
    ctx = _Context(rid, line, dem, float(spacing), float(width), step, h, valley, channel, spans)
    if territory is not None and end >= length - 1e-6:
        end = whole_channel_leg(ctx, territory, who, drafting, length)     # a line drawn to the other's bank
    if end < length - 1e-6:
        end = whole_channel_leg(ctx, territory, who, drafting, max(end - 0.5 * step, 0.0))
        warnings.append(f"reach {rid}: sections end at chainage {end:.1f} m of {length:.1f} m, at the edge of "
                        "another reach's channel (its junction boundary still reads that reach's level where this "
                        "one meets its channel)")
    ctx.spans = [(a, b) for a, b in ctx.spans if b <= end + 1e-6]     # one beyond the end has no faces here
    chain = with_spans(chainages(rid, end, float(spacing), even_end=True), ctx.spans, ctx.spacing)
    ctx.bent = layout == "valley" or _beyond_belt(ctx, chain)
    if ctx.bent:
        chain = _spread_along_valley(ctx, chain, warnings)
    if strips is not None or ctx.bent:
        chain = _off_strips(ctx, chain, strips, flags_extra, warnings)
    area = (territory, who, drafting)
    if territory is not None and ctx.bent:
        chain = off_other_channels(ctx, chain, territory, who, flags_extra, warnings, fixed=ctx.pinned(chain))
    if territory is not None:
        scratch: list[str] = []
        sides, _ = _laid_out(ctx, chain, area, rise, rise_margin, repair, flags_extra, scratch)
        chain = edges_added(ctx, chain, sides, area, flags_extra)
    chain = with_spans(np.unique(chain), ctx.spans, ctx.spacing)     # nothing moved or added into a span
    sides, flags = _laid_out(ctx, chain, area, rise, rise_margin, repair, flags_extra, warnings)
    sides, chain, flags = drop_squeezed(rid, sides, chain, flags, warnings, step, fixed=ctx.pinned(chain))
    lines = sides.lines()
    stations = [_stations(sides, k, step, dem, follow_grid) for k in range(chain.size)]
    pts = [shapely.get_coordinates(shapely.line_interpolate_point(lines[k], st)) for k, st in enumerate(stations)]
    z = sample_many(dem, [p[:, 0] for p in pts], [p[:, 1] for p in pts])
    sections = build_sections(rid, chain, lines, stations, z, flags, warnings)
    mid = np.stack((0.5 * sides.length[:, 0], sides.length[:, 0] + 0.5 * sides.length[:, 1]), axis=1)
    return ReachGeometry(reach_id=rid, centreline=line, sections=tuple(sections),
                         lengths=flow_path_lengths(lines, mid, chain), warnings=tuple(warnings),
                         valley_axis=valley.axis)


class _Context:
    """What every step of one reach's cut needs (a small bag of values, no logic beyond frames)."""

    def __init__(self, rid, line, dem, spacing, width, step, h, valley, channel, spans=()):
        self.rid, self.line, self.dem, self.spacing, self.width = rid, line, dem, spacing, width
        self.step, self.h, self.valley, self.channel = step, h, valley, channel
        self.spans = list(spans)
        self.bent = True

    def frame(self, chain):
        chain = np.asarray(chain, dtype=float)
        return frame(self.rid, self.line, chain, self.h, min(max(self.step, 0.1 * self.spacing), self.h),
                     chord_points(chain, self.spans))

    def pinned(self, chain) -> np.ndarray:
        """Whether each chainage is a structure face (the end of a span)."""
        ends = [float(x) for span in self.spans for x in span]
        return np.isin(np.asarray(chain, dtype=float), ends)

    def span_between(self, lo: float, hi: float) -> bool:
        """Whether a span lies between the chainages ``lo`` and ``hi`` (its faces included)."""
        return any(lo - 1e-6 <= a and b <= hi + 1e-6 for a, b in self.spans)

    def sides(self, chain) -> tuple[Sides, np.ndarray]:
        centre, normal = self.frame(chain)
        half = np.full((chain.size, 2), 0.5 * self.width)
        if not self.bent:
            return Sides.straight(centre, normal, half), np.ones(chain.size, dtype=bool)
        edges, found = channel_edges(centre, normal, 0.5 * self.width, self.step, self.dem, self.channel)
        typical = float(np.median(edges))
        edges = np.minimum(edges, 3.0 * max(typical, self.step))     # a confluence does not widen the channel leg
        bends = bend_distances(edges, self.step)
        sides = dogleg_sides(centre, normal, bends, half, self.valley, own_line=self.line)
        return sides.with_length(across_valley_lengths(sides, self.valley, 0.5 * self.width)), found


def _laid_out(ctx, chain, area, rise, rise_margin, repair, flags_extra, warnings):
    """Limited sides of the sections at ``chain`` and their flags."""
    flags: list[list[str]] = [list(flags_extra.get(float(c), [])) for c in chain]
    sides, _ = ctx.sides(chain)
    return _limit(ctx, sides, chain, rise, rise_margin, area, repair, flags, warnings), flags


def _beyond_belt(ctx: _Context, chain) -> bool:
    """Layout "auto": do the sections reach beyond the meander belt (plus the channel's half width)?"""
    centre, normal = ctx.frame(chain)
    edges, _ = channel_edges(centre, normal, 0.5 * ctx.width, ctx.step, ctx.dem, ctx.channel)
    return 0.5 * ctx.width > ctx.valley.belt_half_width + float(np.median(edges.max(axis=1)))


def _spread_along_valley(ctx: _Context, chain, warnings, share: float = 0.3) -> np.ndarray:
    """Sections left out where the channel runs across the valley and their floodplain legs would bunch.

    Along each side of the valley the legs of consecutive sections must be at least ``share`` of the
    median along-valley gap apart (measured along the valley axis where the legs start); a section
    closer than that to the last one kept is left out (never the first or the last section).
    """
    sides, _ = ctx.sides(chain)
    start = sides.points(np.minimum(np.where(np.isfinite(sides.bend), sides.bend, 0.0), sides.length)[..., None])
    u = np.stack([ctx.valley.frame(start[:, k, 0])[0] for k in (0, 1)], axis=1)      # (N, 2)
    gap = np.median(np.abs(np.diff(u, axis=0)), axis=0)
    keep = [0]
    pinned = ctx.pinned(chain)
    for k in range(1, chain.size - 1):
        if pinned[k] or np.all(u[k] - u[keep[-1]] >= share * gap):
            keep.append(k)
    keep.append(chain.size - 1)
    if len(keep) == chain.size:
        return chain
    warnings.append(f"reach {ctx.rid}: {chain.size - len(keep)} section(s) left out where the channel runs across "
                    "the valley (their floodplain legs would bunch), e.g. at chainage "
                    f"{chain[sorted(set(range(chain.size)) - set(keep))[0]]:.1f} m")
    return chain[keep]


def _off_strips(ctx: _Context, chain, strips, flags_extra, warnings) -> np.ndarray:
    """Chainages with sections moved off raised strips and faces added where one crosses the valley."""
    def share_at(c):
        return strip_rules.along_share(ctx.sides(np.atleast_1d(np.asarray(c, float)))[0], ctx.dem, ctx.step, strips)

    chain = _moved_off(ctx, chain, share_at, flags_extra, warnings)
    return _faces_added(ctx, chain, share_at, flags_extra, warnings)


def _moved_off(ctx: _Context, chain, share_at, flags_extra, warnings) -> np.ndarray:
    """Every section that runs along a raised strip moved to (or split at) its faces."""
    share = share_at(chain)
    bad = np.flatnonzero(share > strip_rules.ALONG_SHARE)
    pinned = ctx.pinned(chain)
    new = list(chain)
    for k in bad[::-1]:
        if pinned[k]:
            flags_extra.setdefault(float(chain[k]), []).append("along_strip")
            warnings.append(f"reach {ctx.rid}: the structure face at chainage {chain[k]:.1f} m runs along a road or "
                            f"embankment ({share[k]:.0%} of a floodplain leg); check the structure's chainage and "
                            "length")
            continue
        faces, found = strip_rules.face_positions(chain, int(k), ctx.spacing, ctx.step, share_at)
        if not found:
            flags_extra.setdefault(float(chain[k]), []).append("along_strip")
            warnings.append(f"reach {ctx.rid}: section at chainage {chain[k]:.1f} m runs along a road or embankment "
                            f"({share[k]:.0%} of a floodplain leg) and no position within half a spacing avoids it; "
                            "draw that section yourself")
            continue
        new[k:k + 1] = faces
        for f in faces:
            flags_extra.setdefault(float(f), []).append("moved_off_strip")
        warnings.append(f"reach {ctx.rid}: section at chainage {chain[k]:.1f} m ran along a road or embankment "
                        f"({share[k]:.0%} of a floodplain leg); moved to chainage(s) "
                        f"{', '.join(f'{f:.1f}' for f in faces)} m at its face(s)")
    return np.asarray(new)


def _faces_added(ctx: _Context, chain, share_at, flags_extra, warnings) -> np.ndarray:
    """A section added at each face of a raised strip that crosses the valley between two sections.

    A gap is searched when the flow paths from more than ALONG_SHARE of a section's floodplain to
    the next section cross a ridge (:func:`geoflow.sections.storage.ridge_between`); the strip is
    where candidate sections every sample step would run along it. The existing section serves as
    the face where it lies within a fifth of a spacing of it.
    """
    sides, _ = ctx.sides(chain)
    blocked = strip_rules.blocked_gaps(sides, ctx.valley, ctx.dem, ctx.step)
    add: list[float] = []
    for k in np.flatnonzero(blocked > strip_rules.ALONG_SHARE):
        if ctx.span_between(chain[k], chain[k + 1]):
            continue                  # a structure's faces stand at this crossing
        cand = np.arange(chain[k] + ctx.step, chain[k + 1] - 0.5 * ctx.step, ctx.step)
        if cand.size < 3:
            continue
        on = np.flatnonzero(share_at(cand) > strip_rules.ALONG_SHARE)
        if on.size == 0:
            continue
        for face, near in ((cand[on[0]] - 3 * ctx.step, chain[k]), (cand[on[-1]] + 3 * ctx.step, chain[k + 1])):
            if abs(face - near) <= 0.2 * ctx.spacing or not chain[k] < face < chain[k + 1]:
                flags_extra.setdefault(float(near), []).append("at_embankment_face")
                continue
            add.append(float(face))
            flags_extra.setdefault(float(face), []).append("at_embankment_face")
        warnings.append(f"reach {ctx.rid}: a road or embankment crosses the valley between chainages {chain[k]:.1f} "
                        f"and {chain[k + 1]:.1f} m; sections at its faces: chainage(s) "
                        f"{', '.join(f'{f:.1f}' for f in sorted(add[-2:]))} m added")
    return np.unique(np.concatenate((chain, add))) if add else chain


def _limit(ctx, sides: Sides, chain, rise, rise_margin, area, repair, flags, warnings) -> Sides:
    """Side lengths: adaptive width, the reach's territory, then crossings within the reach."""
    rid, step = ctx.rid, ctx.step
    if rise is not None:
        margin = 0.5 * step if rise_margin is None else float(rise_margin)
        half, capped = adaptive_halves(ctx.dem, sides.centre, None, 0.5 * ctx.width, step, float(rise),
                                       max(0.25 * ctx.spacing, step), margin, sides=sides)
        sides = sides.with_length(half)
        for k in np.flatnonzero(capped.any(axis=1)):
            flags[k].append("width_capped")
    territory, who, drafting = area
    if territory is not None:
        before = sides.length
        sides = sides.with_length(own_extent(territory, who, sides, step, 0.5 * step, drafting))
        cut = (sides.length < before - 1e-9) | low_end_at_other_reach(ctx, sides, territory, who)
        for k, side in zip(*np.nonzero(cut)):
            flags[k].append("left_end_at_other_reach" if side == 0 else "right_end_at_other_reach")
        for k in np.flatnonzero((sides.length < before - 1e-9).any(axis=1)):
            warnings.append(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) stops where another reach's "
                            f"area begins; sides {sides.length[k, 0]:.1f} m / {sides.length[k, 1]:.1f} m")
    if repair:
        before = sides.length
        kept = before.sum(axis=1)
        for _ in range(3):
            sides, pairs, _ = shorten_crossings(sides)
            if pairs.size == 0:
                break
        for k in np.flatnonzero((sides.length < before - 1e-9).any(axis=1)):
            flags[k].append("shortened")
            warnings.append(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crossed a neighbour; shortened "
                            f"from {before[k].sum():.1f} m to {sides.length[k].sum():.1f} m")
    else:
        i, j = crossing_pairs(sides.lines())
        for a, b in zip(i, j):
            flags[b].append("crosses_section")
            warnings.append(f"reach {rid}: section {b} (chainage {chain[b]:.1f} m) crosses section {a} "
                            f"(chainage {chain[a]:.1f} m)")
        total = sides.length.sum(axis=1)
        short = np.flatnonzero((total < MIN_WIDTH_FRACTION * ctx.width) & (total < kept - 1e-9))
        if short.size:
            k = int(short[0])
            raise GeometryError(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crosses a neighbour and keeps "
                                f"only {total[k]:.1f} m of its {ctx.width:g} m width (sharp bend); smooth the "
                                "centreline, or reduce [sections] width or spacing")
    return sides


def _stations(sides: Sides, k: int, step: float, dem, follow_grid: bool) -> np.ndarray:
    """Stations along section k: each straight piece divided evenly, the centre always sampled,
    and (default sampling) every crossing of the DEM's rows and columns of cell centres added."""
    pieces = sides.pieces(k)
    centre_st = float(sides.length[k, 0])
    grid = follow_grid and getattr(dem, "transform", None) is not None and step <= dem.cell_size * (1 + 1e-9)
    out, start = [np.array([0.0, centre_st])], 0.0
    for a, b in pieces:
        piece = float(np.hypot(*(b - a)))
        if piece <= 0:
            continue
        inner = centre_st - start if 0 < centre_st - start < piece else None
        if inner is not None:
            st = stations_about_centre(inner, piece - inner, step)
        else:
            st = np.linspace(0.0, piece, max(int(np.ceil(piece / step - 1e-9)), 1) + 1)
        if grid:
            st = grid_stations(dem.transform, a, b, st, step, centre_station=inner)
        out.append(start + st)
        start += piece
    st = np.unique(np.concatenate(out))
    keep = np.concatenate(([True], np.diff(st) > 1e-6))
    st = st[keep]
    st[-1] = start
    if st.size < 3:
        st = np.linspace(0.0, start, 3)
    return st
