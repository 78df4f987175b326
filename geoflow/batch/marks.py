"""Observed water levels ([calibration] observations) matched to reaches and placed at a chainage.

Each mark belongs to the nearest centreline, if it lies within half that reach's section width of
it (the ground its sections span); its chainage is where it projects onto that centreline
(``shapely.line_locate_point``), and it is compared with the WSE interpolated linearly in chainage
between the sections either side. A mark near no reach, beyond a reach's first or last section, or
naming an event that is not in the config (or that gives its reach no discharge) is an input error
that names the mark, found by ``geoflow check``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from ..errors import InputDataError

MAX_LISTED = 3      # marks spelt out in an error message


@dataclass(frozen=True, eq=False)
class ReachMarks:
    """The marks of one reach (arrays, one value per mark): layer feature number, event name,
    chainage (m from the upstream end), observed WSE (m) and distance from the centreline (m)."""

    feature: np.ndarray
    event: np.ndarray
    chainage: np.ndarray
    wse: np.ndarray
    offset: np.ndarray

    def take(self, keep: np.ndarray) -> "ReachMarks":
        return ReachMarks(self.feature[keep], self.event[keep], self.chainage[keep], self.wse[keep],
                          self.offset[keep])


def _listing(marks, idx, extra) -> str:
    items = [f"feature {int(marks.feature[i])} at ({marks.x[i]:.1f}, {marks.y[i]:.1f}){extra(i)}"
             for i in idx[:MAX_LISTED]]
    more = f" and {idx.size - MAX_LISTED} more" if idx.size > MAX_LISTED else ""
    return "; ".join(items) + more


def match_marks(cfg, marks, reaches) -> dict[str, ReachMarks]:
    """{reach id: ReachMarks} for the marks (``layers.Marks``) and ``reaches`` [(id, LineString)];
    raises InputDataError naming the marks that match no reach or name an unknown event."""
    known = {e.name: e for e in cfg.events}
    bad = np.flatnonzero([e not in known for e in marks.event])
    if bad.size:
        raise InputDataError(f"{marks.where}: mark(s) name events that are not in [[events]] "
                             f"({', '.join(sorted(known))}): {_listing(marks, bad, lambda i: f' event {marks.event[i]!r}')}"
                             "; fix their 'event' values")
    if not reaches:
        return {}
    ids = [rid for rid, _ in reaches]
    lines = np.array([line for _, line in reaches], dtype=object)
    pts = shapely.points(marks.x, marks.y)
    dist = shapely.distance(pts[:, None], lines[None, :])
    near = np.argmin(dist, axis=1)
    offset = dist[np.arange(pts.size), near]
    half = np.array([cfg.sections.for_reach(rid).width / 2.0 for rid in ids])
    far = np.flatnonzero(offset > half[near])
    if far.size:
        raise InputDataError(f"{marks.where}: mark(s) lie farther from every centreline than half its section width: "
                             f"{_listing(marks, far, lambda i: f' ({offset[i]:.0f} m from reach {ids[near[i]]!r})')}"
                             "; move or delete them, or widen [sections] width")
    no_q = np.flatnonzero([known[e].upstream_discharge(ids[k]) is None for e, k in zip(marks.event, near)])
    if no_q.size:
        raise InputDataError(f"{marks.where}: mark(s) lie on a reach their event gives no discharge for: "
                             f"{_listing(marks, no_q, lambda i: f' (reach {ids[near[i]]!r}, event {marks.event[i]!r})')}")
    chainage = _chainage(lines[near], marks.x, marks.y)
    out = {}
    for k, rid in enumerate(ids):
        sel = np.flatnonzero(near == k)
        if sel.size:
            out[rid] = ReachMarks(marks.feature[sel], marks.event[sel].astype(str), chainage[sel],
                                  marks.wse[sel], offset[sel])
    return out


def _chainage(lines, x, y) -> np.ndarray:
    """Chainage of each point on its line; a point beyond an end gets a chainage beyond it (negative
    upstream of the start, over the length downstream of the end), measured along the end segment."""
    ch = shapely.line_locate_point(lines, shapely.points(x, y))
    length = shapely.length(lines)
    for i in np.flatnonzero((ch <= 1e-9) | (ch >= length - 1e-9)):
        c = shapely.get_coordinates(lines[i])
        start = ch[i] <= 1e-9
        a, b = (c[0], c[1]) if start else (c[-1], c[-2])       # end point and its neighbour on the line
        u = (a - b) / np.hypot(*(a - b))                         # unit vector pointing out of the line
        beyond = float(np.dot(np.array([x[i], y[i]]) - a, u))
        if beyond > 1e-6:
            ch[i] = -beyond if start else length[i] + beyond
    return ch


def check_within_sections(cfg, marks_by_reach: dict, first_last: dict) -> None:
    """Every mark must lie between the first and last section of its reach (InputDataError naming it).

    ``first_last``: {reach id: (chainage of its first section, of its last section)} (m).
    """
    where = cfg.calibration.observations if cfg.calibration is not None else ""
    outside = []
    for rid, rm in marks_by_reach.items():
        if rid not in first_last:
            continue
        lo, hi = first_last[rid]
        for i in np.flatnonzero((rm.chainage < lo - 1e-6) | (rm.chainage > hi + 1e-6)):
            outside.append(f"feature {int(rm.feature[i])} (reach {rid!r}, chainage {rm.chainage[i]:.1f} m, sections "
                           f"{lo:.1f}-{hi:.1f} m)")
    if outside:
        more = f" and {len(outside) - MAX_LISTED} more" if len(outside) > MAX_LISTED else ""
        raise InputDataError(f"{where}: mark(s) lie beyond the first or last cross-section of their reach, where no "
                             f"level is computed: {'; '.join(outside[:MAX_LISTED])}{more}; move or delete them")
