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
    """
    lines, where = [], []
    for sec in geom.sections:
        lb, rb = sec.channel_edges
        lines.append(sec.line)
        where.append([_strip_centroid(sec, sec.station <= lb + 1e-9, lb, weighted),
                      _strip_centroid(sec, sec.station >= rb - 1e-9, rb, weighted)])
    pts = shapely.line_interpolate_point(np.repeat(np.asarray(lines, dtype=object), 2), np.ravel(where))
    xy = shapely.get_coordinates(pts).reshape(-1, 2, 2)
    chain = np.array([s.chainage for s in geom.sections])
    return np.column_stack((
        np.hypot(*np.diff(xy[:, 0], axis=0).T),
        np.diff(chain),
        np.hypot(*np.diff(xy[:, 1], axis=0).T),
    ))


def _strip_centroid(sec, inside: np.ndarray, bank: float, weighted: bool) -> float:
    """Station of the (weighted) centroid of the ground points ``inside`` (one floodplain strip)."""
    st, z = sec.station[inside], sec.elevation[inside]
    if st.size < 2:
        return float(bank)
    ds = np.diff(st)
    mid = 0.5 * (st[:-1] + st[1:])
    w = ds * ((z.max() - 0.5 * (z[:-1] + z[1:])) if weighted else 1.0)
    if not np.any(w > 1e-12 * max(ds.sum(), 1.0)):
        w = ds
    return float(np.sum(w * mid) / np.sum(w))
