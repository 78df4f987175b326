"""The face sections of structures (culverts, weirs, bridges) on a reach.

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``.

A structure at chainage c lies between two neighbouring sections, its faces: the last section
upstream of c and the first one downstream of it. Automatic sections are cut at c -/+ the
structure's half length with none between (``cut_sections(spans=...)``); with user-drawn
section lines the nearest lines either side are the faces. The faces are flagged
``structure_upstream_face`` / ``structure_downstream_face``, and the DEM ground along the line
through c parallel to the upstream face is kept (a bridge's abutments are found on it).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import shapely

from ..errors import GeometryError
from ..records import ReachGeometry, StructurePlace

UP_FLAG, DOWN_FLAG = "structure_upstream_face", "structure_downstream_face"


def place_structures(geom: ReachGeometry, structures, dem) -> ReachGeometry:
    """``geom`` with each structure's faces flagged and its ``StructurePlace`` recorded.

    ``structures``: (id, chainage m, kind) of each structure of this reach. Raises GeometryError where a structure
    has no section on one side, sits on a section, or shares both faces with another one."""
    if not len(structures):
        return geom
    rid = geom.reach_id
    chain = np.array([s.chainage for s in geom.sections])
    flags = [list(s.flags) for s in geom.sections]
    places, used = [], {}
    for sid, c, kind in sorted(structures, key=lambda p: p[1]):
        k = _upstream_face(rid, sid, float(c), chain)
        if k in used:
            raise GeometryError(f"reach {rid}: structures {used[k]!r} and {sid!r} lie between the same two sections "
                                f"(chainages {chain[k]:.1f} and {chain[k + 1]:.1f} m); draw a section line between "
                                "them")
        used[k] = sid
        flags[k].append(UP_FLAG)
        flags[k + 1].append(DOWN_FLAG)
        places.append(_place(geom, sid, str(kind), float(c), k, dem))
    sections = tuple(dataclasses.replace(s, flags=tuple(dict.fromkeys(f))) for s, f in zip(geom.sections, flags))
    return dataclasses.replace(geom, sections=sections, structures=tuple(places))


def _upstream_face(rid: str, sid: str, c: float, chain: np.ndarray) -> int:
    on = np.flatnonzero(np.abs(chain - c) <= 1e-6)
    if on.size:
        raise GeometryError(f"reach {rid}: section {int(on[0])} lies on structure {sid!r} (chainage {c:g} m); move "
                            "the section line off the structure, the faces are the sections either side")
    k = int(np.searchsorted(chain, c)) - 1
    if k < 0 or k + 1 >= chain.size:
        side = "upstream" if k < 0 else "downstream"
        raise GeometryError(f"reach {rid}: structure {sid!r} (chainage {c:g} m) has no section {side} of it; "
                            f"draw a section line {side} of the structure (its face)")
    return k


def centre_station(section, centreline) -> float:
    """Station (m) where ``centreline`` crosses the section line (nearest its chainage point)."""
    at = shapely.line_interpolate_point(centreline, section.chainage)
    hit = shapely.intersection(section.line, centreline)
    pts = shapely.get_parts(shapely.extract_unique_points(hit)) if not hit.is_empty else np.array([at])
    best = pts[int(np.argmin(shapely.distance(pts, at)))]
    return float(section.line.project(best))


def _place(geom: ReachGeometry, sid: str, kind: str, c: float, k: int, dem) -> StructurePlace:
    up, down = geom.sections[k], geom.sections[k + 1]
    s_up, s_down = centre_station(up, geom.centreline), centre_station(down, geom.centreline)
    # the upstream face line moved so that its centreline point lies at the structure's chainage
    cross = shapely.get_coordinates(up.line.interpolate(s_up))[0]
    there = shapely.get_coordinates(shapely.line_interpolate_point(geom.centreline, c))[0]
    pts = shapely.get_coordinates(shapely.line_interpolate_point(up.line, up.station)) + (there - cross)
    ground = np.asarray(dem.sample(pts[:, 0], pts[:, 1]), dtype=float)
    return StructurePlace(structure_id=sid, kind=kind, chainage=c, upstream=k, centre_stations=(s_up, s_down),
                          offset=np.asarray(up.station, dtype=float) - s_up, ground=ground)


def abutments(place: StructurePlace, low_chord: float) -> tuple[float | None, float | None]:
    """Offsets (m from the centreline, left negative) where the ground along the structure line
    first reaches ``low_chord`` on each side of the centreline; None where it never does."""
    x, z = place.offset, np.where(np.isfinite(place.ground), place.ground, np.inf)
    left, right = x <= 0, x >= 0
    hit_l = np.flatnonzero(left & (z >= low_chord))
    hit_r = np.flatnonzero(right & (z >= low_chord))
    a = _crossing(x, z, int(hit_l[-1]), +1, low_chord) if hit_l.size else None
    b = _crossing(x, z, int(hit_r[0]), -1, low_chord) if hit_r.size else None
    return a, b


def _crossing(x, z, j: int, towards: int, level: float) -> float:
    """Offset between point j (at or above ``level``) and its neighbour towards the centre where
    the ground line reaches ``level`` (linear)."""
    i = j + towards
    if i < 0 or i >= x.size or not np.isfinite(z[j]) or z[i] >= level:
        return float(x[j])
    t = (z[j] - level) / (z[j] - z[i])
    return float(x[j] + t * (x[i] - x[j]))
