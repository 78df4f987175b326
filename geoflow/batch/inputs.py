"""The inputs of one config, opened once and shared by its reaches (edge I/O through terrain/layers)."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import shapely
from shapely.geometry import box

from .. import layers, terrain
from ..config import Config
from ..config.crosscheck import input_problems, raise_problems
from ..errors import ConfigError, GeoflowError, InputDataError
from ..records import SurveyPoints
from ..roughness import landcover_classes
from ..sections import orient_centreline
from ..sections.survey import assign_points, describe_points
from .marks import match_marks


@dataclass(frozen=True)
class Inputs:
    """Opened inputs shared by every reach of a config (no open file handles: picklable)."""

    dem: terrain.Dem
    reaches: tuple[tuple[str, object], ...]     # (reach_id, LineString in DEM CRS, drawn downstream)
    cover: object                               # layers.LandCover
    user_lines: dict = field(default_factory=dict)   # reach_id -> [LineString] user section lines
    warnings: dict = field(default_factory=dict)     # reach_id -> [str] (e.g. direction reversed)
    unusable: dict = field(default_factory=dict)     # reach_id -> why its centreline cannot be used
    storage_areas: object = None                     # polygons that carry no flow ([sections] storage_areas)
    survey: dict = field(default_factory=dict)       # reach_id -> SurveyPoints near it ([channel] survey)
    marks: dict = field(default_factory=dict)        # reach_id -> marks.ReachMarks ([calibration] observations)
    _index: dict = field(default_factory=dict, compare=False, repr=False)   # look-ups built on first use

    def line_of(self, reach_id: str):
        """The centreline of ``reach_id`` (a dict built once: O(1) per reach, not O(reaches))."""
        return self.lines_by_id()[reach_id]

    def lines_by_id(self) -> dict:
        """{reach id: centreline}, built once (read it, do not change it)."""
        if "lines" not in self._index:
            self._index["lines"] = dict(self.reaches)
        return self._index["lines"]

    def reaches_near(self, bounds) -> list[str]:
        """Ids (layer order) of the centrelines whose box meets ``bounds`` (left, bottom, right, top)."""
        if "tree" not in self._index:
            self._index["tree"] = shapely.STRtree([line for _, line in self.reaches])
        hits = np.sort(self._index["tree"].query(box(*bounds)))
        return [self.reaches[int(k)][0] for k in hits]


def open_inputs(cfg: Config) -> Inputs:
    """Open the DEM, centrelines and land cover and check them against the roughness table.

    Centrelines drawn upstream (judged from the DEM) are reversed here, so every later stage,
    junctions included, sees them in the direction of flow.
    """
    dem = terrain.open_dem(cfg.terrain.dem, cfg.terrain.vertical_unit)
    bad: dict = {}
    reaches = layers.read_centrelines(cfg.reaches.centrelines, dem.crs, layer=cfg.reaches.layer,
                                      id_field=cfg.reaches.id_field, problems=bad)
    cover = layers.read_landcover(cfg.roughness.landcover, dem.crs, cfg.roughness.class_field,
                                  layer=cfg.roughness.layer)
    raise_problems(cfg, input_problems(cfg, [rid for rid, _ in reaches] + list(bad), landcover_classes(cover),
                                       dem.cell_size))
    warnings: dict = {}
    if cfg.reaches.check_direction:
        with dem.kept_open():
            reaches = [_oriented(rid, line, dem, warnings) for rid, line in reaches]
    user = {}
    if cfg.sections.lines is not None:
        user = layers.read_section_lines(cfg.sections.lines, dem.crs, layer=cfg.sections.lines_layer,
                                         id_field=cfg.reaches.id_field)
        unknown = sorted(set(user) - {rid for rid, _ in reaches} - set(bad))
        if unknown:
            raise ConfigError(f"{cfg.sections.lines}: section lines name reach(es) {', '.join(map(repr, unknown))} "
                              f"that are not in {cfg.reaches.centrelines.name}; fix the {cfg.reaches.id_field!r} values")
    survey = _survey_points(cfg, dem, reaches, warnings)
    marks = {}
    if cfg.calibration is not None:
        observed = layers.read_marks(cfg.calibration.observations, dem.crs, layer=cfg.calibration.layer)
        marks = match_marks(cfg, observed, reaches)
    storage = None
    if cfg.sections.storage_areas is not None:
        storage = layers.read_polygons(cfg.sections.storage_areas, dem.crs, layer=cfg.sections.storage_areas_layer)
    return Inputs(dem=dem, reaches=tuple(reaches), cover=cover, user_lines=user, warnings=warnings, unusable=bad,
                  storage_areas=storage, survey=survey, marks=marks)


def _survey_points(cfg: Config, dem, reaches, warnings: dict) -> dict[str, SurveyPoints]:
    """[channel] survey points by reach, with the DEM ground under each; points near no reach are an error."""
    if cfg.channel is None or cfg.channel.survey is None:
        return {}
    pts = layers.read_survey_points(cfg.channel.survey, dem.crs, layer=cfg.channel.survey_layer)
    pts = SurveyPoints(pts.x, pts.y, pts.z, dem.sample(pts.x, pts.y), pts.fid, pts.source)
    half = {rid: cfg.sections.for_reach(rid).width / 2 for rid, _ in reaches}
    by_reach, lost = assign_points(pts, list(reaches), half)
    if lost.size:
        raise InputDataError(f"{pts.source}: {lost.size} survey point(s) lie farther than half the section width "
                             f"([sections] width) from every centreline: {describe_points(pts, lost)}; delete them, "
                             "or check their coordinates and CRS")
    out = {}
    for rid, idx in by_reach.items():
        if cfg.channel.for_reach(rid).use_survey:
            out[rid] = pts.subset(idx)
        else:
            warnings.setdefault(rid, []).append(f"reach {rid}: {idx.size} survey point(s) near it are not used "
                                                f"([channel.reaches.{rid}] use_survey = false)")
    return out


def _oriented(rid: str, line, dem, warnings: dict):
    """The centreline in the direction of flow (only lines inside the DEM are checked)."""
    if not shapely.contains(box(*dem.bounds), line):
        return rid, line
    try:
        fixed, note = orient_centreline(rid, line, dem)
    except GeoflowError:
        return rid, line
    if note:
        warnings.setdefault(rid, []).append(note)
    return rid, fixed
