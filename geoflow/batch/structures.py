"""Culverts, weirs and bridges of a reach in the pipeline: where its sections must leave room for
them, the solver links built on its section tables, the checks that need its sections, and what
the manifest says about them.

The hydraulics is in :mod:`geoflow.hydraulics.structures` (headwater for a discharge and a
tailwater) and :mod:`geoflow.hydraulics.links` (how the profile passes a structure); the face
sections in :mod:`geoflow.sections.faces`.

Bridge opening: the face sections are the ground just outside the bridge, brought into one
station frame (0 on the centreline, negative to the left). The abutments are ``opening`` of the
config when given, else where the DEM ground along the line through the bridge's chainage
(parallel to the faces: along the road) first reaches the low chord either side of the channel;
where it never does, the opening reaches that end of the face sections (a warning says so).
"""
from __future__ import annotations

import dataclasses

import numpy as np

from ..config import Config, StructureSpec
from ..errors import GeoflowError, GeometryError
from ..hydraulics import StructureLink
from ..hydraulics.structures import bridge_headwater, culvert_headwater, weir_headwater
from ..hydraulics.structures.opening import build_faces
from ..records import ReachGeometry, StructurePlace
from ..sections.faces import abutments, place_structures


def face_spans(cfg: Config, reach_id: str) -> list[tuple[float, float]]:
    """(upstream, downstream) face chainages of each structure of a reach, for ``cut_sections``."""
    return [s.faces for s in cfg.structures_on(reach_id)]


def place(cfg: Config, geom: ReachGeometry, dem) -> ReachGeometry:
    """``geom`` with its structures' faces flagged and placed (``sections.faces``); a warning for
    each side of a bridge opening that the DEM cannot close (module docstring)."""
    specs = cfg.structures_on(geom.reach_id)
    geom = place_structures(geom, [(s.id, s.chainage, s.type) for s in specs], dem)
    places = {p.structure_id: p for p in geom.structures}
    notes = [n for s in specs if s.type == "bridge" and s.opening is None
             for n in _open_sides(s, abutments(places[s.id], s.hydraulics.low_chord))]
    return dataclasses.replace(geom, warnings=tuple(geom.warnings) + tuple(notes)) if notes else geom


def _open_sides(spec: StructureSpec, ends) -> list[str]:
    return [f"reach {spec.reach}: bridge {spec.id!r}: the ground along the bridge never reaches its low chord on "
            f"the {side}; the opening reaches the end of the face sections there (give opening = {{ left = m, "
            "right = m }} if it is narrower)" for side, value in zip(("left", "right"), ends) if value is None]


def links(cfg: Config, geom: ReachGeometry, tables: list) -> list[StructureLink]:
    """The solver links of the reach's structures on these section tables (one roughness case)."""
    g = cfg.hydraulics.gravity
    places = {p.structure_id: p for p in geom.structures}
    out = []
    for spec in cfg.structures_on(geom.reach_id):
        p = places[spec.id]
        out.append(StructureLink(p.upstream, _headwater(spec, p, tables, g), name=spec.id))
    return out


def _headwater(spec: StructureSpec, p: StructurePlace, tables: list, g: float):
    k = p.upstream
    if spec.type == "culvert":
        return lambda q, tw: culvert_headwater(q, tw, spec.hydraulics, g=g)
    if spec.type == "weir":
        approach = tables[k] if spec.approach_velocity else None
        return lambda q, tw: weir_headwater(q, tw, spec.hydraulics, approach=approach, g=g)
    bridge, up, down = bridge_setup(spec, p, tables)
    return lambda q, tw: bridge_headwater(q, tw, bridge, up, down, g=g)


def bridge_setup(spec: StructureSpec, p: StructurePlace, tables: list):
    """(Bridge with its abutments, upstream face table, downstream face table) with both faces
    in the centreline station frame (module docstring)."""
    up = _shifted(tables[p.upstream], p.centre_stations[0])
    down = _shifted(tables[p.upstream + 1], p.centre_stations[1])
    lo = max(up.station[0], down.station[0])
    hi = min(up.station[-1], down.station[-1])
    if spec.opening is not None:
        left, right = -spec.opening[0], spec.opening[1]
    else:
        left, right = abutments(p, spec.hydraulics.low_chord)
    left = lo if left is None else max(float(left), lo)
    right = hi if right is None else min(float(right), hi)
    if not left < right:
        raise GeometryError(f"{spec.where}: no bridge opening: the abutments ({left:.1f}, {right:.1f} m from the "
                            f"centreline) leave no gap below low_chord {spec.hydraulics.low_chord:g} m; check "
                            "opening, low_chord and the chainage")
    bridge = dataclasses.replace(spec.hydraulics, opening_left=left, opening_right=right)
    return bridge, up, down


def _shifted(table, centre: float):
    """The same section table with stations measured from the centreline."""
    return dataclasses.replace(table, station=np.asarray(table.station, dtype=float) - centre)


def check(cfg: Config, geom: ReachGeometry, tables: list) -> list[str]:
    """Problems of the reach's structures against its sections (face tables)."""
    places = {p.structure_id: p for p in geom.structures}
    problems = []
    for spec in cfg.structures_on(geom.reach_id):
        p = places[spec.id]
        try:
            if spec.type == "culvert":
                problems += _culvert_width(spec, geom.sections[p.upstream])
            elif spec.type == "bridge":
                build_faces(*bridge_setup(spec, p, tables))
        except GeoflowError as exc:
            text = str(exc)
            problems.append(text if text.startswith(spec.where) else f"{spec.where}: {text}")
    return problems


def _culvert_width(spec: StructureSpec, face) -> list[str]:
    """A culvert whose barrels are wider than the valley at its road crest (or the whole face
    section without a crest) cannot be there."""
    c = spec.hydraulics
    total = c.barrels * c.barrel.span
    level = c.crest if c.crest is not None else float(np.max(face.elevation))
    width = width_below(face.station, face.elevation, level)
    if total > width:
        return [f"{spec.where}: {c.barrels} barrel(s) {total:.2f} m wide in all are wider than the valley at "
                f"the {'road crest' if c.crest is not None else 'top of the face section'} ({width:.2f} m at "
                f"{level:.2f} m, section at chainage {face.chainage:.1f} m); check barrels, diameter/span, "
                "crest and chainage"]
    return []


def width_below(station, elevation, level: float) -> float:
    """Length (m) of the ground line's horizontal extent below ``level`` (linear between points)."""
    x, z = np.asarray(station, dtype=float), np.asarray(elevation, dtype=float)
    dx, z0, z1 = np.diff(x), z[:-1], z[1:]
    lo, hi = np.minimum(z0, z1), np.maximum(z0, z1)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(hi > lo, (level - lo) / (hi - lo), (lo < level).astype(float))
    return float(np.sum(dx * np.clip(frac, 0.0, 1.0)))


def manifest_entry(cfg: Config, geom: ReachGeometry) -> list[dict]:
    """Plain values of each structure of the reach for the manifest."""
    places = {p.structure_id: p for p in geom.structures}
    out = []
    for spec in cfg.structures_on(geom.reach_id):
        p = places.get(spec.id)
        if p is None:
            continue
        up, down = geom.sections[p.upstream], geom.sections[p.upstream + 1]
        out.append({"structure_id": spec.id, "type": spec.type, "chainage_m": spec.chainage,
                    "upstream_face": {"section_id": up.section_id, "chainage_m": up.chainage},
                    "downstream_face": {"section_id": down.section_id, "chainage_m": down.chainage}})
    return out
