"""The valley a reach flows down: its axis (a strongly smoothed centreline) and the directions across it.

Pure geometry on shapely/numpy/scipy. Method (our own; no published source):

1. Meander half-wavelength. The centreline is resampled every ``ds`` m and its heading theta(s)
   taken from a lightly smoothed copy (Gaussian, sigma = 2 ds). The inflection points of a meander
   are the extremes of theta(s); they are found with a hysteresis of ``HYSTERESIS_DEG`` (a turn back
   by less than that is a wiggle, not a new bend), so noise and small wiggles do not count. The
   half-wavelength is the median arc distance between consecutive extremes; a line with fewer than
   two extremes has no measurable meander (two give one half-wavelength: a reach one meander long).
2. Axis. The resampled centreline is smoothed by a Gaussian of sigma = one half-wavelength (at least
   ``width`` / 4, at most a third of the line's length). For a sine-generated meander this leaves
   exp(-pi^2 / 2) = 0.7 % of the lateral swing, so the axis runs down the middle of the meander belt.
   Where meanders of several lengths mix, the axis may still bend more tightly than the sections
   are wide; sigma then grows by 40 % at a time until the axis's smallest radius of curvature is at
   least ``width``. Its normals (the floodplain legs) meet at that radius on the inside of a bend,
   so at the sections' ends, ``width`` / 2 from the axis, legs stay at least half as far apart as
   on the axis: they do not fan.
   Beyond the ends the line is continued for the filter by reflection in a frame aligned with its
   last stretch: point reflection along it (the line keeps going the same way) and mirror
   reflection across it (a bend that ends the line does not pull the axis sideways).
3. Meander belt. Its half-width is the largest distance from the centreline to the axis; the
   floodplain beyond it drains down the valley, not along the channel.

The valley direction at a point is the axis tangent at the point's projection on the axis; the
lines across the valley (the normals of the axis) are where floodplain legs of sections lie.
Normals of a smooth axis do not meet within its radius of curvature, so legs on them never fan
together or cross within that distance.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely.geometry import LineString

from .common import locate_along, points_along

HYSTERESIS_DEG = 8.0          # a heading extreme counts once the line has turned back by this much
MAX_SAMPLES = 20_000          # resampling points along the centreline (at most)


@dataclass(frozen=True, eq=False)
class Valley:
    """Axis of a reach's valley and what it was derived from (all lengths in m)."""

    axis: LineString            # DEM CRS, same direction as the centreline
    half_wavelength: float | None   # meander half-wavelength along the channel, None if none measured
    sigma: float                # Gaussian smoothing length used for the axis
    belt_half_width: float      # largest distance from the centreline to the axis

    def frame(self, points: np.ndarray, h: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(u, left normal): chainage along the axis of each point (N, 2) and the unit normal there.

        The normal points to the left of the valley direction looking downstream; ``h`` is the
        half-length of the chord that gives the axis direction (default: a twentieth of sigma).
        """
        u = locate_along(self.axis, points)
        length = float(self.axis.length)
        h = max(0.05 * self.sigma, 1e-3 * length) if h is None else float(h)
        a = points_along(self.axis, np.clip(u - h, 0.0, length))
        b = points_along(self.axis, np.clip(u + h, 0.0, length))
        t = b - a
        t /= np.maximum(np.hypot(t[:, 0], t[:, 1]), 1e-12)[:, None]
        return u, np.column_stack((-t[:, 1], t[:, 0]))


def valley_of(centreline: LineString, width: float, step: float | None = None) -> Valley:
    """The valley axis of a centreline (see the module notes); ``width`` is the section width, m."""
    line = shapely.force_2d(centreline)
    length = float(line.length)
    ds = max(length / MAX_SAMPLES, min(1.0, length / 50.0)) if step is None else float(step)
    count = max(int(math.ceil(length / ds)), 4)
    pts = points_along(line, np.linspace(0.0, length, count + 1))
    ds = length / count
    half = meander_half_wavelength(pts, ds)
    sigma = min(max(0.25 * float(width), half or 0.0), length / 3.0)
    smooth = smooth_line(pts, sigma / ds)
    while sigma < length / 3.0 and min_radius(smooth, ds, 0.25 * float(width)) < float(width):
        sigma = min(1.4 * sigma, length / 3.0)
        smooth = smooth_line(pts, sigma / ds)
    every = max(int(sigma / (20.0 * ds)), 1)                  # the smooth axis needs few vertices
    axis = LineString(np.vstack((smooth[::every], smooth[-1:])) if (len(smooth) - 1) % every else smooth[::every])
    belt = float(np.max(shapely.distance(shapely.points(pts[::max(every // 4, 1)]), axis)))
    return Valley(axis=axis, half_wavelength=half, sigma=sigma, belt_half_width=belt)


def min_radius(pts: np.ndarray, ds: float, window: float) -> float:
    """Smallest radius of curvature (m) of a polyline sampled every ``ds``, its turning averaged over
    ``window`` m (so a kink between two samples does not count as a point of infinite curvature)."""
    d = np.diff(pts, axis=0)
    heading = np.unwrap(np.arctan2(d[:, 1], d[:, 0]))
    k = max(int(round(window / ds)), 1)
    if heading.size <= k:
        return float("inf")
    turn = np.abs(heading[k:] - heading[:-k])
    return float(k * ds / max(turn.max(), 1e-12))


def meander_half_wavelength(pts: np.ndarray, ds: float) -> float | None:
    """Median arc distance (m) between consecutive heading extremes of a polyline sampled every ``ds``."""
    if len(pts) < 8:
        return None
    light = np.column_stack([gaussian(pts[:, k], 2.0) for k in range(2)])
    d = np.diff(light, axis=0)
    theta = np.unwrap(np.arctan2(d[:, 1], d[:, 0]))
    at = extremes_with_hysteresis(theta, math.radians(HYSTERESIS_DEG))
    if at.size < 2:
        return None
    return float(np.median(np.diff(at)) * ds)


def extremes_with_hysteresis(values: np.ndarray, drop: float) -> np.ndarray:
    """Indices of alternating maxima and minima of ``values``, each confirmed by a turn back of ``drop``.

    A running extreme is kept until the signal moves back from it by more than ``drop``; then it is
    recorded and the search turns to the opposite kind. The unfinished last extreme is not recorded.
    """
    out: list[int] = []
    hi = lo = 0
    direction = 0                               # +1 looking for a maximum, -1 for a minimum
    for i in range(1, values.size):
        v = values[i]
        if v > values[hi]:
            hi = i
        if v < values[lo]:
            lo = i
        if direction >= 0 and values[hi] - v > drop:
            out.append(hi)
            direction, lo = -1, i
        elif direction <= 0 and v - values[lo] > drop:
            out.append(lo)
            direction, hi = 1, i
    return np.asarray(out[1:] if out and out[0] == 0 else out, dtype=np.int64)


def gaussian(values: np.ndarray, sigma: float) -> np.ndarray:
    """Gaussian filter (standard deviation ``sigma`` samples, truncated at 4 sigma) of a 1-D
    sequence, continued beyond its ends by its end values (numpy convolution)."""
    radius = max(int(math.ceil(4.0 * sigma)), 1)
    x = np.arange(-radius, radius + 1, dtype=float)
    kernel = np.exp(-0.5 * (x / sigma) ** 2)
    kernel /= kernel.sum()
    padded = np.pad(np.asarray(values, dtype=float), radius, mode="edge")
    return np.convolve(padded, kernel, mode="valid")


def smooth_line(pts: np.ndarray, sigma_samples: float) -> np.ndarray:
    """Gaussian smoothing of polyline vertices (equally spaced) with the end continuation of the notes."""
    if sigma_samples <= 0.5:
        return pts.copy()
    pad = int(min(math.ceil(4 * sigma_samples), len(pts) - 1))
    head = _continued(pts, pad, at_end=False)
    tail = _continued(pts, pad, at_end=True)
    ext = np.vstack((head, pts, tail))
    out = np.column_stack([gaussian(ext[:, k], sigma_samples) for k in range(2)])
    return out[pad:pad + len(pts)]


def _continued(pts: np.ndarray, pad: int, at_end: bool) -> np.ndarray:
    """``pad`` points continuing the line beyond one end (reflection in the end frame)."""
    seq = pts[::-1] if not at_end else pts
    end = seq[-1]
    back = seq[-1 - pad:-1][::-1]                  # the pad points before the end, nearest first
    chord = end - seq[max(len(seq) - 1 - pad, 0)]
    norm = math.hypot(*chord)
    t = chord / norm if norm > 0 else np.array([1.0, 0.0])
    n = np.array([-t[1], t[0]])
    rel = back - end
    along, across = rel @ t, rel @ n
    ext = end + np.outer(-along, t) + np.outer(across, n)    # point reflection along, mirror across
    return ext[::-1] if not at_end else ext

