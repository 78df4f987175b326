"""The validated configuration as frozen dataclasses (what the rest of geoflow reads).

Built by :func:`geoflow.config.load_config`; see the README's config reference for every key.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from ..constants import VERTICAL_UNITS as _UNIT_FACTORS
from ..constants import G

REGIMES = ("subcritical", "supercritical", "mixed")
BOUNDARY_TYPES = ("normal_depth", "stage", "critical", "rating", "junction")
FRICTION_SLOPE_METHODS = ("average_conveyance", "arithmetic", "geometric", "harmonic")
MAPPING_OUTPUTS = ("wse", "depth", "velocity", "extent", "report")
ROUGHNESS_CASES = ("low", "high")          # besides "normal", which is always computed
ADJUST_WORDS = ("channel", "floodplain")   # calibration groups named by a word rather than a class list
VERTICAL_UNITS = tuple(_UNIT_FACTORS)
STRUCTURE_TYPES = ("culvert", "weir", "bridge")
#: smallest distance (m) from a structure's chainage to each of its face sections
MIN_FACE_OFFSET = 1.0
SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass(frozen=True)
class RunConfig:
    name: str
    output_dir: Path


@dataclass(frozen=True)
class TerrainConfig:
    dem: Path
    vertical_unit: str = "m"


@dataclass(frozen=True)
class ReachesConfig:
    centrelines: Path
    layer: str | None = None
    id_field: str = "reach_id"
    check_direction: bool = True      # compare the drawn direction with the DEM; reverse (and warn) if upstream


@dataclass(frozen=True)
class SectionsConfig:
    spacing: float
    width: float
    sample_step: float | None = None
    rise: float | None = None          # adaptive width: each side ends where ground is this far above the bed
    lines: Path | None = None          # user-drawn section lines (replace automatic ones for the reaches given)
    lines_layer: str | None = None
    storage_areas: Path | None = None  # polygons that hold water but carry no flow (storage)
    storage_areas_layer: str | None = None
    detect_storage: bool = True        # find the obvious storage (behind embankments, side valleys, pits)
    reaches: Mapping[str, "SectionsConfig"] = field(default_factory=lambda: MappingProxyType({}))

    def for_reach(self, reach_id: str) -> "SectionsConfig":
        """The per-reach override ([sections.reaches.<id>]) or these defaults."""
        return self.reaches.get(reach_id, self)


@dataclass(frozen=True)
class RoughnessClass:
    n: float
    n_low: float | None = None
    n_high: float | None = None
    n_by_depth: tuple[tuple[float, float], ...] = ()       # ((local flow depth m, n), ...) increasing depth
    n_by_discharge: tuple[tuple[float, float], ...] = ()   # ((reach discharge m3/s, n), ...) increasing Q


@dataclass(frozen=True)
class RoughnessConfig:
    landcover: Path
    class_field: str
    channel_class: str
    classes: Mapping[str, RoughnessClass]
    layer: str | None = None
    default_n: float | None = None
    table: Path | None = None           # CSV class table (class,n[,n_low,n_high]); TOML classes override it
    cases: tuple[str, ...] = ()         # roughness cases besides "normal": "low" (n_low), "high" (n_high)

    def n_table(self) -> dict[str, float]:
        return {name: c.n for name, c in self.classes.items()}

    def all_cases(self) -> tuple[str, ...]:
        """"normal" and the configured cases, in the order normal, low, high."""
        return ("normal",) + tuple(c for c in ROUGHNESS_CASES if c in self.cases)


@dataclass(frozen=True)
class FlowChange:
    chainage: float
    discharge: float
    reach: str | None = None


@dataclass(frozen=True)
class Event:
    name: str
    discharge: float | Mapping[str, float]
    changes: tuple[FlowChange, ...] = ()

    def upstream_discharge(self, reach_id: str) -> float | None:
        """Discharge (m3/s) at the upstream end of ``reach_id``; None if this event gives none."""
        if isinstance(self.discharge, Mapping):
            return self.discharge.get(reach_id)
        return float(self.discharge)

    def changes_for(self, reach_id: str) -> tuple[FlowChange, ...]:
        return tuple(sorted((c for c in self.changes if c.reach in (None, reach_id)), key=lambda c: c.chainage))


@dataclass(frozen=True)
class BoundarySpec:
    type: str
    slope: float | None = None
    wse: float | None = None
    discharge: tuple[float, ...] = ()
    stage: tuple[float, ...] = ()
    reach: str | None = None          # junction: the reach this one flows into


@dataclass(frozen=True)
class BoundaryConfig:
    downstream: BoundarySpec
    regime: str = "subcritical"
    upstream: BoundarySpec | None = None
    reaches: Mapping[str, Mapping[str, BoundarySpec]] = field(default_factory=lambda: MappingProxyType({}))

    def for_reach(self, reach_id: str) -> tuple[BoundarySpec, BoundarySpec | None]:
        """(downstream, upstream) boundary of a reach: the per-reach override or the default."""
        override = self.reaches.get(reach_id, {})
        return override.get("downstream", self.downstream), override.get("upstream", self.upstream)


@dataclass(frozen=True)
class HydraulicsConfig:
    friction_slope: str = "average_conveyance"
    contraction: float = 0.1
    expansion: float = 0.3
    gravity: float = G


@dataclass(frozen=True)
class MappingConfig:
    cell_size: float | None = None
    outputs: tuple[str, ...] = MAPPING_OUTPUTS


@dataclass(frozen=True)
class ChannelShape:
    """A channel cut below the DEM's channel ground (the flown water surface), ``[channel] shape``.

    Trapezoid of ``bottom_width`` (m) and ``side_slope`` (H:V), ``depth`` m below the lowest DEM
    ground of the channel part, or the depth at which it carries ``flow_at_survey`` (m3/s) at the
    flown water level (Manning normal depth at ``slope``, default: fitted to the DEM along the reach).
    """

    bottom_width: float
    side_slope: float
    depth: float | None = None
    flow_at_survey: float | None = None
    slope: float | None = None


@dataclass(frozen=True)
class ChannelReach:
    """Per-reach channel settings (``[channel.reaches.<id>]``)."""

    shape: ChannelShape | None = None
    use_survey: bool = True


@dataclass(frozen=True)
class ChannelConfig:
    """The channel below the DEM surface: surveyed ground points and/or a shape to cut (``[channel]``)."""

    survey: Path | None = None
    survey_layer: str | None = None
    shape: ChannelShape | None = None
    reaches: Mapping[str, ChannelReach] = field(default_factory=lambda: MappingProxyType({}))

    def for_reach(self, reach_id: str) -> ChannelReach:
        """Shape and survey use of a reach: its ``[channel.reaches.<id>]`` table over the defaults."""
        own = self.reaches.get(reach_id)
        if own is None:
            return ChannelReach(shape=self.shape, use_survey=True)
        return ChannelReach(shape=own.shape or self.shape, use_survey=own.use_survey)


@dataclass(frozen=True)
class CalibrationConfig:
    """Observed water levels (points with ``event`` and ``wse_m``) and the n multipliers fitted to them.

    ``adjust``: groups sharing one multiplier, each "channel" (the channel class), "floodplain"
    (every other class no list names) or a tuple of class names. ``bounds``: (lowest, highest)
    multiplier. ``mark_accuracy``: standard error of an observed level, m (for the covariance).
    """

    observations: Path
    layer: str | None = None
    adjust: tuple = ("channel", "floodplain")
    bounds: tuple[float, float] = (0.5, 2.0)
    mark_accuracy: float = 0.03


@dataclass(frozen=True)
class RatingCurvesConfig:
    """Discharges (m3/s, increasing) solved at every section; optional downstream boundary for them."""

    discharges: tuple[float, ...]
    downstream: BoundarySpec | None = None


@dataclass(frozen=True)
class StructureSpec:
    """A culvert, weir or bridge on a reach (``[[structures]]``).

    ``hydraulics`` holds its parameters as the record of :mod:`geoflow.hydraulics.structures`
    (``Culvert``, ``Weir`` or ``Bridge``; a bridge's abutments are set when its reach is built,
    from ``opening`` or from the DEM). ``length`` (m) is its extent along the flow: the faces
    sit ``half_gap`` upstream and downstream of ``chainage``. ``opening``: bridge abutments
    as (left, right) distances from the centreline, m, or None (from the DEM).
    ``approach_velocity``: a weir's head is the energy head at its upstream face.
    """

    id: str
    reach: str
    chainage: float
    type: str
    length: float
    hydraulics: Any
    opening: tuple[float, float] | None = None
    approach_velocity: bool = False

    @property
    def half_gap(self) -> float:
        """Distance (m) from ``chainage`` to each face: half the length, at least MIN_FACE_OFFSET."""
        return max(0.5 * self.length, MIN_FACE_OFFSET)

    @property
    def faces(self) -> tuple[float, float]:
        """Chainages (m) of the upstream and downstream faces."""
        return self.chainage - self.half_gap, self.chainage + self.half_gap

    @property
    def where(self) -> str:
        """Its TOML path, for messages."""
        return f"[[structures]] {self.id!r}"


@dataclass(frozen=True)
class Config:
    path: Path
    sha256: str
    run: RunConfig
    terrain: TerrainConfig
    reaches: ReachesConfig
    sections: SectionsConfig
    roughness: RoughnessConfig
    events: tuple[Event, ...]
    boundary: BoundaryConfig
    hydraulics: HydraulicsConfig = HydraulicsConfig()
    mapping: MappingConfig = MappingConfig()
    channel: ChannelConfig | None = None
    calibration: CalibrationConfig | None = None
    rating_curves: RatingCurvesConfig | None = None
    structures: tuple[StructureSpec, ...] = ()

    def structures_on(self, reach_id: str) -> tuple[StructureSpec, ...]:
        """The structures of one reach, upstream first."""
        return tuple(sorted((s for s in self.structures if s.reach == reach_id), key=lambda s: s.chainage))

    def input_files(self) -> dict[str, Path]:
        """Every input file this config names, by its TOML key (the config file itself included).

        The one registry of inputs: the manifest's input identity, ``--resume`` and every cache
        key on it, and no output may overwrite any of them. A feature that adds an input file
        adds it here.
        """
        files = {"config": self.path, "[terrain] dem": self.terrain.dem,
                 "[reaches] centrelines": self.reaches.centrelines, "[roughness] landcover": self.roughness.landcover,
                 "[roughness] table": self.roughness.table, "[sections] lines": self.sections.lines,
                 "[sections] storage_areas": self.sections.storage_areas,
                 "[channel] survey": self.channel.survey if self.channel is not None else None,
                 "[calibration] observations": self.calibration and self.calibration.observations}
        return {k: Path(p) for k, p in files.items() if p is not None}
