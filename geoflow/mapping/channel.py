"""The channel below the DEM surface on the map: how far to lower the DEM ground in each cell.

Where a section's channel ground was replaced (surveyed points or a cut shape, see
:mod:`geoflow.sections.channel`), the depth raster must measure depth down to that channel, not
down to the flown water surface the DEM shows. Each section i gives its lowering
dz_i(n*) = DEM ground - ground used, as a function of the normalised channel station
n* = (s - s_left) / (s_right - s_left) (0 at the left channel edge, 1 at the right one; 0
outside), tabulated at ``SAMPLES`` points.

A cell between sections i and i+1 (the same quad and inverse-distance weight w as its WSE) gets
its normalised station in each section's channel chord (the straight line from the left to the
right channel edge), blended n* = w n*_i + (1 - w) n*_{i+1}, and the lowering
dz = w dz_i(n*) + (1 - w) dz_{i+1}(n*): the channel-fitted interpolation used for surveyed
sections (Merwade, Maidment & Goff 2006), so a channel that moves across the floodplain between
sections moves with it. On a section line (w = 1) it is that section's own lowering. The value
depends only on the cell's position, never on how the grid is cut into blocks.
"""
from __future__ import annotations

import numpy as np
import shapely

SAMPLES = 257          # tabulated points of each section's lowering across its channel


class ChannelLowering:
    """Lowering of the DEM ground (m, >= 0 where the channel was cut) for cells between sections."""

    def __init__(self, chords: np.ndarray, lowering: np.ndarray):
        self.chords = chords            # (N, 4): x, y of the left channel edge, x, y of the right one
        self.lowering = lowering        # (N, SAMPLES): dz at n* = 0 .. 1

    @classmethod
    def from_sections(cls, sections) -> "ChannelLowering | None":
        """None when no section's ground differs from the DEM."""
        if all(s.dem_elevation is None for s in sections):
            return None
        grid = np.linspace(0.0, 1.0, SAMPLES)
        chords = np.zeros((len(sections), 4))
        table = np.zeros((len(sections), SAMPLES))
        for i, s in enumerate(sections):
            left, right = s.channel_edges
            scale = s.line.length / s.station[-1]
            ends = shapely.line_interpolate_point(s.line, [left * scale, right * scale])
            chords[i] = shapely.get_coordinates(ends).ravel()
            if s.dem_elevation is not None:
                inside = (s.station >= left - 1e-9) & (s.station <= right + 1e-9)
                nstar = (s.station[inside] - left) / (right - left)
                table[i] = np.interp(grid, nstar, (s.dem_elevation - s.elevation)[inside])
        return cls(chords, table)

    def at(self, x: np.ndarray, y: np.ndarray, idx: np.ndarray, w_up: np.ndarray) -> np.ndarray:
        """Lowering (m) at cells (x, y) between sections idx and idx + 1, weight w_up on idx."""
        nstar = w_up * self._nstar(x, y, idx) + (1.0 - w_up) * self._nstar(x, y, idx + 1)
        return w_up * self._sample(idx, nstar) + (1.0 - w_up) * self._sample(idx + 1, nstar)

    def _nstar(self, x, y, idx) -> np.ndarray:
        """Normalised station of the cells' projection onto the channel chord of sections ``idx``."""
        c = self.chords[idx]
        dx, dy = c[:, 2] - c[:, 0], c[:, 3] - c[:, 1]
        len2 = dx * dx + dy * dy
        return np.divide((x - c[:, 0]) * dx + (y - c[:, 1]) * dy, len2, out=np.full_like(len2, -1.0),
                         where=len2 > 0)

    def _sample(self, idx, nstar) -> np.ndarray:
        """Tabulated lowering of sections ``idx`` at ``nstar`` (linear), 0 outside the channel."""
        pos = nstar * (SAMPLES - 1)
        k0 = np.clip(np.floor(pos).astype(np.int64), 0, SAMPLES - 2)
        f = pos - k0
        value = (1.0 - f) * self.lowering[idx, k0] + f * self.lowering[idx, k0 + 1]
        return np.where((nstar >= 0.0) & (nstar <= 1.0), value, 0.0)
