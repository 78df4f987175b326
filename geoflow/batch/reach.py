"""The stages of one reach wired together, in memory: sections -> Manning's n -> steady profiles.

It holds no hydraulics and no file formats itself: sections/ and roughness/ build the
geometry, hydraulics/ computes; mapping, outputs and reports are written by :mod:`.tasks`.
"""
from __future__ import annotations

import dataclasses
from collections.abc import Mapping

import numpy as np
import pandas as pd
import shapely
from shapely.geometry import Point

from .. import roughness, sections, timing
from ..config import BoundarySpec, Config, Event
from ..config.crosscheck import junction_order
from ..errors import GeoflowError, HydraulicsError
from ..hydraulics import Boundary, SolverOptions, build_table
from ..hydraulics import solve_events as hydraulics_solve_events
from ..records import ReachGeometry
from ..roughness.cases import scaled_classes, scaled_section
from . import structures
from .inputs import Inputs


def build_geometry(cfg: Config, inputs: Inputs, reach_id: str, line) -> ReachGeometry:
    """Cut (or take the user's) cross-sections of one reach, sample them, give each segment its n.

    Automatic sections follow the floodplain flow (dog-legs where they reach beyond the meander
    belt), stay inside the reach's own part of the valley floor (:mod:`geoflow.sections.territory`)
    and off narrow raised strips (roads, embankments); the faces of each structure are cut at the
    ends of its span ([[structures]]) and kept by every layout step. Then: n per segment, the
    channel below the DEM ([channel]), storage, floodplain lengths between the floodplain legs,
    and the structures placed between their faces.
    """
    sc = cfg.sections.for_reach(reach_id)
    with timing.stage("sections"):
        if reach_id in inputs.user_lines:
            geom = sections.sections_from_lines(reach_id, line, inputs.user_lines[reach_id], inputs.dem,
                                                sample_step=sc.sample_step, source=cfg.sections.lines)
        else:
            shared = layout_inputs(cfg, inputs)
            geom = shared.drafts.get(reach_id) or _cut(cfg, inputs, shared, reach_id, line, shared.territory)
    with timing.stage("overlay"):
        if inputs.storage_areas is not None and len(inputs.storage_areas):
            geom = roughness.split_at_cover_edges(geom, _Polygons(inputs.storage_areas))
        geom = roughness.assign_roughness(geom, inputs.cover, cfg.roughness.channel_class, cfg.roughness.n_table(),
                                          default_n=cfg.roughness.default_n, update_lengths=False)
    with timing.stage("sections"):
        geom = fit_channel(cfg, inputs, geom)
        geom = sections.mark_storage(geom, inputs.dem, areas=inputs.storage_areas,
                                     detect=cfg.sections.detect_storage, step=sc.sample_step)
        geom = dataclasses.replace(geom, lengths=sections.floodplain_lengths(geom))
        geom = structures.place(cfg, geom, inputs.dem)
    notes = tuple(inputs.warnings.get(reach_id, ()))
    return dataclasses.replace(geom, warnings=notes + tuple(geom.warnings)) if notes else geom


class _Polygons:
    """Polygons seen as a land cover for :func:`geoflow.roughness.split_at_cover_edges` (edges only)."""

    def __init__(self, geometries):
        self.geometries = np.asarray(geometries, dtype=object)
        self.tree = shapely.STRtree(self.geometries)


def _cut(cfg: Config, inputs: Inputs, shared, reach_id: str, line, territory):
    sc = cfg.sections.for_reach(reach_id)
    return sections.cut_sections(reach_id, line, inputs.dem, sc.spacing, sc.width, sample_step=sc.sample_step,
                                 rise=sc.rise, layout="auto", channel=shared.channel, territory=territory,
                                 strips=shared.strips, spans=structures.face_spans(cfg, reach_id))


@dataclasses.dataclass(frozen=True, eq=False)
class LayoutInputs:
    """What every reach's section layout shares: channel polygons, narrow strips, the territories,
    and the sections of the tributaries (cut first: their footprints are part of the territories)."""

    channel: np.ndarray
    strips: np.ndarray
    territory: sections.Territory
    drafts: dict


_LAYOUT_CACHE: dict[int, tuple[Inputs, LayoutInputs]] = {}


def layout_inputs(cfg: Config, inputs: Inputs) -> LayoutInputs:
    """Channel and strip polygons from the land cover and the reaches' territories (cached per inputs)."""
    hit = _LAYOUT_CACHE.get(id(inputs))
    if hit is not None and hit[0] is inputs:
        return hit[1]
    classes = np.asarray(inputs.cover.classes).astype(str)
    geoms = np.asarray(inputs.cover.geometries, dtype=object)
    channel = geoms[classes == str(cfg.roughness.channel_class)]
    strips = sections.narrow_strips(geoms, classes, skip=(cfg.roughness.channel_class,))
    ids = [rid for rid, _ in inputs.reaches]
    flows = dict(junction_order(cfg, ids))
    scales = {rid: 0.5 * cfg.sections.for_reach(rid).width for rid in ids}
    half = {rid: sections.typical_channel_half_width(g, channel) for rid, g in inputs.reaches}
    step = {rid: cfg.sections.for_reach(rid).sample_step or inputs.dem.cell_size for rid in ids}
    margin = {rid: float(sections.bend_distances(np.array([[half[rid], half[rid]]]), step[rid])[0, 0] - half[rid])
              for rid in ids}
    territory = sections.make_territory(inputs.reaches, scales, channel, flows, half, margin)
    out = LayoutInputs(channel=channel, strips=strips, territory=territory, drafts={})
    lines = dict(inputs.reaches)
    for i in np.argsort(territory.rank, kind="stable"):
        rid = territory.names[i]
        if territory.receiving[i] < 0 or rid in inputs.user_lines:
            continue
        try:
            draft = _cut(cfg, inputs, out, rid, lines[rid], territory)
        except GeoflowError:
            continue                       # the reach fails on its own when it is built
        territory = territory.with_footprint(int(i), [s.line for s in draft.sections])
        out.drafts[rid] = draft
    out = dataclasses.replace(out, territory=territory)
    _LAYOUT_CACHE.clear()
    _LAYOUT_CACHE[id(inputs)] = (inputs, out)
    return out


def map_clip(cfg: Config, inputs: Inputs, geom: ReachGeometry):
    """The polygon a reach's flood maps are cut to where it meets other reaches (None: no cut).

    Rule (README, reaches that meet): a cell takes its level from the reach whose sections cover it;
    where two reaches' areas touch, from the one that owns it by the territory rule. User-drawn
    sections are not cut.
    """
    if len(inputs.reaches) < 2 or geom.reach_id in inputs.user_lines:
        return None
    territory = layout_inputs(cfg, inputs).territory
    return territory.claim(territory.index(geom.reach_id), [s.line for s in geom.sections])


def fit_channel(cfg: Config, inputs: Inputs, geom: ReachGeometry) -> ReachGeometry:
    """The channel below the DEM surface from [channel] survey points and/or shape (after the edges are known)."""
    if cfg.channel is None:
        return geom
    rid = geom.reach_id
    own = cfg.channel.for_reach(rid)
    survey = inputs.survey.get(rid)
    if own.shape is None and survey is None:
        return geom
    where = f"[channel.reaches.{rid}] shape" if rid in cfg.channel.reaches and \
        cfg.channel.reaches[rid].shape is not None else "[channel] shape"
    n_channel = [roughness.composite_n_by_part(s)[1] for s in geom.sections]
    return sections.fit_channel(geom, own.shape, survey, cfg.sections.for_reach(rid).spacing, n_channel, where)


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


def solver_options(cfg: Config, tolerance: float | None = None) -> SolverOptions:
    """Solver settings of the config; ``tolerance`` (m) overrides the energy-balance tolerance."""
    h = cfg.hydraulics
    extra = {} if tolerance is None else {"tolerance": tolerance}
    return SolverOptions(g=h.gravity, regime=cfg.boundary.regime, friction_slope=h.friction_slope,
                         contraction=h.contraction, expansion=h.expansion, **extra)


def build_tables(geom: ReachGeometry, cfg: Config | None = None, discharge: float | None = None,
                 factors: Mapping[str, float] | None = None) -> list:
    """Hydraulic property tables of every section.

    With ``cfg``, classes that give ``n_by_depth`` make n vary with the local flow depth over each
    segment, and classes that give ``n_by_discharge`` take n at ``discharge`` (the event's
    upstream discharge of the reach; tables are then built per event). ``factors`` {class: f}
    multiply every n of a class, laws included (roughness cases, calibration multipliers;
    :mod:`geoflow.roughness.cases`); the ground and the n layout of the sections are reused.
    """
    classes = {} if cfg is None else cfg.roughness.classes
    factors = dict(factors or {})
    if factors:
        classes = scaled_classes(classes, factors)
    out = []
    for s in geom.sections:
        s = scaled_section(s, factors)
        out.append(build_table(s.station, s.elevation, roughness.n_at_discharge(s, classes, discharge), s.part,
                               n_depth=roughness.n_by_depth_table(s, classes), storage=s.storage,
                               name=f"reach {geom.reach_id!r} section {s.section_id}"))
    return out


def solve_events(cfg: Config, geom: ReachGeometry, tables: list, events: list[Event],
                 junction_wse: dict | None = None, options: SolverOptions | None = None,
                 downstream: BoundarySpec | None = None) -> dict:
    """Steady profiles of several events on one reach, solved together (vectorised across events).

    Returns {event name: Profile or HydraulicsError}: if the joint solve fails, each event is
    solved alone so one bad event (e.g. a discharge outside a rating table) spares the others.
    ``downstream`` replaces the reach's downstream boundary (rating curves).
    """
    _pack(tables)
    chainage = np.array([s.chainage for s in geom.sections])
    down, up = cfg.boundary.for_reach(geom.reach_id)
    down = downstream or down
    q = np.stack([discharge_along(ev, geom.reach_id, chainage) for ev in events])
    jw = None if junction_wse is None else np.array([junction_wse[ev.name] for ev in events])
    kw = dict(upstream=to_boundary(up), options=options or solver_options(cfg),
              structures=structures.links(cfg, geom, tables))
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


def _pack(tables: list) -> None:
    """Pack the level tables for the compiled kernel now (the solver reuses the pack) and give the
    pages of the tables' own copies back: a long reach's tables are a few hundred MB, and glibc
    would otherwise keep the freed copies while the solve allocates more."""
    from ..hydraulics.packed import pack_reach, packable
    from .tasks import release_memory
    if tables and packable(tables):
        pack_reach(tables)
        release_memory()


def solve_reach(cfg: Config, geom: ReachGeometry, events: list[Event] | None = None,
                junction_wse: dict | None = None, factors: Mapping[str, float] | None = None,
                options: SolverOptions | None = None, downstream: BoundarySpec | None = None) -> dict:
    """Steady profiles of the events (default: all) on one reach -> {event: Profile or HydraulicsError}.

    Events are solved together on shared tables (built once for these n ``factors``), unless some
    class's n depends on discharge: then each event gets tables built with n at its own upstream
    discharge.
    """
    events = list(cfg.events) if events is None else events
    kw = dict(options=options, downstream=downstream)
    if not roughness.varies_with_discharge(cfg.roughness.classes):
        return solve_events(cfg, geom, build_tables(geom, cfg, factors=factors), events, junction_wse, **kw)
    out = {}
    for ev in events:
        tables = build_tables(geom, cfg, discharge=ev.upstream_discharge(geom.reach_id), factors=factors)
        out.update(solve_events(cfg, geom, tables, [ev], junction_wse, **kw))
    return out


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
