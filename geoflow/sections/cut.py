"""Centreline -> chainages -> perpendicular section lines -> sampled ground profiles.

Pure geometry on shapely/numpy: the DEM is reached only through ``dem.sample(x, y)``
(bilinear), ``dem.cell_size`` and ``dem.bounds``; no file is opened here.

Direction of a section. The perpendicular at chainage s is taken to the chord from
P(s - h) to P(s + h) along the centreline, with h = ``smoothing`` (default spacing/2),
shrunk symmetrically near the ends (h = min(smoothing, s, L - s), but at least
max(sample step, spacing/10); one-sided at the very ends, so the end sections follow the
last few metres of the line). On a circular arc a symmetric chord is exactly parallel to
the tangent at its mid-point (elementary geometry), so a smooth bend is cut radially,
while wiggles shorter than about 2h do not turn the sections. Remaining crossings (tight
meanders whose radius is below the half-width) are repaired by shortening, of each crossing
pair, the section crossed farther from its centre, symmetrically about the centreline, to
98 % of that distance.

Sides. Each section has a left and a right length (equal unless adaptive width or a
confluence made them differ, see :mod:`geoflow.sections.sidelimits`); each side is sampled
evenly from the centreline outwards, so the centreline point is always a ground sample.
"""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString

from ..errors import GeometryError
from ..records import ReachGeometry
from .common import build_sections, check_inside, check_positive, sample_many
from .sidelimits import adaptive_halves, confluence_halves
from .stations import chainages, chord_points, frame, grid_stations, stations_about_centre, with_spans
from .valleycut import cut_valley_sections

LAYOUTS = ("straight", "valley", "auto")

_SHORTEN_FACTOR = 0.98       # shortened half-width = this x distance from centre to crossing
_MIN_WIDTH_FRACTION = 0.1    # refuse repairs that leave less than this fraction of the width


def cut_sections(reach_id: str, centreline: LineString, dem, spacing: float, width: float,
                 sample_step: float | None = None, smoothing: float | None = None,
                 repair: bool = True, others=None, rise: float | None = None,
                 rise_margin: float | None = None, follow_grid: bool = True, layout: str = "straight",
                 channel=None, territory=None, strips=None, spans=()) -> ReachGeometry:
    """Cut cross-sections every ``spacing`` m along ``centreline`` and sample the ground.

    Sections sit at chainage 0, spacing, 2·spacing, ... and at the downstream end L (if the
    last gap would be under spacing/10 the previous section is dropped instead). Each is a
    straight line ``width`` m long, centred on the centreline, perpendicular to the smoothed
    flow direction and drawn from its left end to its right end looking downstream. The
    ground is sampled every ``sample_step`` m or a little less (default: DEM cell size), each
    side divided evenly from the centreline outwards. ``repair=False``
    flags crossing sections ``crosses_section`` instead of shortening them.

    ``rise`` (m): adaptive width; ``width`` becomes the largest total width and each side ends
    where the ground first rises ``rise`` m above the section's channel bed (lowest ground
    within spacing/4 of the centreline) plus ``rise_margin`` (default half a sample step);
    sides may differ in length; flag ``width_capped`` where ``width``/2 bound a side.
    ``others``: the other reaches' centrelines ({reach_id: LineString}, (id, line) pairs or
    bare lines, DEM CRS); a side crossing one is shortened to just short of it (flag
    ``shortened_at_confluence``), see :mod:`geoflow.sidelimits`.

    ``lengths`` (N-1, 3): channel = chainage difference; left/right floodplain = distance
    between the mid-points of the left (right) halves of consecutive section lines.

    ``layout``: ``"straight"`` (the above, the default), ``"valley"`` (dog-legs: across the
    channel perpendicular to it, then on each floodplain perpendicular to the valley axis) or
    ``"auto"`` (dog-legs where the sections reach beyond the meander belt, else straight); see
    :mod:`geoflow.sections.valleycut`. With those: ``channel`` (channel land-cover polygons)
    places the bends just beyond the channel edges (else the ground's breaks in slope do);
    ``territory`` (:class:`geoflow.sections.territory.Territory`) keeps the sections inside
    this reach's part of the valley floor (``others`` is not used then); ``strips`` (narrow
    land-cover polygons such as roads) and the DEM's ridges keep sections from running along
    embankments. Floodplain lengths are then measured between the floodplain legs along the
    flow (:func:`geoflow.sections.lengths.flow_path_lengths`).

    ``spans``: (upstream, downstream) chainage pairs (m) to keep free of sections, e.g. the
    faces of a structure: a section is cut at both ends of each span, none inside it, and the
    regular ones within spacing/10 of it are dropped (the reach ends are kept). The two end
    sections of a span share the direction of the centreline at the span's middle, so they are
    parallel. In the dog-leg layouts the span ends are kept through every later step (no
    section is moved onto, added inside or dropped from a span; a raised strip that a span
    crosses takes the span ends as its faces).
    """
    rid = str(reach_id)
    step = float(sample_step) if sample_step is not None else float(dem.cell_size)
    check_positive(rid, spacing=spacing, width=width, sample_step=step)
    if rise is not None:
        check_positive(rid, rise=rise)
    line = shapely.force_2d(centreline)
    check_inside(rid, line, dem.bounds)
    length = float(line.length)
    h = float(smoothing) if smoothing is not None else 0.5 * float(spacing)
    spans = [(float(a), float(b)) for a, b in spans]
    if layout != "straight":
        if layout not in LAYOUTS:
            raise GeometryError(f"reach {rid}: section layout {layout!r} is not one of {', '.join(LAYOUTS)}")
        return cut_valley_sections(rid, line, dem, float(spacing), float(width), step, h, repair, rise, rise_margin,
                                   follow_grid, layout, channel, territory, strips, spans)
    chain = with_spans(chainages(rid, length, float(spacing)), spans, float(spacing))
    centre, left_normal = frame(rid, line, chain, h, min(max(step, 0.1 * float(spacing)), h),
                                chord_points(chain, spans))
    flags: list[list[str]] = [[] for _ in chain]
    warnings: list[str] = []
    half = _side_lengths(rid, line, chain, centre, left_normal, dem, float(spacing), float(width), step,
                         repair, others, rise, rise_margin, flags, warnings)
    stations = [stations_about_centre(hl, hr, step) for hl, hr in half]
    left_end = centre + half[:, :1] * left_normal
    right_end = centre - half[:, 1:] * left_normal
    if follow_grid and getattr(dem, "transform", None) is not None and step <= dem.cell_size * (1 + 1e-9):
        stations = [grid_stations(dem.transform, a, b, st, step, centre_station=hl)
                    for a, b, st, hl in zip(left_end, right_end, stations, half[:, 0])]
    lines = [LineString([a, b]) for a, b in zip(left_end, right_end)]
    sections = build_sections(rid, chain, lines, stations, _sample_profiles(dem, left_end, right_end, stations),
                              flags, warnings)
    return ReachGeometry(reach_id=rid, centreline=line, sections=tuple(sections),
                         lengths=_lengths(chain, centre, left_normal, half), warnings=tuple(warnings))


def _side_lengths(rid, line, chain, centre, normal, dem, spacing, width, step, repair, others, rise, rise_margin,
                  flags, warnings) -> np.ndarray:
    """(N, 2) left / right lengths of every section: adaptive width, confluences, then crossings."""
    half = np.full((chain.size, 2), 0.5 * width)
    if rise is not None:
        margin = 0.5 * step if rise_margin is None else float(rise_margin)
        half, capped = adaptive_halves(dem, centre, normal, 0.5 * width, step, float(rise),
                                       max(0.25 * spacing, step), margin)
        for k in np.flatnonzero(capped.any(axis=1)):
            flags[k].append("width_capped")
    if others is not None:
        half = confluence_halves(rid, chain, centre, normal, half, others, step, flags, warnings, own=line)
        _check_width_left(rid, chain, half, width)
    pairs, t_i, t_j = _crossings(centre, normal, half)
    if pairs.size and repair:
        return _shorten(rid, chain, pairs, t_i, t_j, half, width, flags, warnings)
    for i, j in pairs:
        flags[j].append("crosses_section")
        warnings.append(f"reach {rid}: section {j} (chainage {chain[j]:.1f} m) crosses section {i} (chainage {chain[i]:.1f} m)")
    return half


def _check_width_left(rid: str, chain, half: np.ndarray, width: float) -> None:
    total = half.sum(axis=1)
    bad = np.flatnonzero(total < _MIN_WIDTH_FRACTION * width)
    if bad.size:
        k = int(bad[0])
        raise GeometryError(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) keeps only {total[k]:.1f} m between other "
            "reaches' centrelines; end this reach's centreline before the junction or reduce [sections] width"
        )


def _crossings(centre: np.ndarray, normal: np.ndarray, half: np.ndarray):
    """Pairs (i < j) of crossing sections and the signed distances of the crossing from each centre."""
    lines = shapely.linestrings(np.stack((centre + half[:, :1] * normal, centre - half[:, 1:] * normal), axis=1))
    i, j = shapely.STRtree(lines).query(lines, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    if i.size == 0:
        return np.empty((0, 2), dtype=np.int64), np.empty(0), np.empty(0)
    # Solve centre_i + a·n_i = centre_j + b·n_j (2x2 linear system, Cramer's rule).
    ni, nj, dc = normal[i], normal[j], centre[j] - centre[i]
    det = ni[:, 0] * (-nj[:, 1]) - ni[:, 1] * (-nj[:, 0])
    safe = np.where(np.abs(det) > 1e-12, det, np.inf)
    a = (dc[:, 0] * (-nj[:, 1]) - dc[:, 1] * (-nj[:, 0])) / safe
    b = (ni[:, 0] * dc[:, 1] - ni[:, 1] * dc[:, 0]) / safe
    return np.column_stack((i, j)), a, b


def _shorten(rid, chain, pairs, t_i, t_j, half, width, flags, warnings) -> np.ndarray:
    """Shorten one section of each crossing pair to just short of the crossing point.

    The section crossed farther from its own centre is shortened (ties: the downstream one),
    both sides to at most 98 % of that distance (symmetric about the centreline when the sides
    were equal). Shortening only removes line, so no new crossing can appear and one pass
    resolves every pair.
    """
    new = half.copy()
    pick_i = np.abs(t_i) > np.abs(t_j)
    which = np.where(pick_i, pairs[:, 0], pairs[:, 1])
    limit = np.full(half.shape[0], np.inf)
    np.minimum.at(limit, which, _SHORTEN_FACTOR * np.where(pick_i, np.abs(t_i), np.abs(t_j)))
    new = np.minimum(new, limit[:, None])
    too_short = np.flatnonzero(new.sum(axis=1) < _MIN_WIDTH_FRACTION * width)
    if too_short.size:
        k = int(too_short[0])
        raise GeometryError(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crosses a neighbour within {limit[k]:.1f} m of the "
            "centreline (sharp bend); smooth the centreline, or reduce [sections] width or spacing"
        )
    for k in np.flatnonzero((new < half).any(axis=1)):
        flags[k].append("shortened")
        others = np.concatenate((pairs[pairs[:, 0] == k, 1], pairs[pairs[:, 1] == k, 0]))
        warnings.append(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crossed section(s) "
            f"{', '.join(str(int(o)) for o in np.unique(others))}; shortened from {half[k].sum():.1f} m to {new[k].sum():.1f} m"
        )
    return new


def _sample_profiles(dem, left_end, right_end, stations) -> list[np.ndarray]:
    """Bilinear ground elevations along every section (one DEM read when the reach box is small)."""
    frac = [s / s[-1] for s in stations]
    xs = [left_end[k, 0] + f * (right_end[k, 0] - left_end[k, 0]) for k, f in enumerate(frac)]
    ys = [left_end[k, 1] + f * (right_end[k, 1] - left_end[k, 1]) for k, f in enumerate(frac)]
    return sample_many(dem, xs, ys)


def _lengths(chain, centre, normal, half) -> np.ndarray:
    """(N-1, 3) reach lengths: left floodplain, channel, right floodplain (see cut_sections)."""
    left_mid = centre + 0.5 * half[:, :1] * normal
    right_mid = centre - 0.5 * half[:, 1:] * normal
    return np.column_stack((
        np.hypot(*np.diff(left_mid, axis=0).T),
        np.diff(chain),
        np.hypot(*np.diff(right_mid, axis=0).T),
    ))


