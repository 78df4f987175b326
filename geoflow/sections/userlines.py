"""Cross-sections from section lines drawn by the user (straight or with dog-legs).

Pure geometry on shapely/numpy; the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size`` and ``dem.bounds``. Rules:

* each line must cross the reach's centreline exactly once (a :class:`GeometryError` names
  the file, the reach and the line's index otherwise);
* chainage = distance along the centreline to the crossing (shapely ``line_locate_point``);
* each line is turned, where needed, to run from left to right looking downstream (the
  direction is judged where the line crosses the centreline);
* stations are distances along the polyline: every ``sample_step`` m from its start plus
  its vertices, so a dog-leg is sampled exactly at its corners;
* sections are ordered by chainage; lengths as in :func:`geoflow.sections.cut_sections`
  (channel = chainage difference; floodplains = distance between the mid-points of the left
  / right parts of consecutive lines, each part measured along the polyline).
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString

from ..errors import GeometryError
from ..records import ReachGeometry
from .common import build_sections, check_inside, check_positive, points_along, sample_many


def sections_from_lines(reach_id: str, centreline: LineString, lines, dem, sample_step: float | None = None,
                        source=None) -> ReachGeometry:
    """Sections of one reach from user section lines (DEM CRS); see the module notes for the rules."""
    rid = str(reach_id)
    where = f"{source}" if source is not None else "section lines"
    step = float(sample_step) if sample_step is not None else float(dem.cell_size)
    check_positive(rid, sample_step=step)
    line = shapely.force_2d(centreline)
    check_inside(rid, line, dem.bounds)
    geoms = shapely.force_2d(np.asarray(list(lines), dtype=object))
    if geoms.size < 2:
        raise GeometryError(f"{where}: reach {rid} has {geoms.size} section line(s); draw at least 2 across its centreline")
    cross = _single_crossings(rid, line, geoms, where)
    chain = shapely.line_locate_point(line, cross)
    geoms = _left_to_right(line, geoms, cross, chain)
    order = np.argsort(chain, kind="stable")
    geoms, cross, chain, index = geoms[order], cross[order], chain[order], order
    dup = np.flatnonzero(np.diff(chain) <= 1e-6)
    if dup.size:
        a, b = index[dup[0]], index[dup[0] + 1]
        raise GeometryError(f"{where}: section lines {a} and {b} of reach {rid} cross its centreline at the same "
                            f"chainage {chain[dup[0]]:.1f} m; move or delete one")
    flags: list[list[str]] = [[] for _ in chain]
    warnings: list[str] = []
    _flag_crossing_lines(rid, geoms, chain, flags, warnings)
    stations = [_stations(g, step) for g in geoms]
    pts = shapely.line_interpolate_point(np.repeat(geoms, [s.size for s in stations]), np.concatenate(stations))
    xy = shapely.get_coordinates(pts)
    split = np.cumsum([s.size for s in stations])[:-1]
    elevations = sample_many(dem, np.split(xy[:, 0], split), np.split(xy[:, 1], split))
    sections = build_sections(rid, chain, list(geoms), stations, elevations, flags, warnings)
    centre_st = shapely.line_locate_point(geoms, cross)
    return ReachGeometry(reach_id=rid, centreline=line, sections=tuple(sections),
                         lengths=_lengths(geoms, chain, centre_st), warnings=tuple(warnings))


def _single_crossings(rid: str, centreline: LineString, geoms: np.ndarray, where: str) -> np.ndarray:
    """Crossing point of each line with the centreline; an error unless exactly one, strictly inside."""
    inter = shapely.intersection(geoms, centreline)
    is_point = (shapely.get_type_id(inter) == shapely.GeometryType.POINT) & ~shapely.is_empty(inter)
    for i in np.flatnonzero(~is_point):
        g = inter[i]
        count = 0 if g.is_empty else shapely.get_num_geometries(g)
        what = ("runs along the centreline" if shapely.length(g) > 0 else
                "does not cross the centreline" if count == 0 else f"crosses the centreline {count} times")
        raise GeometryError(f"{where}: section line {i} of reach {rid} {what}; each line must cross "
                            "it exactly once - redraw that line")
    at = shapely.line_locate_point(geoms, inter)
    ends = np.flatnonzero((at <= 1e-9) | (at >= shapely.length(geoms) - 1e-9))
    if ends.size:
        raise GeometryError(f"{where}: section line {int(ends[0])} of reach {rid} ends on the centreline; extend it "
                            "across to the other side")
    return inter


def _left_to_right(centreline: LineString, geoms: np.ndarray, cross: np.ndarray, chain: np.ndarray) -> np.ndarray:
    """Lines reversed where they run right -> left looking downstream (judged at the crossing)."""
    length = float(centreline.length)
    dc = np.minimum(0.5, 0.25 * length)
    t = points_along(centreline, np.clip(chain + dc, 0, length)) - points_along(centreline, np.clip(chain - dc, 0, length))
    at = shapely.line_locate_point(geoms, cross)
    lg = shapely.length(geoms)
    dl = np.minimum.reduce([np.full(at.shape, 0.5), 0.5 * at, 0.5 * (lg - at)])
    d = (shapely.get_coordinates(shapely.line_interpolate_point(geoms, at + dl))
         - shapely.get_coordinates(shapely.line_interpolate_point(geoms, at - dl)))
    runs_left = t[:, 0] * d[:, 1] - t[:, 1] * d[:, 0] > 0        # 2-D cross product: d points left of t
    out = geoms.copy()
    out[runs_left] = shapely.reverse(geoms[runs_left])
    return out


def _stations(geom: LineString, step: float) -> np.ndarray:
    """Every ``step`` m along the polyline (at least 3 points) plus its vertices (m from its start)."""
    length = float(geom.length)
    uniform = np.linspace(0.0, length, max(int(math.ceil(length / step - 1e-9)), 2) + 1)
    c = shapely.get_coordinates(geom)
    vertex = np.cumsum(np.r_[0.0, np.hypot(*np.diff(c, axis=0).T)])[1:-1]
    gap = np.min(np.abs(vertex[:, None] - uniform[None, :]), axis=1) if vertex.size else vertex
    return np.union1d(uniform, vertex[gap > 1e-3 * step])


def _flag_crossing_lines(rid: str, geoms: np.ndarray, chain: np.ndarray, flags, warnings) -> None:
    i, j = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    for a, b in zip(i[i < j], j[i < j]):
        flags[b].append("crosses_section")
        warnings.append(f"reach {rid}: section {b} (chainage {chain[b]:.1f} m) crosses section {a} "
                        f"(chainage {chain[a]:.1f} m); redraw the section lines so they do not cross")


def _lengths(geoms: np.ndarray, chain: np.ndarray, centre_st: np.ndarray) -> np.ndarray:
    """(N-1, 3): left floodplain, channel, right floodplain, as in cut_sections (mid-points along each line)."""
    lg = shapely.length(geoms)
    left = shapely.get_coordinates(shapely.line_interpolate_point(geoms, 0.5 * centre_st))
    right = shapely.get_coordinates(shapely.line_interpolate_point(geoms, 0.5 * (centre_st + lg)))
    return np.column_stack((np.hypot(*np.diff(left, axis=0).T), np.diff(chain), np.hypot(*np.diff(right, axis=0).T)))
