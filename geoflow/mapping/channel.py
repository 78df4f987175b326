"""The channel below the DEM surface on the map: how far to lower the DEM ground in each cell.

Where a section's channel ground was replaced (surveyed points or a cut shape, see
:mod:`geoflow.sections.channel`), the depth raster must measure depth down to that channel, not
down to the flown water surface the DEM shows. Each section i gives its lowering
dz_i(n*) = DEM ground - ground used, as a function of the normalised channel station
n* = (s - s_left) / (s_right - s_left) (0 at the left channel edge, 1 at the right one; 0
outside), tabulated at ``SAMPLES`` points.

Channel-fitted frame (the interpolation used for surveyed sections, Merwade, Maidment & Goff 2006):
a cell's place across the channel is its signed offset o from the centreline (distance from its
foot point, positive to the right looking downstream), so a channel that bends between sections
bends with the centreline instead of being cut along straight chords (in a bend of radius R a
chord between sections of spacing L misses the channel by up to L^2 / (8 R)). Section i has its
channel edges at offsets a_i (left) and b_i (right) from where the centreline crosses it. A cell
between sections i and i+1 (the same quad and inverse-distance weight w as its WSE) gets
n* = (o - a) / (b - a) with a = w a_i + (1 - w) a_{i+1}, b likewise, and the lowering
dz = w dz_i(n*) + (1 - w) dz_{i+1}(n*). On a section line (w = 1) it is that section's own
lowering. Only cells within a channel width of the straight channel chords are looked at. The
value depends only on the cell's position, never on how the grid is cut into blocks.
"""
from __future__ import annotations

import numpy as np
import shapely
import shapely.ops
from shapely.geometry import LineString

SAMPLES = 257          # tabulated points of each section's lowering across its channel
BAND = 0.5             # cells whose chord station lies within this many channel widths of the channel


class ChannelLowering:
    """Lowering of the DEM ground (m; > 0 where the channel was cut) for cells between sections."""

    def __init__(self, chords: np.ndarray, offsets: np.ndarray, lowering: np.ndarray, pieces: list):
        self.chords = chords            # (N, 4): x, y of the left channel edge, x, y of the right one
        self.offsets = offsets          # (N, 2): left and right channel edge, m right of the centreline
        self.lowering = lowering        # (N, SAMPLES): dz at n* = 0 .. 1
        self.pieces = pieces            # centreline piece around quad i (i = 0 .. N-2)

    @classmethod
    def from_sections(cls, sections, centreline=None) -> "ChannelLowering | None":
        """None when no section's ground differs from the DEM. Without a centreline the line through
        the middles of the channel chords stands in for it."""
        if all(s.dem_elevation is None for s in sections):
            return None
        n = len(sections)
        grid = np.linspace(0.0, 1.0, SAMPLES)
        chords, table = np.zeros((n, 4)), np.zeros((n, SAMPLES))
        for i, s in enumerate(sections):
            left, right = s.channel_edges
            scale = s.line.length / s.station[-1]
            chords[i] = shapely.get_coordinates(shapely.line_interpolate_point(s.line, [left * scale,
                                                                                      right * scale])).ravel()
            if s.dem_elevation is not None:
                inside = (s.station >= left - 1e-9) & (s.station <= right + 1e-9)
                table[i] = np.interp(grid, (s.station[inside] - left) / (right - left),
                                     (s.dem_elevation - s.elevation)[inside])
        if centreline is None:
            middles = 0.5 * (chords[:, :2] + chords[:, 2:])
            centreline = LineString(middles)
            chain = shapely.line_locate_point(centreline, shapely.points(middles))
        else:
            centreline = shapely.force_2d(centreline)
            chain = np.array([s.chainage for s in sections])
        pieces = [_piece(centreline, chain[i], chain[i + 1]) for i in range(n - 1)]
        offsets = np.array([[_offset(pieces[min(i, n - 2)], chords[i, [k]], chords[i, [k + 1]])[0] for k in (0, 2)]
                            for i in range(n)])
        return cls(chords, offsets, table, pieces)

    def at(self, x: np.ndarray, y: np.ndarray, idx: np.ndarray, w_up: np.ndarray) -> np.ndarray:
        """Lowering (m) at cells (x, y) between sections idx and idx + 1, weight w_up on idx."""
        out = np.zeros(x.shape)
        chord = w_up * _chord_station(self.chords[idx], x, y) + (1.0 - w_up) * _chord_station(self.chords[idx + 1], x, y)
        near = np.flatnonzero((chord > -BAND) & (chord < 1.0 + BAND))
        for q in np.unique(idx[near]):
            cells = near[idx[near] == q]
            w = w_up[cells]
            a = w * self.offsets[q, 0] + (1.0 - w) * self.offsets[q + 1, 0]
            b = w * self.offsets[q, 1] + (1.0 - w) * self.offsets[q + 1, 1]
            nstar = (_offset(self.pieces[q], x[cells], y[cells]) - a) / (b - a)
            out[cells] = w * self._sample(q, nstar) + (1.0 - w) * self._sample(q + 1, nstar)
        return out

    def _sample(self, i: int, nstar: np.ndarray) -> np.ndarray:
        """Tabulated lowering of section i at ``nstar`` (linear), 0 outside the channel."""
        value = np.interp(nstar, np.linspace(0.0, 1.0, SAMPLES), self.lowering[i])
        return np.where((nstar >= 0.0) & (nstar <= 1.0), value, 0.0)


def _chord_station(chords: np.ndarray, x, y) -> np.ndarray:
    """Normalised position of the cells' projection onto the channel chords (rows of ``chords``)."""
    dx, dy = chords[:, 2] - chords[:, 0], chords[:, 3] - chords[:, 1]
    len2 = dx * dx + dy * dy
    return np.divide((x - chords[:, 0]) * dx + (y - chords[:, 1]) * dy, len2, out=np.full_like(len2, -9.0),
                     where=len2 > 0)


def _piece(centreline, c0: float, c1: float):
    """The centreline from a section spacing before c0 to one after c1 (the cells of a quad project
    onto it), continued straight past the centreline's ends where it stops short."""
    lo, hi = min(c0, c1), max(c0, c1)
    pad = max(hi - lo, 1.0)
    xy = shapely.get_coordinates(shapely.ops.substring(centreline, max(lo - pad, 0.0),
                                                       min(hi + pad, centreline.length)))
    head, tail = lo - pad < 0.0, hi + pad > centreline.length
    if head and len(xy) >= 2:
        xy = np.vstack([xy[0] + (xy[0] - xy[1]) / np.hypot(*(xy[0] - xy[1])) * (pad - lo), xy])
    if tail and len(xy) >= 2:
        xy = np.vstack([xy, xy[-1] + (xy[-1] - xy[-2]) / np.hypot(*(xy[-1] - xy[-2])) * (hi + pad - centreline.length)])
    return LineString(xy)


def _offset(line, x, y) -> np.ndarray:
    """Signed distance (m) of points from ``line``: positive to the right looking along it.

    The foot point's chainage comes from shapely (``line_locate_point``); the segment it lies on,
    the foot point and the segment's direction are then found with numpy.
    """
    xy = shapely.get_coordinates(line)
    seg = np.diff(xy, axis=0)
    cum = np.concatenate([[0.0], np.cumsum(np.hypot(seg[:, 0], seg[:, 1]))])
    px, py = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    chain = shapely.line_locate_point(line, shapely.points(px, py))
    k = np.clip(np.searchsorted(cum, chain, side="right") - 1, 0, seg.shape[0] - 1)
    length = np.maximum(cum[k + 1] - cum[k], 1e-12)
    t = ((chain - cum[k]) / length)[:, None]
    foot = xy[k] + t * seg[k]
    rx, ry = px - foot[:, 0], py - foot[:, 1]
    left = seg[k, 0] * ry - seg[k, 1] * rx > 0
    return np.where(left, -1.0, 1.0) * np.hypot(rx, ry)
