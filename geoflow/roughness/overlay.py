"""Land-cover overlay -> Manning's n and conveyance part per section segment.

Each station segment (between consecutive ground samples) takes the class of the land-cover
polygon containing its mid-point (shapely 2 ``STRtree.query`` with predicate
``"intersects"``, so a mid-point on a shared edge still finds a polygon; where polygons
overlap the first feature in layer order wins and a warning says so). Sections are first
split where they cross a polygon edge, so every segment lies in one polygon. Both steps are
bulk queries over all segments of a reach, linear in its length. Its n comes from the
user's table (class name -> n), e.g. chosen from Chow (1959) *Open-Channel Hydraulics*,
Table 5-6 (see :mod:`geoflow.roughness.tables`).

Parts: the channel is the contiguous run of ``channel_class`` segments nearest to the
centre of the section (where the centreline crosses it); segments left of it are left
floodplain, right of it right floodplain; channel-class segments away from that run (ponds,
side arms) count as floodplain. Without any channel cover the banks are found from the ground
by break in slope (:func:`geoflow.sections.banks.detect_banks`) and the section is flagged
``no_channel_cover``. The centre of a section is where the centreline crosses it (so
sections of uneven sides, adaptive width or drawn by the user, are handled).
"""
from __future__ import annotations

import dataclasses
from collections.abc import Mapping

import numpy as np
import shapely

from ..errors import RoughnessError
from ..records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN, ReachGeometry, Section
from ..sections.banks import detect_banks
from ..sections.common import points_along
from ..sections.lengths import floodplain_lengths

GAP_CLASS = ""   # land-cover name given to segments in a gap filled with default_n


def landcover_classes(cover) -> list[str]:
    """Sorted list of the class names present in a :class:`geoflow.layers.LandCover`."""
    return sorted({str(c) for c in np.asarray(cover.classes)})


def assign_roughness(geom: ReachGeometry, cover, channel_class: str, n_table: Mapping,
                     default_n: float | None = None, update_lengths: bool = True) -> ReachGeometry:
    """Fill ``n``, ``landcover`` and ``part`` of every section of ``geom`` from the land cover.

    ``n_table`` maps class name -> n (a number, or anything with an ``n`` attribute or key).
    Segments in no polygon get ``default_n`` (class ``""``, flag ``landcover_gap``) or raise
    :class:`RoughnessError`; so do classes missing from ``n_table`` when no ``default_n``.
    With ``update_lengths`` the floodplain lengths are recomputed from the channel edges
    (:func:`geoflow.sections.lengths.floodplain_lengths`).
    """
    rid = geom.reach_id
    table = {str(k): _n_value(k, v) for k, v in n_table.items()}
    geom = split_at_cover_edges(geom, cover)
    mids, owner = _segment_midpoints(geom.sections)
    cls, has_cover, overlaps = _classes_at(cover, mids)
    warnings = list(geom.warnings)
    if overlaps:
        warnings.append(f"reach {rid}: {overlaps} segment mid-point(s) lie in overlapping land-cover polygons of "
                        f"{cover.path}; the first feature in the layer was used")
    n, unknown = _n_for(rid, cls, has_cover, owner, mids, geom.sections, cover, table, default_n)
    if unknown:
        warnings.append(f"reach {rid}: land-cover class(es) {', '.join(unknown)} have no Manning's n; "
                        f"default_n = {default_n} used")
    bounds = np.cumsum([0] + [s.station.size - 1 for s in geom.sections])
    centres = centre_stations(geom)
    new_sections = []
    for k, sec in enumerate(geom.sections):
        sl = slice(bounds[k], bounds[k + 1])
        part, found = _parts(cls[sl] == str(channel_class), sec.station, sec.elevation, centres[k])
        flags = list(sec.flags)
        if not found:
            flags.append("no_channel_cover")
            warnings.append(f"reach {rid}: section {k} (chainage {sec.chainage:.1f} m) has no {channel_class!r} "
                            "cover; banks were taken from breaks in the ground slope")
        if not has_cover[sl].all():
            flags.append("landcover_gap")
        new_sections.append(dataclasses.replace(sec, n=n[sl].copy(), landcover=cls[sl].copy(), part=part,
                                                flags=tuple(flags)))
    out = dataclasses.replace(geom, sections=tuple(new_sections), warnings=tuple(warnings))
    if update_lengths:
        out = dataclasses.replace(out, lengths=floodplain_lengths(out))
    return out


def split_at_cover_edges(geom: ReachGeometry, cover) -> ReachGeometry:
    """Add a station wherever a section crosses a land-cover polygon edge.

    The ground there is interpolated linearly between its neighbours, so the ground profile is
    unchanged; only the segments are split, so every segment lies in one polygon and n changes
    exactly at the mapped boundary rather than at the nearest sample.

    Cost is linear in the reach: the boundaries of the polygons near the reach are cut into
    their straight edges once (:func:`cover_edges`), and one bulk ``STRtree`` query pairs every
    section line with the few edges it crosses.
    """
    lines = np.array([s.line for s in geom.sections], dtype=object)
    if lines.size == 0:
        return geom
    edges = cover_edges(cover, shapely.total_bounds(lines))
    if edges.size == 0:
        return geom
    li, ei = shapely.STRtree(edges).query(lines, predicate="intersects")
    if li.size == 0:
        return geom
    coords, which = shapely.get_coordinates(shapely.intersection(lines[li], edges[ei]), return_index=True)
    if coords.size == 0:
        return geom
    owner = li[which]
    st = shapely.line_locate_point(lines[owner], shapely.points(coords))
    order = np.argsort(owner, kind="stable")
    owner, st = owner[order], st[order]
    cuts = np.searchsorted(owner, np.arange(len(geom.sections) + 1))
    new = [_split(sec, st[cuts[k]:cuts[k + 1]]) for k, sec in enumerate(geom.sections)]
    return dataclasses.replace(geom, sections=tuple(new))


def _split(sec: Section, add: np.ndarray) -> Section:
    """``sec`` with stations added at ``add`` (m; those within a small tolerance of a station dropped)."""
    if add.size == 0:
        return sec
    tol = 1e-3 * float(np.min(np.diff(sec.station))) if sec.station.size > 1 else 1e-6
    add = add[(add > sec.station[0] + tol) & (add < sec.station[-1] - tol)]
    pos = np.searchsorted(sec.station, add)            # stations are sorted: nearest is pos - 1 or pos
    add = np.sort(add[np.minimum(add - sec.station[pos - 1], sec.station[pos] - add) > tol])
    if add.size == 0:
        return sec
    add = add[np.concatenate(([True], np.diff(add) > tol))]      # shared edges give one point twice
    station = np.union1d(sec.station, add)
    return dataclasses.replace(sec, station=station, elevation=np.interp(station, sec.station, sec.elevation))


def cover_edges(cover, bounds, pad: float = 1.0) -> np.ndarray:
    """Straight edges (2-point LineStrings) of the land-cover polygon boundaries within ``bounds``.

    Only polygons whose box meets ``bounds`` (padded by ``pad`` m) are used; their boundaries
    (outer and inner rings) are clipped to the padded box (``shapely.clip_by_rect``, which adds no
    edge of its own along the box) and cut into segments, so the work grows with the reach, not
    with the layer. Polygons are never clipped: a clipped polygon would gain edges along the box.
    """
    left, bottom, right, top = (float(b) for b in bounds)
    left, bottom, right, top = left - pad, bottom - pad, right + pad, top + pad
    near = cover.tree.query(shapely.box(left, bottom, right, top))
    if near.size == 0:
        return np.empty(0, dtype=object)
    rings = shapely.clip_by_rect(shapely.boundary(np.asarray(cover.geometries)[np.sort(near)]),
                                 left, bottom, right, top)
    parts = shapely.get_parts(shapely.get_parts(rings))
    parts = parts[shapely.get_type_id(parts) == shapely.GeometryType.LINESTRING]
    xy, part = shapely.get_coordinates(parts, return_index=True)
    same = part[1:] == part[:-1]
    if not same.any():
        return np.empty(0, dtype=object)
    return shapely.linestrings(np.stack((xy[:-1][same], xy[1:][same]), axis=1))


def _n_value(name, value) -> float:
    v = getattr(value, "n", None)
    if v is None and isinstance(value, Mapping):
        v = value.get("n")
    if v is None:
        v = value
    try:
        v = float(v)
    except (TypeError, ValueError):
        raise RoughnessError(f"[roughness.classes.{name}] n = {value!r} is not a number; give Manning's n (s/m^(1/3))") from None
    if not (np.isfinite(v) and v > 0):
        raise RoughnessError(f"[roughness.classes.{name}] n = {v!r} must be positive")
    return v


def _segment_midpoints(sections) -> tuple[np.ndarray, np.ndarray]:
    """(M, 2) mid-points of all station segments of all sections (along polylines too), and the owner section."""
    counts = [sec.station.size - 1 for sec in sections]
    if not sections:
        return np.zeros((0, 2)), np.zeros(0, dtype=np.int64)
    xy = np.concatenate([points_along(sec.line, 0.5 * (sec.station[:-1] + sec.station[1:])
                                      * np.full(c, sec.line.length / sec.station[-1]))
                         for c, sec in zip(counts, sections)])
    return xy, np.repeat(np.arange(len(sections)), counts)


def centre_stations(geom: ReachGeometry) -> np.ndarray:
    """Station (m from the left end) where each section meets the centreline: its chainage point."""
    pts = shapely.points(points_along(geom.centreline, [s.chainage for s in geom.sections]))
    lines = np.asarray([s.line for s in geom.sections], dtype=object)
    frac = shapely.line_locate_point(lines, pts) / shapely.length(lines)
    return frac * np.array([s.station[-1] for s in geom.sections])


def _classes_at(cover, xy: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Class name at each point (first polygon in layer order), a has-cover mask, overlap count.

    Each polygon near the points is prepared once and tested (``shapely.intersects_xy``, so a
    point on an edge counts) against the points inside its box only, found from the points
    sorted by x: a test costs O(log vertices) and the whole overlay grows linearly with the
    number of points (testing each point against the full vertex list of its polygon, as a
    query of points against a tree of polygons does, grew with the square of reach length).
    """
    classes = np.full(len(xy), GAP_CLASS, dtype=object)
    has = np.zeros(len(xy), dtype=bool)
    if len(xy) == 0:
        return classes.astype(str), has, 0
    hit_poly, hit_pt = _points_in_polygons(cover, xy)
    order = np.lexsort((hit_poly, hit_pt))
    hit_pt, hit_poly = hit_pt[order], hit_poly[order]
    first_pt, first_idx, counts = np.unique(hit_pt, return_index=True, return_counts=True)
    classes[first_pt] = np.asarray(cover.classes)[hit_poly[first_idx]]
    has[first_pt] = True
    return classes.astype(str), has, int(np.sum(counts > 1))


def _points_in_polygons(cover, xy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(polygon index, point index) of every point that intersects a land-cover polygon."""
    near = np.sort(cover.tree.query(shapely.box(*xy.min(axis=0), *xy.max(axis=0))))
    by_x = np.argsort(xy[:, 0], kind="stable")
    xs, ys = xy[by_x, 0], xy[by_x, 1]
    polys = np.asarray(cover.geometries)[near]
    bounds = shapely.bounds(polys)
    hit_poly, hit_pt = [], []
    for k, poly, (x0, y0, x1, y1) in zip(near, polys, bounds):
        lo, hi = np.searchsorted(xs, x0, side="left"), np.searchsorted(xs, x1, side="right")
        cand = lo + np.flatnonzero((ys[lo:hi] >= y0) & (ys[lo:hi] <= y1))
        if cand.size == 0:
            continue
        shapely.prepare(poly)
        inside = cand[shapely.intersects_xy(poly, xs[cand], ys[cand])]
        hit_poly.append(np.full(inside.size, k))
        hit_pt.append(by_x[inside])
    if not hit_poly:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(hit_poly), np.concatenate(hit_pt)


def _n_for(rid, cls, has_cover, owner, xy, sections, cover, table, default_n) -> tuple[np.ndarray, list[str]]:
    """Manning's n per segment and the classes not in the table; gaps and those use default_n or raise."""
    if not has_cover.all() and default_n is None:
        g = int(np.flatnonzero(~has_cover)[0])
        sec = sections[owner[g]]
        raise RoughnessError(
            f"reach {rid}: section {sec.section_id} (chainage {sec.chainage:.1f} m) has no land cover at "
            f"x={xy[g, 0]:.1f}, y={xy[g, 1]:.1f} ({int((~has_cover).sum())} segment(s) in gaps); "
            f"fill the gap in {cover.path} or set [roughness] default_n"
        )
    unknown = sorted(set(cls[has_cover]) - set(table))
    if unknown and default_n is None:
        names = ", ".join(unknown)
        raise RoughnessError(
            f"reach {rid}: land-cover class(es) {names} from {cover.path} have no Manning's n; add "
            f"[roughness.classes.<name>] for {names} or set [roughness] default_n"
        )
    fallback = np.nan if default_n is None else _n_value("default_n", default_n)
    lookup = np.array([table.get(c, fallback) for c in np.unique(cls)], dtype=np.float64)
    return lookup[np.unique(cls, return_inverse=True)[1]], unknown


def _parts(is_channel: np.ndarray, station: np.ndarray, elevation: np.ndarray,
           centre: float | None = None) -> tuple[np.ndarray, bool]:
    """Part code per segment (int8) and whether channel cover was found."""
    m = is_channel.size
    centre = 0.5 * station[-1] if centre is None else float(centre)
    found = bool(is_channel.any())
    if found:
        edges = np.diff(np.concatenate(([0], is_channel.astype(np.int8), [0])))
        starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)  # segment index ranges
        gap = np.maximum(station[starts] - centre, 0.0) + np.maximum(centre - station[stops], 0.0)
        r = int(np.argmin(gap))
        lo, hi = int(starts[r]), int(stops[r])
    else:
        left, right = detect_banks(station, elevation, centre)
        lo, hi = int(np.searchsorted(station, left)), int(np.searchsorted(station, right))
        lo, hi = min(lo, m - 1), max(hi, min(lo, m - 1) + 1)
    idx = np.arange(m)
    part = np.where(idx < lo, LEFT_FLOODPLAIN, np.where(idx >= hi, RIGHT_FLOODPLAIN, CHANNEL)).astype(np.int8)
    return part, found


def composite_n_by_part(section: Section) -> tuple[float, float, float]:
    """(n_floodplain_left, n_channel, n_floodplain_right): one composite Manning's n per part.

    Horton/Einstein (equal mean velocity in every sub-area): n_c = [sum(P_i n_i^1.5) / P]^(2/3),
    Chow (1959) *Open-Channel Hydraulics*, ch. 6, with P_i the ground length of segment i
    (sqrt(dstation^2 + dz^2)) and P their sum over the part. NaN for a part with no segment.
    ``n`` and ``part`` must be set (see :func:`assign_roughness`).
    """
    if section.n is None or section.part is None:
        raise RoughnessError(f"reach {section.reach_id}: section {section.section_id} has no Manning's n yet; "
                             "call assign_roughness first")
    p = np.hypot(np.diff(section.station), np.diff(section.elevation))
    n = np.asarray(section.n, dtype=np.float64)
    out = []
    for code in (LEFT_FLOODPLAIN, CHANNEL, RIGHT_FLOODPLAIN):
        sel = np.asarray(section.part) == code
        total = p[sel].sum()
        out.append(float((np.sum(p[sel] * n[sel] ** 1.5) / total) ** (2.0 / 3.0)) if total > 0 else float("nan"))
    return out[0], out[1], out[2]
