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
# Where the ground of a section's channel comes from (``Section.bed_source``).
BED_SOURCES = ("dem", "survey", "shape")


@dataclass(frozen=True, eq=False)
class Section:
    """One cross-section cut across a reach, with ground profile and roughness.

    Arrays: ``station`` and ``elevation`` have m points; ``n``, ``landcover``, ``part`` and
    ``storage`` describe the m-1 segments between consecutive points. ``line`` may be a
    polyline (a dog-leg); stations are distances along it.

    ``elevation`` is the ground the computation uses. Where the channel below the DEM surface
    was replaced (surveyed points or a cut shape, :mod:`geoflow.sections.channel`),
    ``dem_elevation`` holds the DEM ground at the same stations and ``bed_source`` says what
    replaced it; otherwise ``dem_elevation`` is None and ``bed_source`` is ``"dem"``.
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
    dem_elevation: np.ndarray | None = None       # (m,) DEM ground where the channel was replaced, else None
    bed_source: str = "dem"                      # one of BED_SOURCES

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

    @property
    def dem_ground(self) -> np.ndarray:
        """DEM ground (m) at the stations: ``dem_elevation`` where the channel was replaced, else ``elevation``."""
        return self.elevation if self.dem_elevation is None else self.dem_elevation


@dataclass(frozen=True, eq=False)
class StructurePlace:
    """Where a structure sits among a reach's sections (:mod:`geoflow.sections.faces`).

    ``upstream``: index of its upstream face section (the downstream face is the next one);
    ``centre_stations``: station (m) where the centreline crosses the upstream / downstream
    face; ``offset`` / ``ground``: the DEM ground (m, NaN where nodata) along the line through
    the structure's chainage parallel to the upstream face, at ``offset`` m from the centreline
    (negative to the left, looking downstream).
    """

    structure_id: str
    kind: str                  # "culvert" | "weir" | "bridge"
    chainage: float
    upstream: int
    centre_stations: tuple[float, float]
    offset: np.ndarray
    ground: np.ndarray


@dataclass(frozen=True, eq=False)
class ReachGeometry:
    """All cross-sections of one reach, ordered upstream to downstream."""

    reach_id: str
    centreline: LineString     # DEM CRS, drawn in the direction of flow
    sections: tuple[Section, ...]
    lengths: np.ndarray        # (N-1, 3) m from section i to i+1: left floodplain, channel, right floodplain
    warnings: tuple[str, ...] = ()
    valley_axis: LineString | None = None    # the smoothed valley axis the floodplain legs are normal to
    channel: dict | None = None   # what replaced the DEM's channel (plain values; see sections.channel)
    structures: tuple[StructurePlace, ...] = ()   # culverts, weirs, bridges between face sections

    def structure_markers(self) -> list[tuple[float, str]]:
        """(chainage m, label) of each structure, upstream first, e.g. (3193.0, "bridge road_bridge"):
        where a long profile marks them (the face sections carry the flags structure_upstream_face /
        structure_downstream_face, and the upstream face's level is the structure's headwater)."""
        return [(p.chainage, f"{p.kind} {p.structure_id}") for p in self.structures]


@dataclass(frozen=True, eq=False)
class SurveyPoints:
    """Surveyed ground points in the DEM CRS: x, y (m), z (m, the DEM's vertical datum), the DEM
    ground under each point (m, NaN off the DEM) and the feature number in the file (for messages)."""

    x: np.ndarray
    y: np.ndarray
    z: np.ndarray
    dem_z: np.ndarray
    fid: np.ndarray
    source: str = ""           # file (layer) they came from, for messages

    def subset(self, idx) -> "SurveyPoints":
        """The points at ``idx`` (indices or a mask)."""
        return SurveyPoints(self.x[idx], self.y[idx], self.z[idx], self.dem_z[idx], self.fid[idx], self.source)

    def __len__(self) -> int:
        return int(self.x.size)
