"""Channel edges from the ground profile alone, for sections with no channel land cover.

Method (common practice, no source): top of bank by break in slope.

1. Thalweg: the lowest ground point within ``search`` m of the centre station (where the
   centreline crosses the section; default search = max(10 % of the section width, 3
   samples)), so a low spot far out on the floodplain is not taken for the channel.
2. Each side is walked outwards from the thalweg. With g the outward ground slope of each
   segment and G the steepest outward slope met so far, the top of bank is the first point
   where the next segment's slope falls below ``slope_fraction`` x G, once the walk has
   climbed a real bank: G >= ``min_slope`` and the point stands at least ``min_height`` m
   above the thalweg. A flat bed (g = 0, G = 0) never stops the walk; the flattening at the
   top of a trapezoidal bank does.
3. A side with no such break (e.g. a V-shaped valley, or a bank running off the section) gets
   its bank one sample from the thalweg: the channel is then the minimal notch at the lowest
   point, the rule geoflow used before this module existed.

Pure numpy; each side is one vectorised pass (cumulative maximum), no loop over points.
"""
from __future__ import annotations

import numpy as np

from ..errors import GeometryError


def detect_banks(station, elevation, centre_station: float, slope_fraction: float = 0.3, min_slope: float = 0.05,
                 min_height: float = 0.1, search: float | None = None) -> tuple[float, float]:
    """(left, right) channel edges (m, ground-point stations) of one profile by break in slope.

    ``station`` (m, increasing, from the left end) and ``elevation`` (m) have the same length
    (>= 2); ``centre_station`` is where the centreline crosses. See the module notes.
    """
    st = np.asarray(station, dtype=np.float64)
    z = np.asarray(elevation, dtype=np.float64)
    if st.ndim != 1 or st.shape != z.shape or st.size < 2 or not np.all(np.diff(st) > 0):
        raise GeometryError("detect_banks: station and elevation must be 1-D, of equal length >= 2, with stations "
                            "strictly increasing")
    if not np.all(np.isfinite(z)):
        raise GeometryError("detect_banks: elevation has NaN; fill ground gaps before looking for banks")
    i0 = thalweg_index(st, z, float(centre_station), search)
    right = _walk(st[i0:] - st[i0], z[i0:], slope_fraction, min_slope, min_height)
    left = _walk(st[i0] - st[i0::-1], z[i0::-1], slope_fraction, min_slope, min_height)
    return float(st[max(i0 - left, 0)]), float(st[min(i0 + right, st.size - 1)])


def thalweg_index(station: np.ndarray, elevation: np.ndarray, centre_station: float, search: float | None = None) -> int:
    """Index of the lowest ground within ``search`` m of the centre (nearest point if none is that close)."""
    if search is None:
        step = float(np.median(np.diff(station)))
        search = max(0.1 * float(station[-1] - station[0]), 3.0 * step)
    near = np.abs(station - centre_station) <= search
    if not near.any():
        return int(np.argmin(np.abs(station - centre_station)))
    idx = np.flatnonzero(near)
    return int(idx[np.argmin(elevation[idx])])


def _walk(dist: np.ndarray, z: np.ndarray, fraction: float, min_slope: float, min_height: float) -> int:
    """Points from the thalweg (index 0) to the top of bank along one side; 1 when no break is found."""
    if dist.size < 2:
        return 0
    g = np.diff(z) / np.diff(dist)                 # outward slope of segment j (point j -> j + 1)
    steepest = np.maximum.accumulate(g)
    stop = (g < fraction * steepest) & (steepest >= min_slope) & (z[:-1] - z[0] >= min_height)
    if not stop.any():
        return 1
    return int(np.argmax(stop))
