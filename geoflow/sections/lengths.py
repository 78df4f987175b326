"""Reach lengths between neighbouring sections: channel and each floodplain.

Pure geometry on shapely/numpy.
"""
from __future__ import annotations

import numpy as np
import shapely

from ..records import ReachGeometry


def floodplain_lengths(geom: ReachGeometry, weighted: bool = True) -> np.ndarray:
    """(N-1, 3) lengths using each section's channel edges (``part`` must be set).

    Left (right) floodplain length = distance between the centroids of the left (right)
    floodplain ground strips of consecutive sections, a stand-in for the flow path through each
    floodplain's centroid of flow. With ``weighted`` each segment of the strip weighs
    (segment length) x (highest ground of the strip - segment ground), the depth under a level
    at the strip's highest ground, as a proxy for where the flow goes; a flat strip (or
    ``weighted=False``) gives the mid-point of the strip. An empty strip uses its bank point.
    Channel length = chainage difference along the centreline. (Common practice, no source.)
    Segments marked as storage carry no flow and are left out of the centroids. The distance
    between the centroids of consecutive sections is measured along the flow
    (:func:`flow_path_lengths`), so on dog-leg sections it is the distance between the
    floodplain legs.
    """
    lines, where = [], []
    for sec in geom.sections:
        lb, rb = sec.channel_edges
        lines.append(sec.line)
        where.append([_strip_centroid(sec, sec.station <= lb + 1e-9, lb, weighted),
                      _strip_centroid(sec, sec.station >= rb - 1e-9, rb, weighted)])
    chain = np.array([s.chainage for s in geom.sections])
    return flow_path_lengths(lines, np.asarray(where), chain)


def flow_path_lengths(lines, stations: np.ndarray, chain: np.ndarray) -> np.ndarray:
    """(N-1, 3) reach lengths from a point on each floodplain of every section.

    ``stations`` (N, 2): the station (m along the line) of the left and right floodplain point of
    each section. The length between the points of consecutive sections i, i+1 is the component
    of the chord between them along the flow: normal to the mean direction of the two lines at
    those points. Between parallel legs that is their distance apart, whatever the points'
    positions along them; between radial sections on a bend, with points at one radius, it is
    the whole chord (the chord is normal to the bisector). Channel length = chainage difference.
    (Elementary geometry; our own choice of path.)
    """
    geoms = np.asarray(lines, dtype=object)
    st = np.asarray(stations, dtype=float)
    out = [None, np.diff(np.asarray(chain, dtype=float)), None]
    for col, side in ((0, 0), (2, 1)):
        p = shapely.get_coordinates(shapely.line_interpolate_point(geoms, st[:, side]))
        d = _direction_at(geoms, st[:, side])
        mean = d[:-1] + np.where((np.einsum("nk,nk->n", d[:-1], d[1:]) < 0)[:, None], -d[1:], d[1:])
        mean /= np.maximum(np.hypot(mean[:, 0], mean[:, 1]), 1e-12)[:, None]
        flow = np.column_stack((-mean[:, 1], mean[:, 0]))
        out[col] = np.abs(np.einsum("nk,nk->n", np.diff(p, axis=0), flow))
    return np.column_stack(out)


def _direction_at(geoms: np.ndarray, st: np.ndarray) -> np.ndarray:
    """Unit direction of each line at station ``st`` (a short chord within its straight piece)."""
    lg = shapely.length(geoms)
    h = np.minimum(0.25, 0.25 * lg)
    a = shapely.get_coordinates(shapely.line_interpolate_point(geoms, np.clip(st - h, 0, lg)))
    b = shapely.get_coordinates(shapely.line_interpolate_point(geoms, np.clip(st + h, 0, lg)))
    d = b - a
    return d / np.maximum(np.hypot(d[:, 0], d[:, 1]), 1e-12)[:, None]


def _strip_centroid(sec, inside: np.ndarray, bank: float, weighted: bool) -> float:
    """Station of the (weighted) centroid of the ground points ``inside`` (one floodplain strip)."""
    st, z = sec.station[inside], sec.elevation[inside]
    if st.size < 2:
        return float(bank)
    ds = np.diff(st)
    mid = 0.5 * (st[:-1] + st[1:])
    w = ds * ((z.max() - 0.5 * (z[:-1] + z[1:])) if weighted else 1.0)
    if sec.storage is not None:
        idx = np.flatnonzero(inside)[:-1]            # segments between consecutive strip points
        conveys = ~np.asarray(sec.storage)[np.minimum(idx, sec.storage.size - 1)]
        if conveys.any():
            w = np.where(conveys, w, 0.0)
    if not np.any(w > 1e-12 * max(ds.sum(), 1.0)):
        w = ds
    return float(np.sum(w * mid) / np.sum(w))
