"""Steady gradually-varied water-surface profiles by the standard-step energy method.

Regimes (``SolverOptions.regime``):
- "subcritical": march upstream from the downstream boundary;
- "supercritical": march downstream from the upstream boundary (critical depth when None);
- "mixed": compute the subcritical profile, then march downstream with the supercritical
  branch from the upstream boundary (if given and supercritical) and from every section where
  the subcritical run had to assume critical depth. At each section the branch with the larger
  specific force M = beta Q^2/(gA) + A ybar governs (momentum balance across a hydraulic jump;
  Chow 1959, Open-Channel Hydraulics, ch. 15, from memory); where a supercritical run loses to
  the subcritical profile a jump is placed between the two sections.

Flags (per section, plain words):
- "boundary": the WSE was set by the boundary condition;
- "critical_assumed": no solution in the running regime (or the boundary was on the wrong side
  of critical); the WSE is critical WSE;
- "no_convergence": the energy balance was not met within ``tolerance``; the WSE falls back to
  critical WSE (and "critical_assumed" is set too);
- "not_contained": the WSE is above an end of the section; vertical walls were added;
- "jump_upstream": a hydraulic jump lies between this section and the next one upstream;
- "several_critical_depths": specific energy has more than one local minimum here (the lowest
  one is reported as critical).
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.boundaries import Boundary, normal_wse  # noqa: F401  (re-exported)
from geoflow.hydraulics.critical import critical_many
from geoflow.hydraulics.geometry import fast_properties, specific_force
from geoflow.hydraulics.profile import Profile, assemble, section_props
from geoflow.hydraulics.step import CRITICAL, OK, section_state, solve_step

REGIMES = ("subcritical", "supercritical", "mixed")
FRICTION_RULES = ("average_conveyance", "arithmetic", "geometric", "harmonic")


def _choice(name, value, allowed):
    if value not in allowed:
        near = difflib.get_close_matches(str(value), allowed, n=1)
        hint = f"; did you mean {near[0]!r}?" if near else ""
        raise HydraulicsError(f"solver option {name}={value!r} is not one of {allowed}{hint}")


@dataclass(frozen=True)
class SolverOptions:
    """Solver settings. contraction/expansion defaults are the gradual-transition values
    0.1/0.3 (USACE EM 1110-2-1416, 1993, from memory; REFERENCES 3.3). ``tolerance`` is the
    largest accepted energy-balance residual, m."""

    g: float = 9.80665
    regime: str = "subcritical"
    friction_slope: str = "average_conveyance"
    contraction: float = 0.1
    expansion: float = 0.3
    tolerance: float = 0.001
    max_iterations: int = 60

    def __post_init__(self):
        _choice("regime", self.regime, REGIMES)
        _choice("friction_slope", self.friction_slope, FRICTION_RULES)
        for f in ("g", "tolerance"):
            if not getattr(self, f) > 0:
                raise HydraulicsError(f"solver option {f} must be > 0, got {getattr(self, f)!r}")
        for f in ("contraction", "expansion"):
            if not 0 <= getattr(self, f) <= 2:
                raise HydraulicsError(f"solver option {f} must be in [0, 2], got {getattr(self, f)!r}")
        if int(self.max_iterations) < 1:
            raise HydraulicsError("solver option max_iterations must be >= 1")


def _checked(tables, lengths, discharges):
    n = len(tables)
    if n < 1:
        raise HydraulicsError("a profile needs at least one section")
    q = np.atleast_2d(np.asarray(discharges, dtype=float))
    if q.shape[1] != n:
        raise HydraulicsError(f"discharge needs one value per section ({n}), got {q.shape[1]}")
    bad = np.argwhere(~(np.isfinite(q) & (q > 0)))
    if bad.size:
        raise HydraulicsError(f"discharge at section {tables[bad[0][1]].name!r} must be finite "
                              "and > 0; check the flows and flow changes")
    ln = np.asarray(lengths, dtype=float).reshape(-1, 3) if n > 1 else np.zeros((0, 3))
    if ln.shape != (n - 1, 3) or not np.all(np.isfinite(ln) & (ln >= 0)):
        raise HydraulicsError(f"lengths must be ({n - 1}, 3) finite values >= 0 "
                              "(left overbank, channel, right overbank)")
    return q, ln


def _march(tables, lengths, q, wc, w0, downstream: bool, opts):
    """One-regime march. Subcritical (downstream=False) starts at the last section with WSE
    w0 and goes upstream; supercritical starts at the first one and goes downstream."""
    e, n = q.shape
    wse, res, status = np.empty((e, n)), np.zeros((e, n)), np.full((e, n), OK)
    first = 0 if downstream else n - 1
    wrong = w0 > wc[:, first] if downstream else w0 < wc[:, first]
    wse[:, first] = np.where(wrong, wc[:, first], w0)
    status[:, first] = np.where(wrong, CRITICAL, OK)
    order = range(1, n) if downstream else range(n - 2, -1, -1)
    for i in order:
        k = i - 1 if downstream else i + 1
        known = section_state(tables[k], wse[:, k], q[:, k], opts.g)
        wse[:, i], res[:, i], status[:, i] = solve_step(
            tables[i], q[:, i], known, lengths[min(i, k)], wc[:, i], not downstream, opts)
    return wse, res, status


def _mixed(tables, lengths, q, wc, sub, upstream, opts):
    """Overlay supercritical runs on the subcritical profile ``sub`` by specific force."""
    wse, res, status = (a.copy() for a in sub)
    e, n = q.shape
    sup = np.zeros((e, n), dtype=bool)
    jump = np.zeros((e, n), dtype=bool)

    def force(i, w, idx):
        return specific_force(fast_properties(tables[i], w), q[idx, i], opts.g)

    all_ev = np.arange(e)
    if upstream is not None:
        wb = upstream.wse_at(tables[0], q[:, 0], wc[:, 0])
        fallback = status[:, 0] != OK
        take = (wb < wc[:, 0]) & (fallback | (force(0, wb, all_ev) > force(0, wse[:, 0], all_ev)))
        wse[take, 0], res[take, 0], status[take, 0], sup[take, 0] = wb[take], 0.0, OK, True
    for i in range(1, n):
        idx = np.flatnonzero(sup[:, i - 1] | (status[:, i - 1] != OK))
        if idx.size == 0:
            continue
        known = section_state(tables[i - 1], wse[idx, i - 1], q[idx, i - 1], opts.g)
        w, r, st = solve_step(tables[i], q[idx, i], known, lengths[i - 1], wc[idx, i], False, opts)
        take = (st == OK) & ((status[idx, i] != OK) | (force(i, w, idx) > force(i, wse[idx, i], idx)))
        jump[idx[~take & sup[idx, i - 1] & (status[idx, i] == OK)], i] = True
        t = idx[take]
        wse[t, i], res[t, i], status[t, i], sup[t, i] = w[take], r[take], OK, True
    return (wse, res, status), sup, jump


def _critical(tables, q, g):
    """Critical WSE (E, N) of every section and event (all sections refined together), and
    where specific energy has several local minima."""
    wse, _, minima = critical_many(tables, q, g)
    return wse, minima > 1


def solve_events(tables, lengths, discharges, downstream: Boundary | None = None,
                 upstream: Boundary | None = None, options: SolverOptions | None = None):
    """Solve E events at once on the same sections (vectorised across events).

    ``tables``: N SectionTable, upstream -> downstream; ``lengths`` (N-1, 3) m (left overbank,
    channel, right overbank); ``discharges`` (E, N) m3/s. ``downstream`` is required for the
    subcritical and mixed regimes; ``upstream`` is used by the supercritical regime (critical
    depth when None) and, in the mixed regime, starts a supercritical run at the first section
    when its WSE is below critical. Stage boundaries may give one WSE per event.
    Returns a tuple of E ``Profile``."""
    opts = options or SolverOptions()
    q, ln = _checked(tables, lengths, discharges)
    e, n = q.shape
    wc, several = _critical(tables, q, opts.g)
    boundary = np.zeros((e, n), dtype=bool)
    sup = np.zeros((e, n), dtype=bool)
    jump = np.zeros((e, n), dtype=bool)
    if opts.regime in ("subcritical", "mixed"):
        if downstream is None:
            raise HydraulicsError(f"regime {opts.regime!r} needs a downstream boundary")
        w0 = downstream.wse_at(tables[-1], q[:, -1], wc[:, -1])
        result = _march(tables, ln, q, wc, w0, False, opts)
        boundary[:, -1] = True
        if opts.regime == "mixed":
            result, sup, jump = _mixed(tables, ln, q, wc, result, upstream, opts)
            boundary[:, -1] &= ~sup[:, -1]
            boundary[:, 0] |= sup[:, 0]
    else:
        up = upstream or Boundary.critical()
        w0 = up.wse_at(tables[0], q[:, 0], wc[:, 0])
        result = _march(tables, ln, q, wc, w0, True, opts)
        boundary[:, 0] = True
    props = section_props(tables, result[0])
    return tuple(assemble({f: v[k] for f, v in props.items()}, q[k], wc[k], result[0][k],
                          result[1][k], result[2][k], boundary[k], jump[k], several[k], opts.g)
                 for k in range(e))


def solve_profile(tables, lengths, discharge, downstream: Boundary | None = None,
                  upstream: Boundary | None = None, options: SolverOptions | None = None) -> Profile:
    """Solve one steady profile; ``discharge`` is (N,) m3/s. See ``solve_events``."""
    q = np.asarray(discharge, dtype=float).reshape(1, -1)
    return solve_events(tables, lengths, q, downstream, upstream, options)[0]


__all__ = ["Boundary", "SolverOptions", "Profile", "solve_profile", "solve_events",
           "REGIMES", "FRICTION_RULES"]
