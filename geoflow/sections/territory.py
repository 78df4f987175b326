"""Which reach owns each point of the valley floor, so that sections of different reaches never meet.

Pure geometry on shapely/numpy. The rule (our own; no published source), first match wins:

1. **Channels.** Each reach's channel (the channel land-cover polygons along its centreline, or a
   narrow strip about the centreline where there are none) belongs to that reach. Where two
   channels meet (a confluence) the receiving reach's channel wins (between reaches of equal
   rank, the nearer one).
2. **Banks.** A strip along each channel as wide as the margin its sections' channel leg takes
   beyond the channel edge (:func:`geoflow.sections.channel_leg.bend_distances`) belongs to that reach;
   where two overlap, to the reach whose centreline is nearer. So a section never ends inside its
   own channel or on its bank, and a tributary's sections stop at the receiving channel's bank.
3. **A tributary's mouth area.** A tributary (a reach that flows into another, by its junction
   boundary) owns the area its own sections cover (its *footprint*). Those sections run down to
   the receiving channel's bank and are stopped only by rules 1-2 and by reaches it does not meet
   (rule 4). So the shared mouth area - where the tributary crosses the receiving river's
   floodplain - belongs to the tributary: its water crosses that area to reach the receiving
   channel, and its junction boundary already sets its level there from the receiving river's
   level, so the map is continuous; the receiving river's sections stop at (bend around) the
   tributary's outermost sections.
4. **Elsewhere, the relatively nearest centreline**: the reach that minimises d_r / s_r, with d_r
   the distance to reach r's centreline and s_r half its section width (two reaches with equal
   widths split the ground halfway between them).

Sections are cut to stay inside their own reach's territory (a side stops half a sample step
before it would leave it; a tributary's sections end where its centreline enters the receiving
channel), so no two reaches' sections cross, and each reach's flood map, which covers only the
area between its own sections, never gives a cell a level from two reaches.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import shapely
from shapely.geometry import Polygon

from .common import points_along

BISECT_STEPS = 12           # refinement of each cut point: a sample step / 4096


@dataclass(frozen=True, eq=False)
class Territory:
    """Territories of several reaches (index i: ``names[i]``)."""

    names: tuple[str, ...]
    lines: np.ndarray          # (R,) centrelines, DEM CRS
    scales: np.ndarray         # (R,) half section widths, m
    zones: np.ndarray          # (R,) channel polygons (may be empty geometries)
    rank: np.ndarray           # (R,) int: a receiving reach ranks above the reaches that flow into it
    banks: np.ndarray          # (R,) channel polygons widened by the bank margin
    receiving: np.ndarray      # (R,) index of the reach each one flows into (-1: none)
    footprints: np.ndarray     # (R,) area covered by each tributary's sections (empty: none yet)

    def index(self, reach_id: str) -> int:
        return self.names.index(str(reach_id))

    def owner(self, xy: np.ndarray, drafting: int | None = None, hint: int | None = None) -> np.ndarray:
        """Index of the reach owning each point (K, 2) by the rule of the module notes.

        ``drafting``: a tributary whose own footprint is being drawn: the reach it flows into then
        claims only its channel and banks (rules 1-2), not its floodplain (rule 4). ``hint``: a
        reach the points are expected to be near (the reach whose sections are being cut): only
        the reaches that could beat it are then measured (:meth:`_distances`); the same answer.
        """
        xy = np.asarray(xy, dtype=float).reshape(-1, 2)
        if len(self.names) == 1:
            return np.zeros(len(xy), dtype=np.int64)
        skip = np.zeros(len(self.names), dtype=bool)
        if drafting is not None and self.receiving[drafting] >= 0:
            skip[self.receiving[drafting]] = True
        inside = {pick: _inside(polys, xy, self._boxes(pick)) for polys, pick in
                  ((self.footprints, "first"), (self.banks, "nearest"), (self.zones, "rank"))}
        dist = self._distances(xy, hint, skip, inside["nearest"] | inside["rank"])
        near = np.argmin(np.where(skip[None, :], np.inf, dist / self.scales[None, :]), axis=1)
        for pick in ("first", "nearest", "rank"):
            ins = inside[pick]
            if not ins.any():
                continue
            if pick == "nearest":
                best = np.argmin(np.where(ins, dist, np.inf), axis=1)
            elif pick == "first":
                best = np.argmax(ins, axis=1)
            else:                                        # highest rank; among equals, the nearest
                best = np.argmax(np.where(ins, self.rank[None, :] * 1e12 - dist, -np.inf), axis=1)
            near = np.where(ins.any(axis=1), best, near)
        return near

    def _distances(self, xy: np.ndarray, hint: int | None, skip: np.ndarray, needed: np.ndarray) -> np.ndarray:
        """(K, R) distance from each point to each centreline, exact wherever it can decide the owner.

        Without ``hint`` every distance is measured. With it, an upper bound u_h of the hint reach's
        distance (to the nearest of points spaced along its centreline, a k-d tree query) gives each
        point a bound: a reach r can have d_r / s_r <= d_h / s_h only if its centreline's bounding
        box lies within (u_h / s_h) s_r of the point, so only those reaches (and those whose
        channel or bank holds the point, ``needed``) are measured; the others are left at +inf,
        where their true ratio is larger than the hint's and never the least. The hint's own
        distance is measured only at points where another reach is: elsewhere every other reach is
        +inf and the hint owns the point whatever its distance (u_h is kept there).
        """
        trees = self._trees()
        if hint is None:
            pts = shapely.points(xy)
            return np.stack([tree.query_nearest(pts, return_distance=True, all_matches=False)[1]
                             for tree in trees], axis=1)
        dist = np.full((len(xy), len(trees)), np.inf)
        upper = self._sample_trees()[hint].query(xy, k=1)[0]
        ratio = upper / self.scales[hint]
        box = self._line_boxes()
        contested = np.zeros(len(xy), dtype=bool)
        for r, tree in enumerate(trees):
            if r == hint:
                continue
            gx = np.maximum(np.maximum(box[r, 0] - xy[:, 0], xy[:, 0] - box[r, 2]), 0.0)
            gy = np.maximum(np.maximum(box[r, 1] - xy[:, 1], xy[:, 1] - box[r, 3]), 0.0)
            want = needed[:, r] | (~skip[r] & (np.hypot(gx, gy) <= ratio * self.scales[r]))
            if want.any():
                dist[want, r] = tree.query_nearest(shapely.points(xy[want]), return_distance=True,
                                                   all_matches=False)[1]
                contested |= want
        dist[:, hint] = upper
        if contested.any():
            dist[contested, hint] = trees[hint].query_nearest(shapely.points(xy[contested]), return_distance=True,
                                                              all_matches=False)[1]
        return dist

    def _sample_trees(self) -> list:
        """Per centreline, a k-d tree (scipy) of its vertices and of points at most twice its median
        segment length apart along it: the distance to the nearest is an upper bound of the
        distance to the line."""
        trees = self.__dict__.get("_point_trees")
        if trees is None:
            from scipy.spatial import cKDTree
            trees = []
            for g in self.lines:
                c = shapely.get_coordinates(g)
                step = np.hypot(*np.diff(c, axis=0).T)
                spacing = 2.0 * float(np.median(step)) if step.size else 1.0
                if step.size and spacing > 0 and step.max() > spacing:
                    c = points_along(g, np.linspace(0.0, g.length, int(np.ceil(g.length / spacing)) + 1))
                    c = np.vstack([c, shapely.get_coordinates(g)])
                trees.append(cKDTree(c))
            object.__setattr__(self, "_point_trees", trees)
        return trees

    def _line_boxes(self) -> np.ndarray:
        boxes = self.__dict__.get("_line_bounds")
        if boxes is None:
            boxes = shapely.bounds(self.lines)
            object.__setattr__(self, "_line_bounds", boxes)
        return boxes

    def _boxes(self, pick: str) -> np.ndarray:
        """Bounds (R, 4) of the footprints ("first"), banks ("nearest") or channels ("rank")."""
        cache = self.__dict__.setdefault("_poly_bounds", {})
        if pick not in cache:
            polys = {"first": self.footprints, "nearest": self.banks, "rank": self.zones}[pick]
            cache[pick] = shapely.bounds(polys)
        return cache[pick]

    def owns(self, who: int, xy: np.ndarray, drafting: bool = False) -> np.ndarray:
        return self.owner(xy, who if drafting else None, hint=who) == who

    def other_channels(self, who: int):
        """The channels and banks of the other reaches, outside the channels that outrank them: one geometry."""
        parts = []
        for j, bank in enumerate(self.banks):
            if j == who or bank.is_empty:
                continue
            above = [z for i, z in enumerate(self.zones) if i != j and self.rank[i] > self.rank[j] and not z.is_empty]
            parts.append(shapely.difference(bank, shapely.union_all(above)) if above else bank)
        return shapely.union_all(parts) if parts else Polygon()

    def claim(self, who: int, lines):
        """The part of the area between this reach's section ``lines`` that the rule gives it: that
        area less the other reaches' channels and banks (outside the channels that outrank them)
        and less the tributaries' footprints. Flood maps are clipped to it, so no two reaches map a
        cell and none maps another's channel."""
        area = footprint(lines)
        others = [self.other_channels(who)] + [f for j, f in enumerate(self.footprints) if j != who and not f.is_empty]
        above = [z for j, z in enumerate(self.zones) if j != who and self.rank[j] > self.rank[who] and not z.is_empty]
        own = self.zones[who]
        if above and not own.is_empty:
            own = shapely.difference(own, shapely.union_all(above))      # rule 1: the receiving channel wins
        taken = shapely.difference(shapely.union_all(others), own) if not own.is_empty else shapely.union_all(others)
        return shapely.difference(area, taken)

    def with_footprint(self, who: int, lines) -> "Territory":
        """This territory with reach ``who``'s footprint set to the area between its section ``lines``."""
        feet = self.footprints.copy()
        feet[who] = footprint(lines)
        out = replace(self, footprints=feet)
        out.__dict__.pop("_segment_trees", None)
        return out

    def _trees(self) -> list:
        """One STRtree of segments per centreline (nearest-segment distances), built once."""
        trees = self.__dict__.get("_segment_trees")
        if trees is None:
            trees = []
            for g in self.lines:
                c = shapely.get_coordinates(g)
                trees.append(shapely.STRtree(shapely.linestrings(np.stack((c[:-1], c[1:]), axis=1))))
            for polys in (self.zones, self.banks, self.footprints):
                shapely.prepare(polys)
            object.__setattr__(self, "_segment_trees", trees)
        return trees


def _inside(polys: np.ndarray, xy: np.ndarray, boxes: np.ndarray | None = None) -> np.ndarray:
    """(K, R) whether each point lies in each polygon (tested only inside the polygon's ``boxes``)."""
    out = np.zeros((len(xy), len(polys)), dtype=bool)
    for r, z in enumerate(polys):
        if z.is_empty:
            continue
        if boxes is None:
            out[:, r] = shapely.contains_xy(z, xy[:, 0], xy[:, 1])
            continue
        b = boxes[r]
        cand = np.flatnonzero((xy[:, 0] >= b[0]) & (xy[:, 0] <= b[2]) & (xy[:, 1] >= b[1]) & (xy[:, 1] <= b[3]))
        if cand.size:
            out[cand, r] = shapely.contains_xy(z, xy[cand, 0], xy[cand, 1])
    return out


def make_territory(reaches, scales: dict, channel_polygons=None, flows_into: dict | None = None,
                   channel_half: dict | None = None, bank_margin: dict | None = None) -> Territory:
    """Territory of ``reaches`` ((id, line) pairs) with half section widths ``scales`` {id: m}.

    ``channel_polygons``: the channel land-cover polygons (any reach); each reach's channel zone is
    the part of them within ``channel_half[id]`` x 1.1 of its centreline (default 10 m; at most a
    quarter of its section half-width, so a land cover that calls the whole valley channel does not
    hand one reach the others' centrelines), or that
    strip itself where there is no channel cover; ``bank_margin`` {id: m} widens it into the bank
    strip (default 4 m). ``flows_into``: {tributary id: receiving id}.
    """
    names = tuple(str(r) for r, _ in reaches)
    lines = shapely.force_2d(np.asarray([g for _, g in reaches], dtype=object))
    scale = np.array([float(scales[n]) for n in names])
    half = {n: min(float((channel_half or {}).get(n, 10.0)), 0.25 * float(scales[n])) for n in names}
    polys = None
    if channel_polygons is not None and len(channel_polygons):
        polys = shapely.union_all(np.asarray(channel_polygons, dtype=object))
    zones = []
    for n, g in zip(names, lines):
        strip = shapely.buffer(g, 1.1 * half[n], cap_style="flat")
        zone = shapely.intersection(strip, polys) if polys is not None else strip
        zones.append(zone if not zone.is_empty else shapely.buffer(g, half[n], cap_style="flat"))
    margin = {n: float((bank_margin or {}).get(n, 4.0)) for n in names}
    banks = [shapely.buffer(z, margin[n]) for n, z in zip(names, zones)]
    flows = {str(k): str(v) for k, v in (flows_into or {}).items()}
    receiving = np.array([names.index(flows[n]) if flows.get(n) in names else -1 for n in names])
    empty = np.array([Polygon() for _ in names], dtype=object)
    return Territory(names, lines, scale, np.asarray(zones, dtype=object), _ranks(names, flows),
                     np.asarray(banks, dtype=object), receiving, empty)


def footprint(lines):
    """The area between consecutive section lines (each pair's quadrilateral, repaired), united."""
    geoms = list(lines)
    quads = []
    for a, b in zip(geoms[:-1], geoms[1:]):
        ring = list(a.coords) + list(b.coords)[::-1]
        quads.append(shapely.make_valid(Polygon([c[:2] for c in ring])))
    parts = shapely.get_parts(shapely.get_parts(np.asarray(quads, dtype=object)))
    parts = parts[(shapely.get_type_id(parts) == shapely.GeometryType.POLYGON) & (shapely.area(parts) > 0)]
    return shapely.union_all(parts) if parts.size else Polygon()


def _ranks(names: tuple[str, ...], flows_into: dict) -> np.ndarray:
    """1 + the longest chain of tributaries flowing into each reach (receiving reaches rank higher)."""
    rank = {n: 0 for n in names}
    for _ in range(len(names)):
        changed = False
        for trib, target in flows_into.items():
            if trib in rank and target in rank and rank[target] < rank[trib] + 1:
                rank[target] = rank[trib] + 1
                changed = True
        if not changed:
            break
    return np.array([rank[n] for n in names], dtype=np.int64)


def own_extent(territory: Territory, who: int, sides, step: float, margin: float, drafting: bool = False) -> np.ndarray:
    """(N, 2) side lengths kept inside reach ``who``'s territory (``margin`` m short of leaving it).

    Each side path is sampled every ``step`` m; the first sample owned by another reach is found
    and the boundary located between it and the sample before by bisection.
    """
    length = sides.length
    k = max(int(np.ceil(length.max() / step)), 1)
    frac = np.linspace(0.0, 1.0, k + 1)
    dist = length[..., None] * frac[None, None, :]
    pts = sides.points(dist)
    own = territory.owns(who, pts.reshape(-1, 2), drafting).reshape(dist.shape)
    own[..., 0] = True
    leaves = ~own.all(axis=2)
    first = np.argmax(~own, axis=2)
    lo = np.take_along_axis(dist, np.maximum(first - 1, 0)[..., None], axis=2)[..., 0]
    hi = np.take_along_axis(dist, first[..., None], axis=2)[..., 0]
    n, s = np.nonzero(leaves)
    lo, hi = lo[n, s], hi[n, s]
    for _ in range(BISECT_STEPS):
        mid = 0.5 * (lo + hi)
        probe = np.zeros(dist.shape[:2] + (1,))
        probe[n, s, 0] = mid
        inside = territory.owns(who, sides.points(probe)[n, s, 0], drafting)
        lo, hi = np.where(inside, mid, lo), np.where(inside, hi, mid)
    out = length.copy()
    out[n, s] = np.maximum(lo - margin, 0.0)
    return out


def own_reach_end(territory: Territory, who: int, line, step: float, drafting: bool = False) -> float:
    """Chainage (m) where ``line`` first leaves reach ``who``'s territory (its length if never)."""
    length = float(line.length)
    s = np.arange(0.0, length + step, step)
    s[-1] = min(s[-1], length)
    xy = points_along(line, s)
    own = territory.owns(who, xy, drafting)
    if own.all():
        return length
    first = int(np.argmax(~own))
    if first == 0:
        return 0.0
    lo, hi = s[first - 1], s[first]
    for _ in range(BISECT_STEPS):
        mid = 0.5 * (lo + hi)
        p = points_along(line, [mid])
        lo, hi = (mid, hi) if territory.owns(who, p, drafting)[0] else (lo, mid)
    return float(lo)
