"""Side paths of sections: straight across the channel, then across the valley (dog-legs).

Pure geometry on shapely/numpy. A section is two *sides* that start at its centre (where the
centreline crosses it): side 0 runs left, side 1 right (looking downstream). Each side is a path
of at most two straight legs:

* the channel leg, along the channel normal (perpendicular to the smoothed centreline), up to
  the bend ``bend`` m from the centre (just beyond the channel edge);
* the floodplain leg, from the bend along the valley normal (perpendicular to the valley axis at
  the bend's projection on it, see :mod:`geoflow.sections.valley`), to the side's length.

A side shorter than its bend, or whose bend turns by less than ``STRAIGHT_DEG``, is one straight
leg along the channel normal (so a straight channel in a straight valley keeps straight
sections). Side lengths are measured along the path, so a side can be shortened (at another
reach, at a crossing) without changing its route.

Where the floodplain leg would cross the reach's own centreline again (inside a tight meander
loop, where the channel turns across the valley) that side keeps the channel normal farther, across
the meander belt, and bends beyond it: in the meander belt the flow follows the channel.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import shapely

from .common import points_along

STRAIGHT_DEG = 0.5            # bends turning less than this are straightened
_SIGN = np.array([1.0, -1.0])  # side 0 goes along +normal (left), side 1 along -normal (right)


@dataclass(frozen=True, eq=False)
class Sides:
    """Paths of the two sides of N sections (arrays indexed [section, side])."""

    centre: np.ndarray        # (N, 2) centre points
    first: np.ndarray         # (N, 2, 2) unit direction of the channel leg
    bend: np.ndarray          # (N, 2) distance from the centre to the bend (inf: no bend)
    second: np.ndarray        # (N, 2, 2) unit direction of the floodplain leg
    length: np.ndarray        # (N, 2) side length along the path, m
    channel_leg: np.ndarray | None = None   # (N, 2) channel edge + margin, m (kept when a side is straight)

    @classmethod
    def straight(cls, centre: np.ndarray, normal: np.ndarray, length: np.ndarray) -> "Sides":
        """Sides along the channel normal (the classical straight section)."""
        first = _SIGN[None, :, None] * normal[:, None, :]
        length = np.asarray(length, float)
        return cls(centre, first, np.full(length.shape, np.inf), first.copy(), length, np.zeros(length.shape))

    def subset(self, keep: np.ndarray) -> "Sides":
        """The sections selected by the boolean or index array ``keep``."""
        leg = None if self.channel_leg is None else self.channel_leg[keep]
        return Sides(self.centre[keep], self.first[keep], self.bend[keep], self.second[keep], self.length[keep], leg)

    def with_length(self, length: np.ndarray) -> "Sides":
        return replace(self, length=np.asarray(length, dtype=float))

    def points(self, dist: np.ndarray) -> np.ndarray:
        """Coordinates (N, 2, K, 2) at distances ``dist`` (N, 2, K) along each side path."""
        d = np.asarray(dist, dtype=float)
        lead = np.minimum(d, self.bend[..., None])
        rest = np.maximum(d - self.bend[..., None], 0.0)
        rest = np.where(np.isfinite(rest), rest, 0.0)
        return (self.centre[:, None, None, :] + lead[..., None] * self.first[:, :, None, :]
                + rest[..., None] * self.second[:, :, None, :])

    def is_bent(self) -> np.ndarray:
        """(N, 2) whether each side has a floodplain leg (its length goes past its bend)."""
        return self.length > self.bend + 1e-9

    def coords(self, k: int) -> np.ndarray:
        """Vertices of section k from its left end to its right end (2 to 4 points)."""
        lead = np.minimum(self.length[k], self.bend[k])
        rest = np.where(np.isfinite(self.bend[k]), np.maximum(self.length[k] - self.bend[k], 0.0), 0.0)
        ends = self.centre[k] + lead[:, None] * self.first[k] + rest[:, None] * self.second[k]
        out = [ends[0]]
        bent = self.is_bent()[k]
        if bent[0]:
            out.append(self.centre[k] + self.bend[k, 0] * self.first[k, 0])
        if bent[1]:
            out.append(self.centre[k] + self.bend[k, 1] * self.first[k, 1])
        out.append(ends[1])
        return np.asarray(out)

    def lines(self) -> list:
        return [shapely.LineString(self.coords(k)) for k in range(self.centre.shape[0])]

    def pieces(self, k: int) -> list[tuple[np.ndarray, np.ndarray]]:
        """Straight pieces of section k (start, end) from left to right: the channel leg in the middle."""
        c = self.coords(k)
        return [(c[i], c[i + 1]) for i in range(len(c) - 1)]


def dogleg_sides(centre: np.ndarray, normal: np.ndarray, bend: np.ndarray, length: np.ndarray, valley,
                 own_line=None) -> Sides:
    """Sides bent at ``bend`` (N, 2) m from the centre onto the valley normal (see module notes)."""
    leg = np.asarray(bend, dtype=float)
    bend = np.minimum(leg, np.asarray(length, dtype=float))
    first = _SIGN[None, :, None] * normal[:, None, :]
    knee = centre[:, None, :] + bend[..., None] * first                       # (N, 2, 2)
    _, vn = valley.frame(knee.reshape(-1, 2))
    vn = vn.reshape(knee.shape)
    outward = np.sign(np.einsum("nsk,nsk->ns", vn, first))
    outward[outward == 0] = 1.0
    second = vn * outward[..., None]
    cos_turn = np.clip(np.einsum("nsk,nsk->ns", first, second), -1.0, 1.0)
    straight = np.degrees(np.arccos(cos_turn)) < STRAIGHT_DEG
    second = np.where(straight[..., None], first, second)
    bend = np.where(straight, np.inf, bend)
    sides = Sides(centre, first, bend, second, np.asarray(length, dtype=float), leg)
    if own_line is not None:
        sides = _across_meander_loops(sides, own_line, valley)
    return sides


def across_valley_lengths(sides: Sides, valley, half_width: float) -> np.ndarray:
    """(N, 2) side lengths that end each side ``half_width`` m from the valley axis (measured along
    the axis normal), never shorter than the channel leg and never longer than twice ``half_width``.

    The offset of a side's last leg from the axis changes at the rate cos(angle to the axis normal)
    along it, so the rest of the side is (half_width - offset at its start) / cos.
    """
    bent = np.isfinite(sides.bend)
    lead = np.where(bent, sides.bend, 0.0)
    start = sides.centre[:, None, :] + lead[..., None] * sides.first
    u, vn = valley.frame(start.reshape(-1, 2))
    foot = points_along(valley.axis, u)
    offset = np.einsum("pk,pk->p", start.reshape(-1, 2) - foot, vn).reshape(bent.shape)
    rate = np.einsum("nsk,nsk->ns", sides.second, vn.reshape(sides.second.shape))   # d(offset)/d(length)
    outward = np.where(rate >= 0, 1.0, -1.0)
    rest = (half_width - outward * offset) / np.maximum(np.abs(rate), 0.5)
    return np.clip(lead + np.maximum(rest, 0.0), np.where(bent, sides.bend, 0.0), 2.0 * half_width)


def _across_meander_loops(sides: Sides, own_line, valley, tries: int = 40) -> Sides:
    """Sides whose floodplain leg would cross the own centreline again bend farther out instead.

    Inside a meander loop, where the channel runs across the valley, the side keeps the channel
    normal across the meander belt: the bend moves out by a fortieth of the side's length at a time
    until the leg beyond it clears the centreline; a side that never clears stays straight.
    """
    bent = sides.is_bent()
    if not bent.any():
        return sides
    n, s = np.nonzero(bent)
    crossing = shapely.intersects(_legs(sides, n, s, sides.bend[n, s]), own_line)
    if not crossing.any():
        return sides
    n, s = n[crossing], s[crossing]
    bend, second = sides.bend.copy(), sides.second.copy()
    bend[n, s], second[n, s] = np.inf, sides.first[n, s]           # straight unless a later bend clears
    todo = np.ones(n.size, dtype=bool)
    for j in range(1, tries + 1):
        b = sides.bend[n, s] + j * sides.length[n, s] / tries
        ok = todo & (b < sides.length[n, s])
        if not ok.any():
            break
        knee = sides.centre[n[ok]] + b[ok, None] * sides.first[n[ok], s[ok]]
        _, vn = valley.frame(knee)
        vn *= np.where(np.einsum("pk,pk->p", vn, sides.first[n[ok], s[ok]]) < 0, -1.0, 1.0)[:, None]
        leg = shapely.linestrings(np.stack((knee + 1e-6 * vn, knee + (sides.length[n[ok], s[ok]] - b[ok])[:, None] * vn),
                                           axis=1))
        clear = ~shapely.intersects(leg, own_line)
        idx = np.flatnonzero(ok)[clear]
        bend[n[idx], s[idx]] = b[idx]
        second[n[idx], s[idx]] = vn[clear]
        todo[idx] = False
    return replace(sides, bend=bend, second=second)


def _legs(sides: Sides, n, s, bend):
    """Floodplain legs (just beyond the bend to the side's end) of the sides (n, s)."""
    start = sides.centre[n] + (bend + 1e-6)[:, None] * sides.first[n, s]
    end = sides.points(sides.length[..., None])[n, s, 0]
    return shapely.linestrings(np.stack((start, end), axis=1))


def crossing_pairs(lines) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (i < j) of section lines that intersect (shapely STRtree)."""
    geoms = np.asarray(lines, dtype=object)
    i, j = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    keep = i < j
    return i[keep], j[keep]


def shorten_crossings(sides: Sides, factor: float = 0.98) -> tuple[Sides, np.ndarray, np.ndarray]:
    """Shorten one side of each crossing pair to ``factor`` x its distance (along the path) to the crossing.

    Of each pair the section crossed farther from its centre is shortened (ties: the downstream
    one), on the side where the crossing lies. Shortening only removes line, so no new crossing
    appears. Returns (sides, pairs (P, 2), new lengths) - pairs empty when nothing crossed.
    """
    lines = sides.lines()
    i, j = crossing_pairs(lines)
    if i.size == 0:
        return sides, np.empty((0, 2), dtype=np.int64), sides.length
    geoms = np.asarray(lines, dtype=object)
    centre_st = sides.length[:, 0]
    hit = shapely.intersection(geoms[i], geoms[j])
    pts = shapely.get_coordinates(hit, return_index=True)
    coords, which = pts
    pi, pj = i[which], j[which]
    st_i = shapely.line_locate_point(geoms[pi], shapely.points(coords)) - centre_st[pi]
    st_j = shapely.line_locate_point(geoms[pj], shapely.points(coords)) - centre_st[pj]
    pick_i = np.abs(st_i) > np.abs(st_j)
    sec = np.where(pick_i, pi, pj)
    along = np.where(pick_i, st_i, st_j)
    side = (along > 0).astype(int)                    # + station beyond the centre: right side
    new = sides.length.copy()
    np.minimum.at(new, (sec, side), factor * np.abs(along))
    return sides.with_length(new), np.column_stack((i, j)), new
