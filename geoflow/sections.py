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
"""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString

from .errors import GeometryError
from .records import ReachGeometry, Section

MAX_GAP_SAMPLES = 3          # nodata runs up to this many samples are interpolated
_SHORTEN_FACTOR = 0.98       # shortened half-width = this x distance from centre to crossing
_MIN_WIDTH_FRACTION = 0.1    # refuse repairs that leave less than this fraction of the width
_ONE_READ_CELLS = 4_000_000  # sample a whole reach in one DEM read when its box is this small


def cut_sections(reach_id: str, centreline: LineString, dem, spacing: float, width: float,
                 sample_step: float | None = None, smoothing: float | None = None,
                 repair: bool = True) -> ReachGeometry:
    """Cut cross-sections every ``spacing`` m along ``centreline`` and sample the ground.

    Sections sit at chainage 0, spacing, 2·spacing, ... and at the downstream end L (if the
    last gap would be under spacing/10 the previous section is dropped instead). Each is a
    straight line ``width`` m long, centred on the centreline, perpendicular to the smoothed
    flow direction and drawn from its left end to its right end looking downstream. The
    ground is sampled every ``sample_step`` m (default: DEM cell size). ``repair=False``
    flags crossing sections ``crosses_section`` instead of shortening them.

    ``lengths`` (N-1, 3): channel = chainage difference; left/right overbank = distance
    between the mid-points of the left (right) halves of consecutive section lines.
    """
    rid = str(reach_id)
    step = float(sample_step) if sample_step is not None else float(dem.cell_size)
    _check_positive(rid, spacing=spacing, width=width, sample_step=step)
    line = shapely.force_2d(centreline)
    _check_inside(rid, line, dem.bounds)
    length = float(line.length)
    chain = _chainages(rid, length, float(spacing))
    h = float(smoothing) if smoothing is not None else 0.5 * float(spacing)
    centre, left_normal = _frame(rid, line, chain, h, min(max(step, 0.1 * float(spacing)), h))
    half = np.full(chain.size, 0.5 * float(width))
    flags: list[list[str]] = [[] for _ in chain]
    warnings: list[str] = []
    pairs, t_i, t_j = _crossings(centre, left_normal, half)
    if pairs.size:
        if repair:
            half = _shorten(rid, chain, pairs, t_i, t_j, half, float(width), flags, warnings)
        else:
            for i, j in pairs:
                flags[j].append("crosses_section")
                warnings.append(f"reach {rid}: section {j} (chainage {chain[j]:.1f} m) crosses section {i} (chainage {chain[i]:.1f} m)")
    stations = [np.linspace(0.0, 2 * hw, max(int(math.ceil(2 * hw / step - 1e-9)), 2) + 1) for hw in half]
    left_end = centre + half[:, None] * left_normal
    right_end = centre - half[:, None] * left_normal
    elevations = _sample_profiles(dem, left_end, right_end, stations)
    sections = []
    for k in range(chain.size):
        z, filled = fill_small_gaps(elevations[k], MAX_GAP_SAMPLES)
        if z is None:
            raise GeometryError(
                f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) has DEM nodata over more than "
                f"{MAX_GAP_SAMPLES} samples; fill the DEM holes, extend the DEM or reduce [sections] width"
            )
        if filled:
            flags[k].append("ground_gap_filled")
            warnings.append(f"reach {rid}: section {k} (chainage {chain[k]:.1f} m): {filled} nodata sample(s) interpolated")
        sections.append(Section(
            reach_id=rid, section_id=k, chainage=float(chain[k]),
            line=LineString([left_end[k], right_end[k]]), station=stations[k], elevation=z,
            flags=tuple(flags[k]),
        ))
    lengths = _lengths(chain, centre, left_normal, half)
    return ReachGeometry(reach_id=rid, centreline=line, sections=tuple(sections), lengths=lengths,
                         warnings=tuple(warnings))


def fill_small_gaps(values: np.ndarray, max_gap: int = MAX_GAP_SAMPLES) -> tuple[np.ndarray | None, int]:
    """Fill NaN runs of at most ``max_gap`` samples by linear interpolation along the profile.

    Runs touching an end take the nearest valid value. Returns (filled copy, number of
    samples filled), or (None, 0) when a longer run (or no valid sample) exists.
    """
    v = np.asarray(values, dtype=np.float64)
    bad = ~np.isfinite(v)
    if not bad.any():
        return v.copy(), 0
    if bad.all():
        return None, 0
    edges = np.diff(np.concatenate(([0], bad.astype(np.int8), [0])))
    run_len = np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)
    if run_len.max() > max_gap:
        return None, 0
    idx = np.arange(v.size)
    out = v.copy()
    out[bad] = np.interp(idx[bad], idx[~bad], v[~bad])
    return out, int(bad.sum())


def _check_positive(rid: str, **values: float) -> None:
    for key, value in values.items():
        if not (value is not None and np.isfinite(value) and value > 0):
            raise GeometryError(f"reach {rid}: [sections] {key} = {value!r} must be a positive number of metres")


def _check_inside(rid: str, line: LineString, bounds) -> None:
    extent = shapely.box(*bounds)
    if not shapely.covers(extent, line):
        outside = shapely.length(shapely.difference(line, extent))
        raise GeometryError(
            f"reach {rid}: {outside:.1f} m of the {line.length:.1f} m centreline lies outside the DEM extent "
            f"{tuple(round(b, 1) for b in bounds)}; use a DEM that covers the reach or clip the centreline"
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


def _frame(rid: str, line: LineString, chain: np.ndarray, smoothing: float, h_min: float):
    """Centre points (N, 2) and unit LEFT normals (N, 2) from the smoothed chord direction."""
    length = float(line.length)
    h = np.clip(np.minimum(chain, length - chain), h_min, smoothing)
    a = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(chain - h, 0.0, length)))
    b = shapely.get_coordinates(shapely.line_interpolate_point(line, np.clip(chain + h, 0.0, length)))
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
    lines = shapely.linestrings(np.stack((centre + half[:, None] * normal, centre - half[:, None] * normal), axis=1))
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
    symmetrically about the centreline. Shortening only removes line, so no new crossing can
    appear and one pass resolves every pair.
    """
    new = half.copy()
    pick_i = np.abs(t_i) > np.abs(t_j)
    which = np.where(pick_i, pairs[:, 0], pairs[:, 1])
    np.minimum.at(new, which, _SHORTEN_FACTOR * np.where(pick_i, np.abs(t_i), np.abs(t_j)))
    too_short = np.flatnonzero(2 * new < _MIN_WIDTH_FRACTION * width)
    if too_short.size:
        k = int(too_short[0])
        raise GeometryError(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crosses a neighbour within {new[k]:.1f} m of the "
            "centreline (sharp bend); smooth the centreline, or reduce [sections] width or spacing"
        )
    for k in np.flatnonzero(new < half):
        flags[k].append("shortened")
        others = np.concatenate((pairs[pairs[:, 0] == k, 1], pairs[pairs[:, 1] == k, 0]))
        warnings.append(
            f"reach {rid}: section {k} (chainage {chain[k]:.1f} m) crossed section(s) "
            f"{', '.join(str(int(o)) for o in np.unique(others))}; shortened from {2 * half[k]:.1f} m to {2 * new[k]:.1f} m"
        )
    return new


def _sample_profiles(dem, left_end, right_end, stations) -> list[np.ndarray]:
    """Bilinear ground elevations along every section (one DEM read when the reach box is small)."""
    frac = [s / s[-1] for s in stations]
    xs = [left_end[k, 0] + f * (right_end[k, 0] - left_end[k, 0]) for k, f in enumerate(frac)]
    ys = [left_end[k, 1] + f * (right_end[k, 1] - left_end[k, 1]) for k, f in enumerate(frac)]
    allx, ally = np.concatenate(xs), np.concatenate(ys)
    cells = (np.ptp(allx) / dem.cell_size + 2) * (np.ptp(ally) / dem.cell_size + 2)
    if cells <= _ONE_READ_CELLS:
        z = dem.sample(allx, ally)
        return np.split(z, np.cumsum([x.size for x in xs])[:-1])
    return [dem.sample(x, y) for x, y in zip(xs, ys)]


def _lengths(chain, centre, normal, half) -> np.ndarray:
    """(N-1, 3) reach lengths: left overbank, channel, right overbank (see cut_sections)."""
    left_mid = centre + 0.5 * half[:, None] * normal
    right_mid = centre - 0.5 * half[:, None] * normal
    return np.column_stack((
        np.hypot(*np.diff(left_mid, axis=0).T),
        np.diff(chain),
        np.hypot(*np.diff(right_mid, axis=0).T),
    ))


def overbank_lengths(geom: ReachGeometry) -> np.ndarray:
    """(N-1, 3) lengths using each section's bank stations (``part`` must be set).

    Left (right) overbank length = distance between the mid-points of the left (right)
    overbank ground of consecutive sections (a stand-in for the path through the overbank
    centroid); channel length = chainage difference along the centreline.
    """
    mids = []
    for sec in geom.sections:
        lb, rb = sec.bank_stations
        mids.append(shapely.line_interpolate_point(sec.line, [0.5 * lb, 0.5 * (rb + sec.station[-1])]))
    xy = shapely.get_coordinates(np.asarray(mids).ravel()).reshape(-1, 2, 2)
    chain = np.array([s.chainage for s in geom.sections])
    return np.column_stack((
        np.hypot(*np.diff(xy[:, 0], axis=0).T),
        np.diff(chain),
        np.hypot(*np.diff(xy[:, 1], axis=0).T),
    ))
