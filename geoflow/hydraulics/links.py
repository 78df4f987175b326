"""Structures inside a reach: how a profile passes a culvert, weir or bridge.

A ``StructureLink`` sits between sections k and k+1 (its upstream and downstream faces) and
replaces the standard-step energy balance over that interval: the structure's own equations
(``geoflow.hydraulics.structures``) carry the flow from one face to the other, so the losses
between the faces are the structure's, not friction and transition losses.

Regimes (``solver.solve_events``):
- subcritical: the march reaches the downstream face (the tailwater), the structure gives the
  headwater, and the march goes on upstream from the upstream face with
  headwater = max(structure headwater, critical WSE at the upstream face); where critical depth
  governs, the structure does not control the level and the face is flagged
  ``headwater_critical``.
- supercritical: the march reaches the upstream face; the downstream face starts again at its
  critical WSE (flag ``outlet_critical``): the outlet level of a structure passing supercritical
  flow is not computed, and critical depth is the highest supercritical level (the safe side
  for levels downstream). The structure is evaluated with that free outfall; where its headwater
  has a larger specific force than the supercritical flow arriving at the upstream face, a jump
  would form upstream of it, which this regime cannot represent (flag
  ``headwater_above_supercritical``: run the mixed regime).
- mixed: the subcritical profile above (structures included), then the supercritical runs of
  the solver, which never step across a structure: a run that reaches an upstream face is
  compared there by specific force with the structure's headwater (the larger governs, as at
  any section; a jump upstream of the structure when the headwater wins); where the
  supercritical flow wins (flag ``supercritical_approach``) it passes the structure and a jump
  is placed at the downstream face unless the level there is critical (then a supercritical run
  starts there, as from any critical section).

The structure sees the discharge of its upstream face.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import fast_properties, specific_force


@dataclass(frozen=True)
class StructureLink:
    """A structure between sections ``interval`` (upstream face) and ``interval + 1``
    (downstream face). ``headwater(discharge (E,), tailwater_wse (E,))`` returns a
    ``StructureResult`` (``geoflow.hydraulics.structures``) for E events."""

    interval: int
    headwater: Callable
    name: str = "structure"


@dataclass(frozen=True)
class StructureLevel:
    """One structure in one event's profile (SI units). ``headwater_wse``: the level at the
    upstream face in the profile; ``structure_headwater_wse``: what the structure's equations
    gave for ``discharge`` and ``tailwater_wse`` (the level at the downstream face). ``flags``:
    the structure's own words, then those of the wiring (module docstring)."""

    name: str
    interval: int
    kind: str
    discharge: float
    headwater_wse: float
    structure_headwater_wse: float
    tailwater_wse: float
    control: str
    q_through: float
    q_over_crest: float
    flags: tuple


class Crossings:
    """The structures of one solve: the march's link functions, and after the solve the flags
    and the per-event records."""

    def __init__(self, structures, tables):
        n = len(tables)
        self.tables = tables
        self.by_interval: dict[int, StructureLink] = {}
        for s in structures:
            k = s.interval
            if not (isinstance(k, (int, np.integer)) and 0 <= k <= n - 2):
                raise HydraulicsError(f"structure {s.name!r}: interval {k!r} must be a section "
                                      f"index 0..{n - 2} (its upstream face)")
            if int(k) in self.by_interval:
                raise HydraulicsError(f"structures {self.by_interval[int(k)].name!r} and {s.name!r} "
                                      "lie between the same two sections; give each its own faces")
            self.by_interval[int(k)] = s
        self.results: dict[int, Any] = {}   # k -> StructureResult (geoflow.hydraulics.structures)
        self.tailwater: dict[int, np.ndarray] = {}

    def __bool__(self) -> bool:
        return bool(self.by_interval)

    def blocked(self, n: int) -> np.ndarray:
        """(N,) True at every downstream face (no energy step into it)."""
        out = np.zeros(n, dtype=bool)
        out[[k + 1 for k in self.by_interval]] = True
        return out

    def links(self, wc) -> dict:
        """{k: headwater(q, tailwater) -> WSE at the upstream face} for ``solver._march``:
        max(structure headwater, critical WSE there); each call keeps the structure's result."""
        def make(k, link):
            def headwater(q, tw):
                res = link.headwater(q, tw)
                self.results[k], self.tailwater[k] = res, np.asarray(tw, dtype=float).copy()
                return np.maximum(np.asarray(res.headwater_wse, dtype=float), wc[:, k])
            return headwater
        return {k: make(k, s) for k, s in self.by_interval.items()}

    def flags(self, regime: str, q, wse, wc, sup, g: float) -> list:
        """[(word, mask (E, N))] of the wiring flags (module docstring)."""
        shape = wse.shape
        out = {w: np.zeros(shape, dtype=bool) for w in ("headwater_critical", "outlet_critical",
                                                       "headwater_above_supercritical",
                                                       "supercritical_approach")}
        for k, res in self.results.items():
            hw = np.asarray(res.headwater_wse, dtype=float)
            if regime == "supercritical":
                out["outlet_critical"][:, k + 1] = True
                out["headwater_above_supercritical"][:, k] = self._backs_up(k, q[:, k], hw, wse[:, k],
                                                                             wc[:, k], g)
            else:
                out["headwater_critical"][:, k] = hw < wc[:, k]
                out["supercritical_approach"][:, k] = sup[:, k]
        return [(w, m) for w, m in out.items() if m.any()]

    def _backs_up(self, k, q, hw, w_sup, wc, g):
        """Where the headwater (above critical) has more specific force than the supercritical
        level at the upstream face."""
        table = self.tables[k]
        above = hw > wc
        m_hw = specific_force(fast_properties(table, np.where(above, hw, wc)), q, g)
        m_sup = specific_force(fast_properties(table, w_sup), q, g)
        return above & (m_hw > m_sup)

    def levels(self, wse, marks) -> tuple:
        """Per event, the tuple of ``StructureLevel`` (upstream order)."""
        words = [(w, m) for w, m in marks]
        events = []
        for e in range(wse.shape[0]):
            row = []
            for k in sorted(self.results):
                res, link = self.results[k], self.by_interval[k]
                extra = tuple(w for w, m in words if m[e, k] or (w == "outlet_critical" and m[e, k + 1]))
                row.append(StructureLevel(
                    name=link.name, interval=k, kind=str(res.kind), discharge=float(res.discharge[e]),
                    headwater_wse=float(wse[e, k]),
                    structure_headwater_wse=float(res.headwater_wse[e]),
                    tailwater_wse=float(wse[e, k + 1]), control=str(res.control[e]),
                    q_through=float(res.q_through[e]), q_over_crest=float(res.q_over_crest[e]),
                    flags=tuple(res.flags[e]) + extra))
            events.append(tuple(row))
        return tuple(events)
