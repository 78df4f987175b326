"""Where sections sit and where they are sampled: chainages, the smoothed channel frame, stations.

Also adding stations to a cut section without changing its ground (:func:`insert_stations`), what
a new channel shape or survey needs first.

Pure geometry on shapely/numpy (the DEM's ``transform`` only, for its grid of cell centres) and
:class:`geoflow.records.Section` records.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np
from shapely.geometry import LineString

from ..errors import GeometryError
from ..records import Section
from .common import points_along

STATION_TOLERANCE = 1e-4     # m: a new station this close to an existing one is not added


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
    if cand.size == 0:
        return _fill_gaps(stations, step)
    near = np.min(np.abs(cand[:, None] - stations[None, :]), axis=1) < 0.01 * step
    merged = np.union1d(stations, cand[~near])
    keep = np.concatenate(([True], np.diff(merged) > 0.01 * step))   # drop near-duplicate crossings
    keep[-1] = True
    return _fill_gaps(merged[keep], step)


def _fill_gaps(stations: np.ndarray, step: float) -> np.ndarray:
    """Evenly spaced extra stations wherever two neighbours are more than ``step`` apart."""
    gaps = np.diff(stations)
    parts = np.where(gaps > step * (1 + 1e-9), np.ceil(gaps / step - 1e-9), 1).astype(np.int64)
    extra = parts - 1
    if not extra.any():
        return stations
    gap_of = np.repeat(np.arange(gaps.size), extra)
    first = np.repeat(np.cumsum(extra) - extra, extra)
    j = np.arange(gap_of.size) - first + 1                       # 1 .. parts-1 within each gap
    fill = stations[gap_of] + gaps[gap_of] * j / parts[gap_of]
    return np.union1d(stations, fill)


def stations_about_centre(left: float, right: float, step: float) -> np.ndarray:
    """Stations 0 .. left + right with the centreline point (station ``left``) always sampled.

    Each side is divided evenly into steps of at most ``step`` (at least 2 segments in all).
    """
    n_l = int(math.ceil(left / step - 1e-9)) if left > 0 else 0
    n_r = int(math.ceil(right / step - 1e-9)) if right > 0 else 0
    if n_l + n_r < 2:
        return np.linspace(0.0, left + right, 3)
    return np.concatenate((np.linspace(0.0, left, n_l + 1), left + np.linspace(0.0, right, n_r + 1)[1:]))


def chainages(rid: str, length: float, spacing: float, even_end: bool = False) -> np.ndarray:
    """0, spacing, 2·spacing, ... plus the downstream end L (merging a last gap < spacing/10).

    ``even_end``: a last gap under half a spacing is shared evenly with the one before it, so no
    two sections end up much closer than the spacing (dog-leg layouts).
    """
    if length < spacing:
        raise GeometryError(
            f"reach {rid}: centreline is {length:.1f} m long, shorter than [sections] spacing = {spacing:g} m, "
            "so fewer than 2 sections fit; reduce the spacing or drop the reach"
        )
    chain = np.arange(0.0, length, spacing)
    if length - chain[-1] < 0.1 * spacing and chain.size > 1:
        chain = chain[:-1]
    chain = np.append(chain, length)
    if even_end and chain.size > 2 and chain[-1] - chain[-2] < 0.5 * spacing:
        chain[-2] = 0.5 * (chain[-3] + chain[-1])
    return chain


def with_spans(chain: np.ndarray, spans, spacing: float) -> np.ndarray:
    """Chainages with the ends of each span added and none inside it.

    ``spans``: (upstream, downstream) chainage pairs (m) to keep free of sections, e.g. the faces
    of a structure: a section is cut at both ends of each span, none inside it, and the others
    within spacing/10 of it are dropped (the reach ends are kept).
    """
    if not len(spans):
        return chain
    ends = [float(x) for span in spans for x in span]
    keep = np.ones(chain.size, dtype=bool)
    for a, b in spans:
        keep &= ~((chain > a - 0.1 * spacing) & (chain < b + 0.1 * spacing))
    keep[[0, -1]] = [all(abs(chain[0] - e) > 1e-6 for e in ends), all(abs(chain[-1] - e) > 1e-6 for e in ends)]
    return np.union1d(chain[keep], ends)


def chord_points(chain: np.ndarray, spans) -> np.ndarray:
    """The chainage whose direction each section takes: its own, the span's middle for the two
    ends of a span (so the faces of a structure are parallel)."""
    at = np.asarray(chain, dtype=float).copy()
    for a, b in spans:
        at[np.isin(chain, [float(a), float(b)])] = 0.5 * (float(a) + float(b))
    return at


def in_spans(chain: np.ndarray, spans, spacing: float) -> np.ndarray:
    """Whether each chainage lies inside a span or within spacing/10 of one without being its end."""
    chain = np.asarray(chain, dtype=float)
    out = np.zeros(chain.shape, dtype=bool)
    for a, b in spans:
        out |= (chain > a - 0.1 * spacing) & (chain < b + 0.1 * spacing) & ~np.isin(chain, [float(a), float(b)])
    return out


def frame(rid: str, line: LineString, chain: np.ndarray, smoothing: float, h_min: float, chord_at=None):
    """Centre points (N, 2) and unit LEFT normals (N, 2) from the smoothed chord direction
    (taken at ``chord_at``, default the chainages themselves)."""
    length = float(line.length)
    at = chain if chord_at is None else np.asarray(chord_at, dtype=float)
    h = np.clip(np.minimum(at, length - at), h_min, smoothing)
    a = points_along(line, np.clip(at - h, 0.0, length))
    b = points_along(line, np.clip(at + h, 0.0, length))
    centre = points_along(line, chain)
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


def insert_stations(section: Section, new_stations) -> Section:
    """The section with stations added at ``new_stations`` (m from the left end).

    Ground (and ``dem_elevation``) at a new station is interpolated linearly between its
    neighbours; the segment it falls in is split in two that keep its n, land-cover class,
    part and storage. Stations outside the section, or within STATION_TOLERANCE of an existing one, are skipped.
    """
    st = section.station
    add = np.unique(np.asarray(new_stations, dtype=np.float64).ravel())
    add = add[(add > st[0] + STATION_TOLERANCE) & (add < st[-1] - STATION_TOLERANCE)]
    if add.size:
        near = np.min(np.abs(add[:, None] - st[None, :]), axis=1)
        add = add[near > STATION_TOLERANCE]
    if add.size > 1:
        add = add[np.concatenate(([True], np.diff(add) > STATION_TOLERANCE))]
    if add.size == 0:
        return section
    station = np.union1d(st, add)
    owner = np.clip(np.searchsorted(st, 0.5 * (station[:-1] + station[1:])) - 1, 0, st.size - 2)
    changes = {"station": station, "elevation": np.interp(station, st, section.elevation)}
    if section.dem_elevation is not None:
        changes["dem_elevation"] = np.interp(station, st, section.dem_elevation)
    for name in ("n", "landcover", "part", "storage"):
        values = getattr(section, name)
        if values is not None:
            changes[name] = np.asarray(values)[owner]
    return dataclasses.replace(section, **changes)
