"""Frozen records passed between pipeline stages.

Conventions: SI units; chainage in metres from the upstream end of the
centreline, increasing downstream; stations in metres from the left end of a
cross-section looking downstream; elevations in the DEM's vertical datum (metres).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from shapely.geometry import LineString

# Codes of the three conveyance parts of a section, per station segment.
LEFT_FLOODPLAIN, CHANNEL, RIGHT_FLOODPLAIN = 0, 1, 2


@dataclass(frozen=True, eq=False)
class Section:
    """One cross-section cut across a reach, with ground profile and roughness.

    Arrays: ``station`` and ``elevation`` have m points; ``n``, ``landcover``, ``part`` and
    ``storage`` describe the m-1 segments between consecutive points. ``line`` may be a
    polyline (a dog-leg); stations are distances along it.
    """

    reach_id: str
    section_id: int            # 0 at the upstream end, increasing downstream
    chainage: float            # m along the centreline from its upstream end
    line: LineString           # DEM CRS, from the left end to the right end (looking downstream)
    station: np.ndarray        # (m,) m from the left end, strictly increasing
    elevation: np.ndarray      # (m,) ground elevation, m (DEM vertical datum)
    n: np.ndarray = field(default=None)          # (m-1,) Manning's n per segment
    landcover: np.ndarray = field(default=None)  # (m-1,) land-cover class name per segment
    part: np.ndarray = field(default=None)       # (m-1,) int8: LEFT_FLOODPLAIN / CHANNEL / RIGHT_FLOODPLAIN
    flags: tuple[str, ...] = ()
    storage: np.ndarray = field(default=None)    # (m-1,) bool: holds water but carries no flow (None: all convey)

    @property
    def channel_edges(self) -> tuple[float, float]:
        """Stations (m) of the left and right bank: the ends of the channel part."""
        if self.part is None or not np.any(self.part == CHANNEL):
            return float(self.station[0]), float(self.station[-1])
        idx = np.flatnonzero(self.part == CHANNEL)
        return float(self.station[idx[0]]), float(self.station[idx[-1] + 1])

    @property
    def bed_elevation(self) -> float:
        """Lowest ground elevation in the section (thalweg), m."""
        return float(np.min(self.elevation))


@dataclass(frozen=True, eq=False)
class ReachGeometry:
    """All cross-sections of one reach, ordered upstream to downstream."""

    reach_id: str
    centreline: LineString     # DEM CRS, drawn in the direction of flow
    sections: tuple[Section, ...]
    lengths: np.ndarray        # (N-1, 3) m from section i to i+1: left floodplain, channel, right floodplain
    warnings: tuple[str, ...] = ()
    valley_axis: LineString | None = None    # the smoothed valley axis the floodplain legs are normal to
