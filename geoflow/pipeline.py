"""One reach, start to finish: sections -> Manning's n -> steady profiles -> flood maps.

This module wires the stages together. It holds no hydraulics and no file formats itself:
terrain/layers read inputs, hydraulics/ computes, mapping/outputs/report write.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely
from shapely.geometry import Point, box

from . import layers, roughness, sections, terrain
from .config import BoundarySpec, Config, Event
from .errors import ConfigError, GeoflowError, HydraulicsError
from .hydraulics.geometry import build_table
from .hydraulics.solver import Boundary, SolverOptions
from .hydraulics.solver import solve_events as hydraulics_solve_events
from .records import ReachGeometry

PROFILE_COLUMNS = (
    "reach_id", "event", "section_id", "chainage_m", "discharge_m3s", "bed_m", "wse_m", "energy_m",
    "critical_wse_m", "velocity_ms", "froude", "alpha", "area_m2", "top_width_m", "friction_slope", "flags",
)


# Solver flags that describe the section rather than call for review; kept out of profile.csv.
INFO_ONLY_FLAGS = frozenset({"several_critical_depths"})


@dataclass(frozen=True)
class Inputs:
    """Opened inputs shared by every reach of a config (no open file handles: picklable)."""

    dem: terrain.Dem
    reaches: tuple[tuple[str, object], ...]     # (reach_id, LineString in DEM CRS, drawn downstream)
    cover: object                               # layers.LandCover
    user_lines: dict = field(default_factory=dict)   # reach_id -> [LineString] user section lines
    warnings: dict = field(default_factory=dict)     # reach_id -> [str] (e.g. direction reversed)
    unusable: dict = field(default_factory=dict)     # reach_id -> why its centreline cannot be used


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
    _check_classes(cfg, cover)
    _check_events(cfg, [rid for rid, _ in reaches] + list(bad))
    warnings: dict = {}
    if cfg.reaches.check_direction:
        reaches = [_oriented(rid, line, dem, warnings) for rid, line in reaches]
    user = {}
    if cfg.sections.lines is not None:
        user = layers.read_section_lines(cfg.sections.lines, dem.crs, layer=cfg.sections.lines_layer,
                                         id_field=cfg.reaches.id_field)
        unknown = sorted(set(user) - {rid for rid, _ in reaches} - set(bad))
        if unknown:
            raise ConfigError(f"{cfg.sections.lines}: section lines name reach(es) {', '.join(map(repr, unknown))} "
                              f"that are not in {cfg.reaches.centrelines.name}; fix the {cfg.reaches.id_field!r} values")
    return Inputs(dem=dem, reaches=tuple(reaches), cover=cover, user_lines=user, warnings=warnings, unusable=bad)


def _oriented(rid: str, line, dem, warnings: dict):
    """The centreline in the direction of flow (only lines inside the DEM are checked)."""
    if not shapely.contains(box(*dem.bounds), line):
        return rid, line
    try:
        fixed, note = sections.orient_centreline(rid, line, dem)
    except GeoflowError:
        return rid, line
    if note:
        warnings.setdefault(rid, []).append(note)
    return rid, fixed


def _check_classes(cfg: Config, cover) -> None:
    present = roughness.landcover_classes(cover)
    missing = [c for c in present if c not in cfg.roughness.classes]
    if missing and cfg.roughness.default_n is None:
        raise ConfigError(
            f"{cfg.roughness.landcover}: land-cover class(es) {', '.join(map(repr, missing))} in field "
            f"{cfg.roughness.class_field!r} have no Manning's n; add [roughness.classes.<name>] tables or set "
            f"[roughness] default_n"
        )


def _check_events(cfg: Config, reach_ids: list[str]) -> None:
    known = set(reach_ids)
    for ev in cfg.events:
        if not isinstance(ev.discharge, float):
            for rid in ev.discharge:
                if rid not in known:
                    raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} discharge names reach {rid!r}, which is "
                                      f"not in {cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
            for rid in known - set(ev.discharge):
                raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} discharge gives no value for reach {rid!r}; "
                                  f"add {rid} = <m3/s> to its discharge table")
        for ch in ev.changes:
            if ch.reach is not None and ch.reach not in known:
                raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} changes names unknown reach {ch.reach!r}")
    for rid in cfg.sections.reaches:
        if rid not in known:
            raise ConfigError(f"{cfg.path}: [sections.reaches.{rid}] names a reach that is not in "
                              f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
    for rid in known:
        down, _ = cfg.boundary.for_reach(rid)
        if down.type == "junction":
            where = f"[boundary.reaches.{rid}] downstream" if rid in cfg.boundary.reaches else "[boundary] downstream"
            if down.reach not in known or down.reach == rid:
                raise ConfigError(f"{cfg.path}: {where}: junction reach {down.reach!r} must be another reach of "
                                  f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
    junction_order(cfg, sorted(known))
    for rid in cfg.boundary.reaches:
        if rid not in known:
            raise ConfigError(f"{cfg.path}: [boundary.reaches.{rid}] names a reach that is not in "
                              f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")


def build_geometry(cfg: Config, inputs: Inputs, reach_id: str, line) -> ReachGeometry:
    """Cut (or take the user's) cross-sections of one reach, sample them, give each segment its n."""
    sc = cfg.sections.for_reach(reach_id)
    if reach_id in inputs.user_lines:
        geom = sections.sections_from_lines(reach_id, line, inputs.user_lines[reach_id], inputs.dem,
                                            sample_step=sc.sample_step, source=cfg.sections.lines)
    else:
        # A section stops short of other reaches' centrelines, except those of tributaries that join
        # this reach (their mouth lies in this reach's floodplain, which carries their flow too).
        feeders = {rid for rid, target in junction_order(cfg, [r for r, _ in inputs.reaches]).items()
                   if target == reach_id}
        others = {rid: other for rid, other in inputs.reaches if rid != reach_id and rid not in feeders}
        geom = sections.cut_sections(reach_id, line, inputs.dem, sc.spacing, sc.width, sample_step=sc.sample_step,
                                     others=others, rise=sc.rise)
    geom = roughness.assign_roughness(geom, inputs.cover, cfg.roughness.channel_class, cfg.roughness.n_table(),
                                      default_n=cfg.roughness.default_n)
    notes = tuple(inputs.warnings.get(reach_id, ()))
    return dataclasses.replace(geom, warnings=notes + tuple(geom.warnings)) if notes else geom


def discharge_along(event: Event, reach_id: str, chainage: np.ndarray) -> np.ndarray:
    """Discharge (m3/s) at each section: the upstream value, replaced downstream of each flow change."""
    q = np.full(chainage.shape, float(event.upstream_discharge(reach_id)))
    for ch in event.changes_for(reach_id):
        q[chainage >= ch.chainage - 1e-6] = ch.discharge
    return q


def to_boundary(spec: BoundarySpec | None, junction_wse: np.ndarray | None = None) -> Boundary | None:
    """Solver boundary for a config spec; a junction takes the given WSE per event."""
    if spec is None:
        return None
    if spec.type == "junction":
        if junction_wse is None:
            raise HydraulicsError(f"junction boundary with reach {spec.reach!r} needs that reach's result first")
        return Boundary.stage(wse=junction_wse)
    if spec.type == "normal_depth":
        return Boundary.normal_depth(slope=spec.slope)
    if spec.type == "stage":
        return Boundary.stage(wse=spec.wse)
    if spec.type == "critical":
        return Boundary.critical()
    return Boundary.rating(discharge=np.asarray(spec.discharge), stage=np.asarray(spec.stage))


def solver_options(cfg: Config) -> SolverOptions:
    h = cfg.hydraulics
    return SolverOptions(g=h.gravity, regime=cfg.boundary.regime, friction_slope=h.friction_slope,
                         contraction=h.contraction, expansion=h.expansion)


def build_tables(geom: ReachGeometry, cfg: Config | None = None, discharge: float | None = None) -> list:
    """Hydraulic property tables of every section.

    With ``cfg``, classes that give ``n_by_depth`` make n vary with the local flow depth over each
    segment, and classes that give ``n_by_discharge`` take n at ``discharge`` (the event's
    upstream discharge of the reach; tables are then built per event).
    """
    return [build_table(s.station, s.elevation, _n_at(s, cfg, discharge), s.part, n_depth=_n_depth(s, cfg),
                        name=f"reach {geom.reach_id!r} section {s.section_id}")
            for s in geom.sections]


def _laws(cfg: Config | None, kind: str) -> dict:
    if cfg is None:
        return {}
    return {name: np.array(getattr(c, kind)) for name, c in cfg.roughness.classes.items() if getattr(c, kind)}


def _n_at(section, cfg: Config | None, discharge: float | None) -> np.ndarray:
    laws = _laws(cfg, "n_by_discharge")
    n = np.asarray(section.n, dtype=float)
    if not laws or discharge is None:
        return n
    n = n.copy()
    for name, law in laws.items():
        n[section.landcover == name] = np.interp(discharge, law[:, 0], law[:, 1])
    return n


def _n_depth(section, cfg: Config | None):
    """(depths (k,), n (k, m-1)) for build_table, or None when no class varies with depth."""
    laws = {k: v for k, v in _laws(cfg, "n_by_depth").items() if np.any(section.landcover == k)}
    if not laws:
        return None
    depths = np.unique(np.concatenate([law[:, 0] for law in laws.values()]))
    values = np.repeat(np.asarray(section.n, dtype=float)[None, :], depths.size, axis=0)
    for name, law in laws.items():
        values[:, section.landcover == name] = np.interp(depths, law[:, 0], law[:, 1])[:, None]
    return depths, values


def varies_with_discharge(cfg: Config) -> bool:
    return bool(_laws(cfg, "n_by_discharge"))


def solve_events(cfg: Config, geom: ReachGeometry, tables: list, events: list[Event],
                 junction_wse: dict | None = None) -> dict:
    """Steady profiles of several events on one reach, solved together (vectorised across events).

    Returns {event name: Profile or HydraulicsError}: if the joint solve fails, each event is
    solved alone so one bad event (e.g. a discharge outside a rating table) spares the others.
    """
    chainage = np.array([s.chainage for s in geom.sections])
    down, up = cfg.boundary.for_reach(geom.reach_id)
    q = np.stack([discharge_along(ev, geom.reach_id, chainage) for ev in events])
    jw = None if junction_wse is None else np.array([junction_wse[ev.name] for ev in events])
    kw = dict(upstream=to_boundary(up), options=solver_options(cfg))
    try:
        return dict(zip((ev.name for ev in events),
                        hydraulics_solve_events(tables, geom.lengths, q, downstream=to_boundary(down, jw), **kw)))
    except GeoflowError:
        pass
    out = {}
    for k, (ev, qe) in enumerate(zip(events, q)):
        try:
            bound = to_boundary(down, None if jw is None else jw[k:k + 1])
            out[ev.name] = hydraulics_solve_events(tables, geom.lengths, qe[None, :], downstream=bound, **kw)[0]
        except GeoflowError as exc:
            out[ev.name] = HydraulicsError(f"reach {geom.reach_id!r}, event {ev.name!r}: {exc}")
    return out


def solve_reach(cfg: Config, geom: ReachGeometry, events: list[Event] | None = None,
                junction_wse: dict | None = None) -> dict:
    """Steady profiles of the events (default: all) on one reach -> {event: Profile or HydraulicsError}.

    Events are solved together on shared tables, unless some class's n depends on discharge:
    then each event gets tables built with n at its own upstream discharge.
    """
    events = list(cfg.events) if events is None else events
    if not varies_with_discharge(cfg):
        return solve_events(cfg, geom, build_tables(geom, cfg), events, junction_wse)
    out = {}
    for ev in events:
        tables = build_tables(geom, cfg, discharge=ev.upstream_discharge(geom.reach_id))
        out.update(solve_events(cfg, geom, tables, [ev], junction_wse))
    return out


def profile_rows(geom: ReachGeometry, event: str, prof) -> pd.DataFrame:
    """profile.csv rows (contract columns first) for one reach and event."""
    n = len(geom.sections)
    flags = [";".join(k for k in dict.fromkeys(tuple(s.flags) + tuple(f)) if k not in INFO_ONLY_FLAGS)
             for s, f in zip(geom.sections, prof.flags)]
    df = pd.DataFrame({
        "reach_id": [geom.reach_id] * n,
        "event": [event] * n,
        "section_id": [s.section_id for s in geom.sections],
        "chainage_m": [s.chainage for s in geom.sections],
        "discharge_m3s": prof.discharge,
        "bed_m": [s.bed_elevation for s in geom.sections],
        "wse_m": prof.wse,
        "energy_m": prof.energy,
        "critical_wse_m": prof.critical_wse,
        "velocity_ms": prof.velocity,
        "froude": prof.froude,
        "alpha": prof.alpha,
        "area_m2": prof.area,
        "top_width_m": prof.top_width,
        "friction_slope": prof.friction_slope,
        "flags": flags,
    })
    df["regime"] = list(prof.regime)
    df["depth_m"] = df["wse_m"] - df["bed_m"]
    for j, name in enumerate(("left_overbank", "channel", "right_overbank")):
        df[f"q_{name}_m3s"] = prof.part_discharge[:, j]
    return df


def junction_order(cfg: Config, reach_ids: list[str]) -> dict[str, str]:
    """{reach: the reach whose WSE is its downstream boundary}; raises on a cycle."""
    deps = {}
    for rid in reach_ids:
        down, _ = cfg.boundary.for_reach(rid)
        if down.type == "junction":
            deps[rid] = down.reach
    for start in deps:
        seen, cur = {start}, start
        while cur in deps:
            cur = deps[cur]
            if cur in seen:
                raise ConfigError(f"{cfg.path}: junction boundaries form a loop through reach {start!r}; "
                                  "each chain must end at a reach with its own downstream boundary")
            seen.add(cur)
    return deps


def junction_wse_from(receiving_line, receiving_profile: pd.DataFrame, tributary_line, events: list[str],
                      receiving_id: str) -> dict:
    """WSE per event of the receiving reach where the tributary's downstream end meets it.

    The tributary's last vertex is projected onto the receiving centreline; its chainage there
    interpolates the receiving reach's WSE linearly between sections.
    """
    end = Point(tributary_line.coords[-1])
    ch = receiving_line.project(end)
    out = {}
    for ev in events:
        rows = receiving_profile[receiving_profile["event"] == ev].sort_values("chainage_m")
        if rows.empty or rows["wse_m"].isna().all():
            raise HydraulicsError(f"junction reach {receiving_id!r} has no result for event {ev!r}")
        out[ev] = float(np.interp(ch, rows["chainage_m"], rows["wse_m"]))
    return out
