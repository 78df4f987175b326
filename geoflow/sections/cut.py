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

import math

import numpy as np
import shapely
from shapely.geometry import LineString

from ..errors import GeometryError
from ..records import ReachGeometry
from .common import build_sections, check_inside, check_positive, sample_many
from .sidelimits import adaptive_halves, confluence_halves

_SHORTEN_FACTOR = 0.98       # shortened half-width = this x distance from centre to crossing
_MIN_WIDTH_FRACTION = 0.1    # refuse repairs that leave less than this fraction of the width


def cut_sections(reach_id: str, centreline: LineString, dem, spacing: float, width: float,
                 sample_step: float | None = None, smoothing: float | None = None,
                 repair: bool = True, others=None, rise: float | None = None,
                 rise_margin: float | None = None, follow_grid: bool = True, spans=()) -> ReachGeometry:
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

    ``spans``: (upstream, downstream) chainage pairs (m) to keep free of sections, e.g. the
    faces of a structure: a section is cut at both ends of each span, none inside it, and the
    regular ones within spacing/10 of it are dropped (the reach ends are kept). The two end
    sections of a span share the direction of the centreline at the span's middle, so they are
    parallel.
    """
    rid = str(reach_id)
    step = float(sample_step) if sample_step is not None else float(dem.cell_size)
    check_positive(rid, spacing=spacing, width=width, sample_step=step)
    if rise is not None:
        check_positive(rid, rise=rise)
    line = shapely.force_2d(centreline)
    check_inside(rid, line, dem.bounds)
    length = float(line.length)
    chain, chord_at = _with_spans(_chainages(rid, length, float(spacing)), spans, float(spacing))
    h = float(smoothing) if smoothing is not None else 0.5 * float(spacing)
    centre, left_normal = _frame(rid, line, chain, h, min(max(step, 0.1 * float(spacing)), h), chord_at)
    flags: list[list[str]] = [[] for _ in chain]
    warnings: list[str] = []
    half = _side_lengths(rid, line, chain, centre, left_normal, dem, float(spacing), float(width), step,
                         repair, others, rise, rise_margin, flags, warnings)
    stations = [_stations_about_centre(hl, hr, step) for hl, hr in half]
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


def grid_stations(transform, start: np.ndarray, end: np.ndarray, stations: np.ndarray, step: float,
                  centre_station: float | None = None) -> np.ndarray:
    """Stations where the section crosses a row or column of DEM cell centres.

    Used when ``step`` is the DEM cell size or finer (the default): with ``step`` equal to the
    cell size the crossings replace the regular stations (they are never more than a cell
    apart), keeping both ends and the centreline station; with a finer ``step`` they are added
    to the regular stations.

    Bilinear interpolation makes the DEM surface a patchwork whose creases run along the lines
    joining cell centres; along a straight section the ground is smooth between two crossings
    of those lines and kinks at them. Sampling only every ``step`` cuts across those kinks (at
    a channel toe this loses area: 0.25 m2 of 28 m2 in a 10 m trapezoid on a 1 m DEM); adding
    the crossings follows the DEM's own surface. Stations closer than 1 % of ``step`` to an
    existing one are not added.
    """
    total = float(stations[-1])
    cell = max(abs(transform.a), abs(transform.e))
    if step >= cell * (1 - 1e-9):
        keep = [0.0, total] + ([float(centre_station)] if centre_station is not None else [])
        stations = np.unique(np.array(keep))
    extra = []
    for axis, origin, size in ((0, transform.c, transform.a), (1, transform.f, transform.e)):
        a, b = float(start[axis]), float(end[axis])
        if abs(b - a) < 1e-12:
            continue
        lo, hi = sorted(((a - origin) / size - 0.5, (b - origin) / size - 0.5))
        idx = np.arange(np.ceil(lo), np.floor(hi) + 1)
        t = ((origin + (idx + 0.5) * size) - a) / (b - a)
        extra.append(t * total)
    if not extra:
        return stations
    cand = np.sort(np.concatenate(extra))
    cand = cand[(cand > 0) & (cand < total)]
    near = np.min(np.abs(cand[:, None] - stations[None, :]), axis=1) < 0.01 * step if cand.size else cand
    merged = np.union1d(stations, cand[~near])
    keep = np.concatenate(([True], np.diff(merged) > 0.01 * step))   # drop near-duplicate crossings
    keep[-1] = True
    return _fill_gaps(merged[keep], step)


def _fill_gaps(stations: np.ndarray, step: float) -> np.ndarray:
    """Evenly spaced extra stations wherever two neighbours are more than ``step`` apart."""
    gaps = np.diff(stations)
    wide = np.flatnonzero(gaps > step * (1 + 1e-9))
    if wide.size == 0:
        return stations
    extra = [np.linspace(stations[i], stations[i + 1], int(np.ceil(gaps[i] / step)) + 1)[1:-1] for i in wide]
    return np.union1d(stations, np.concatenate(extra))


def _stations_about_centre(left: float, right: float, step: float) -> np.ndarray:
    """Stations 0 .. left + right with the centreline point (station ``left``) always sampled.

    Each side is divided evenly into steps of at most ``step`` (at least 2 segments in all).
    """
    n_l = int(math.ceil(left / step - 1e-9)) if left > 0 else 0
    n_r = int(math.ceil(right / step - 1e-9)) if right > 0 else 0
    if n_l + n_r < 2:
        return np.linspace(0.0, left + right, 3)
    return np.concatenate((np.linspace(0.0, left, n_l + 1), left + np.linspace(0.0, right, n_r + 1)[1:]))


def _check_width_left(rid: str, chain, half: np.ndarray, width: float) -> None:
    total = half.sum(axis=1)
    bad = np.flatnonzero(total < _MIN_WIDTH_FRACTION * width)
    if bad.size:
        k = int(bad[0])
        raise GeometryError(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) keeps only {total[k]:.1f} m between other "
            "reaches' centrelines; end this reach's centreline before the junction or reduce [sections] width"
        )


def _chainages(rid: str, length: float, spacing: float) -> np.ndarray:
    """0, spacing, 2·spacing, ... plus the downstream end L (merging a last gap < spacing/10)."""
    if length < spacing:
        raise GeometryError(
            f"reach {rid}: centreline is {length:.1f} m long, shorter than [sections] spacing = {spacing:g} m, "
            "so fewer than 2 sections fit; reduce the spacing or drop the reach"
        )
    chain = np.arange(0.0, length, spacing)
    if length - chain[-1] < 0.1 * spacing and chain.size > 1:
        chain = chain[:-1]
    return np.append(chain, length)


def _with_spans(chain: np.ndarray, spans, spacing: float) -> tuple[np.ndarray, np.ndarray]:
    """Chainages with the ends of each span added and none inside it (see cut_sections), and the
    chainage whose direction each section takes (the span's middle for its two ends)."""
    if not len(spans):
        return chain, chain
    ends = [float(x) for span in spans for x in span]
    keep = np.ones(chain.size, dtype=bool)
    for a, b in spans:
        keep &= ~((chain > a - 0.1 * spacing) & (chain < b + 0.1 * spacing))
    keep[[0, -1]] = [all(abs(chain[0] - e) > 1e-6 for e in ends), all(abs(chain[-1] - e) > 1e-6 for e in ends)]
    out = np.union1d(chain[keep], ends)
    chord_at = out.copy()
    for a, b in spans:
        chord_at[np.isin(out, [float(a), float(b)])] = 0.5 * (float(a) + float(b))
    return out, chord_at


def _frame(rid: str, line: LineString, chain: np.ndarray, smoothing: float, h_min: float, chord_at=None):
    """Centre points (N, 2) and unit LEFT normals (N, 2) from the smoothed chord direction
    (taken at ``chord_at``, default the chainages themselves)."""
    length = float(line.length)
    at = chain if chord_at is None else np.asarray(chord_at, dtype=float)
    h = np.clip(np.minimum(at, length - at), h_min, smoothing)
    a = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(at - h, 0.0, length)))
    b = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(at + h, 0.0, length)))
    centre = shapely.get_coordinates(shapely.line_interpolate_point(line, chain))
    d = b - a
    norm = np.hypot(d[:, 0], d[:, 1])
    if np.any(norm <= 1e-9 * max(length, 1.0)):
        k = int(np.flatnonzero(norm <= 1e-9 * max(length, 1.0))[0])
        raise GeometryError(
            f"reach {rid}: flow direction undefined at section {k} (chainage {chain[k]:.1f} m), the centreline "
            "doubles back on itself; redraw it or change [sections] spacing"
        )
    t = d / norm[:, None]
    return centre, np.column_stack((-t[:, 1], t[:, 0]))  # rotate the flow direction +90 deg: left


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


