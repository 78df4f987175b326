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
- "critical_fallback": no solution in the running regime (or the boundary was on the wrong side
  of critical); the WSE is critical WSE;
- "no_convergence": the energy balance was not met within ``tolerance``; the WSE falls back to
  critical WSE (and "critical_fallback" is set too);
- "not_contained": the WSE is above an end of the section; vertical walls were added;
- "jump_upstream": a hydraulic jump lies between this section and the next one upstream;
- "several_critical_depths": specific energy has more than one local minimum here (the lowest
  one is reported as critical);
- at structures (``links``): "headwater_critical", "outlet_critical",
  "headwater_above_supercritical", "supercritical_approach".

Engines (``SolverOptions.engine``): "compiled" (default) runs numba kernels on the packed level
tables of the reach (``engine_compiled``), all events and sections in one call per stage;
"numpy" is the reference implementation (``engine_numpy``), vectorised across events with one
Python step per section. Both give the same WSE within 1e-6 m and the same flags. The compiled
engine falls back to numpy when numba cannot be imported or a section has a depth law for n
(no level tables).

Internal boundaries (hydraulic structures, ``links``): a one-regime march is a sequence of
``engine.march_piece(q, wc, lengths, wse, res, status, i_from, i_to)`` calls, each solving
sections i_from +- 1 .. i_to from the WSE already set at i_from (see ``_march``). A culvert,
weir or bridge between sections k and k+1 (``links.StructureLink``) replaces the energy step
over that interval: a subcritical march goes n-1 -> k+1, sets the upstream face from the
structure's headwater for the tailwater at k+1, then goes on k -> 0; a supercritical march goes
0 -> k and starts again at k+1 from critical depth; the mixed overlay never steps across a
structure. ``links`` explains the rules, the flags they add and the per-event records
(``Profile.structures``).
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np

from geoflow.constants import G
from geoflow.errors import HydraulicsError
from geoflow.hydraulics.boundaries import Boundary, normal_wse  # noqa: F401  (re-exported)
from geoflow.hydraulics.engine_numpy import NumpyEngine
from geoflow.hydraulics.links import Crossings, StructureLink
from geoflow.hydraulics.profile import Profile, assemble_events
from geoflow.hydraulics.step import CRITICAL, OK

REGIMES = ("subcritical", "supercritical", "mixed")
FRICTION_RULES = ("average_conveyance", "arithmetic", "geometric", "harmonic")
ENGINES = ("compiled", "numpy")


def _choice(name, value, allowed):
    if value not in allowed:
        near = difflib.get_close_matches(str(value), allowed, n=1)
        hint = f"; did you mean {near[0]!r}?" if near else ""
        raise HydraulicsError(f"solver option {name}={value!r} is not one of {allowed}{hint}")


@dataclass(frozen=True)
class SolverOptions:
    """Solver settings. contraction/expansion defaults are the gradual-transition values
    0.1/0.3 (USACE EM 1110-2-1416, 1993, from memory). ``tolerance`` is the
    largest accepted energy-balance residual, m. ``engine``: "compiled" (numba kernels) or
    "numpy" (the reference implementation); see the module docstring."""

    g: float = G
    regime: str = "subcritical"
    friction_slope: str = "average_conveyance"
    contraction: float = 0.1
    expansion: float = 0.3
    tolerance: float = 0.001
    max_iterations: int = 60
    engine: str = "compiled"

    def __post_init__(self):
        _choice("regime", self.regime, REGIMES)
        _choice("engine", self.engine, ENGINES)
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
                              "(left floodplain, channel, right floodplain)")
    return q, ln


def _engine(tables, opts):
    """The engine that runs this solve (module docstring): compiled when asked for, numba
    imports and every section has level tables; else the numpy reference."""
    if opts.engine == "compiled" and all(t.lookup is not None for t in tables):
        try:
            from geoflow.hydraulics.engine_compiled import CompiledEngine
        except ImportError:  # numba missing or broken: the reference engine still works
            pass
        else:
            return CompiledEngine(tables, opts)
    return NumpyEngine(tables, opts)


def _march(engine, lengths, q, wc, w0, downstream: bool, links=None):
    """One-regime march. Subcritical (downstream=False) starts at the last section with WSE
    w0 and goes upstream; supercritical starts at the first one and goes downstream.
    ``links`` {k: headwater(q, tailwater_wse) -> wse} replace the energy step between sections
    k and k+1 (module docstring): subcritical, the WSE at k is headwater(q[:, k], wse[:, k+1]);
    supercritical, section k+1 starts at its critical WSE and headwater(q[:, k], wc[:, k+1])
    is called for its record only."""
    e, n = q.shape
    wse, res, status = np.empty((e, n)), np.zeros((e, n)), np.full((e, n), OK)
    first = 0 if downstream else n - 1
    wrong = w0 > wc[:, first] if downstream else w0 < wc[:, first]
    wse[:, first] = np.where(wrong, wc[:, first], w0)
    status[:, first] = np.where(wrong, CRITICAL, OK)
    last = n - 1 if downstream else 0
    for k in sorted(links or {}, reverse=not downstream):
        if downstream:  # pieces first .. k, then the outlet starts k+1 at critical depth
            engine.march_piece(q, wc, lengths, wse, res, status, first, k)
            links[k](q[:, k], wc[:, k + 1])
            wse[:, k + 1], status[:, k + 1] = wc[:, k + 1], OK
            first = k + 1
        else:  # pieces first .. k+1, then the structure sets section k
            engine.march_piece(q, wc, lengths, wse, res, status, first, k + 1)
            wse[:, k] = links[k](q[:, k], wse[:, k + 1])
            first = k
    engine.march_piece(q, wc, lengths, wse, res, status, first, last)
    return wse, res, status


def solve_events(tables, lengths, discharges, downstream: Boundary | None = None,
                 upstream: Boundary | None = None, options: SolverOptions | None = None,
                 structures=()):
    """Solve E events at once on the same sections (vectorised across events).

    ``tables``: N SectionTable, upstream -> downstream; ``lengths`` (N-1, 3) m (left floodplain,
    channel, right floodplain); ``discharges`` (E, N) m3/s. ``downstream`` is required for the
    subcritical and mixed regimes; ``upstream`` is used by the supercritical regime (critical
    depth when None) and, in the mixed regime, starts a supercritical run at the first section
    when its WSE is below critical. Stage boundaries may give one WSE per event.
    ``structures``: ``StructureLink``s, each between its upstream face (``interval``) and the
    next section (``links`` module); their records are in each ``Profile.structures``.
    Returns a tuple of E ``Profile``."""
    opts = options or SolverOptions()
    q, ln = _checked(tables, lengths, discharges)
    e, n = q.shape
    crossings = Crossings(structures, tables)
    engine = _engine(tables, opts)
    wc, several = engine.critical(q)
    links = crossings.links(wc) if crossings else None
    boundary = np.zeros((e, n), dtype=bool)
    sup = np.zeros((e, n), dtype=bool)
    jump = np.zeros((e, n), dtype=bool)
    if opts.regime in ("subcritical", "mixed"):
        if downstream is None:
            raise HydraulicsError(f"regime {opts.regime!r} needs a downstream boundary")
        w0 = downstream.wse_at(tables[-1], q[:, -1], wc[:, -1])
        result = _march(engine, ln, q, wc, w0, False, links)
        boundary[:, -1] = True
        if opts.regime == "mixed":
            w_up = None if upstream is None else upstream.wse_at(tables[0], q[:, 0], wc[:, 0])
            blocked = crossings.blocked(n) if crossings else None
            result, sup, jump = engine.mixed(q, wc, ln, result, w_up, blocked)
            boundary[:, -1] &= ~sup[:, -1]
            boundary[:, 0] |= sup[:, 0]
    else:
        up = upstream or Boundary.critical()
        w0 = up.wse_at(tables[0], q[:, 0], wc[:, 0])
        result = _march(engine, ln, q, wc, w0, True, links)
        boundary[:, 0] = True
    props = engine.props(result[0])
    marks = crossings.flags(opts.regime, q, result[0], wc, sup, opts.g) if crossings else []
    levels = crossings.levels(result[0], marks) if crossings else None
    return assemble_events(props, q, wc, result, boundary, jump, several, opts.g, marks, levels)


def solve_profile(tables, lengths, discharge, downstream: Boundary | None = None,
                  upstream: Boundary | None = None, options: SolverOptions | None = None,
                  structures=()) -> Profile:
    """Solve one steady profile; ``discharge`` is (N,) m3/s. See ``solve_events``."""
    q = np.asarray(discharge, dtype=float).reshape(1, -1)
    return solve_events(tables, lengths, q, downstream, upstream, options, structures)[0]


__all__ = ["Boundary", "SolverOptions", "Profile", "StructureLink", "solve_profile", "solve_events",
           "REGIMES", "FRICTION_RULES", "ENGINES"]
