"""Shared pieces of the structure computations: the result record, input checks, weir
submergence and two vectorised root searches.

Every structure returns a ``StructureResult`` with one value per event (arrays (E,)). The
``control`` of an event is one of ``CONTROLS``:
- "inlet" / "outlet": a culvert barrel in inlet or outlet control (HDS-5);
- "weir": flow over a weir crest;
- "free_surface": bridge low flow (free surface through the opening);
- "pressure": bridge pressure flow (sluice-gate or orifice form);
- "overtopping": part of the flow passes over a road or a bridge deck (``q_over_crest`` > 0).
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass, field

import numpy as np

from geoflow.constants import G  # noqa: F401  (re-exported: the structures import it from here)
from geoflow.errors import HydraulicsError
from geoflow.hydraulics.critical import critical_wse
from geoflow.hydraulics.geometry import SectionTable, flow_state
from geoflow.hydraulics.roots import bracketed_root

CONTROLS = ("inlet", "outlet", "weir", "free_surface", "pressure", "overtopping")
VILLEMONTE_EXPONENT = 0.385
DROWNED_RATIO = 0.9


@dataclass(frozen=True, eq=False)
class StructureResult:
    """Hydraulics of one structure for E events (SI units, arrays (E,)).

    ``headwater_wse`` is the water-surface elevation just upstream of the structure (the level
    that starts the profile upstream); ``tailwater_wse`` the given level just downstream.
    ``q_through`` passes through the barrels or the opening (or over the weir crest for a
    weir), ``q_over_crest`` over the road or deck; the two add up to ``discharge``.
    ``flags`` holds one tuple of plain words per event (documented in each structure module).
    ``detail`` holds structure-specific arrays (E,), e.g. the inlet- and outlet-control
    headwaters of a culvert or the headwater of each bridge low-flow method."""

    kind: str
    discharge: np.ndarray
    headwater_wse: np.ndarray
    tailwater_wse: np.ndarray
    control: np.ndarray
    q_through: np.ndarray
    q_over_crest: np.ndarray
    flags: tuple
    detail: dict = field(default_factory=dict)

    def flag_text(self, event: int) -> str:
        """The flags of one event joined with ';' (empty when none)."""
        return ";".join(self.flags[event])


def event_arrays(discharge, tailwater_wse, what: str):
    """Discharge and tailwater WSE as float arrays (E,), broadcast to each other."""
    q = np.atleast_1d(np.asarray(discharge, dtype=float)).ravel()
    tw = np.atleast_1d(np.asarray(tailwater_wse, dtype=float)).ravel()
    if tw.size == 1 and q.size > 1:
        tw = np.full(q.size, tw[0])
    if q.size == 1 and tw.size > 1:
        q = np.full(tw.size, q[0])
    if q.size != tw.size:
        raise HydraulicsError(f"{what}: discharge and tailwater_wse need one value per event "
                              f"(got {q.size} and {tw.size})")
    if not np.all(np.isfinite(q) & (q > 0)):
        raise HydraulicsError(f"{what}: discharge must be finite and > 0 for every event")
    if not np.all(np.isfinite(tw)):
        raise HydraulicsError(f"{what}: tailwater_wse must be finite for every event")
    return q, tw


def positive(what: str, name: str, value, allow_zero: bool = False) -> float:
    """``value`` as a float that is finite and > 0 (or >= 0); else a one-line error."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise HydraulicsError(f"{what}: {name} must be a number (got {value!r})") from None
    if not np.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise HydraulicsError(f"{what}: {name} must be finite and {bound} (got {value!r})")
    return v


def finite(what: str, name: str, value) -> float:
    """``value`` as a finite float; else a one-line error."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise HydraulicsError(f"{what}: {name} must be a number (got {value!r})") from None
    if not np.isfinite(v):
        raise HydraulicsError(f"{what}: {name} must be finite (got {value!r})")
    return v


def choice(what: str, name: str, value, allowed) -> str:
    """``value`` if it is one of ``allowed``; else an error with a did-you-mean hint."""
    allowed = tuple(allowed)
    if value not in allowed:
        near = difflib.get_close_matches(str(value), allowed, n=1, cutoff=0.5)
        hint = f"; did you mean {near[0]!r}?" if near else f"; use one of {', '.join(allowed)}"
        raise HydraulicsError(f"{what}: unknown {name} {value!r}{hint}")
    return value


def villemonte_factor(submergence, exponent: float = 1.5):
    """Submerged / free discharge over a weir, Q_s/Q_f = [1 - (H2/H1)^n]^0.385 (Villemonte
    1947, Eng. News-Record 139; n = 1.5 for a rectangular weir; from memory). ``submergence``
    = H2/H1, clipped to [0, 1]: 1 at a free overfall (H2 <= 0), 0 when fully drowned."""
    r = np.clip(np.asarray(submergence, dtype=float), 0.0, 1.0)
    return (1.0 - r ** exponent) ** VILLEMONTE_EXPONENT


def submergence_ratio(h_up, h_down):
    """H2/H1 with both heads measured above the crest; 0 where H2 <= 0 (free overfall), 1
    where H1 <= H2."""
    h1 = np.asarray(h_up, dtype=float)
    h2 = np.maximum(np.asarray(h_down, dtype=float), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(h1 > 0, h2 / np.where(h1 > 0, h1, 1.0), 1.0)
    return np.where(h2 <= 0, 0.0, np.minimum(r, 1.0))


_STEPS = np.concatenate([[1e-9, 1e-6, 1e-4, 1e-3, 1e-2, 0.03, 0.1, 0.3], 2.0 ** np.arange(0, 31)])


def root_above(fun, lo, scale, f_lo=None, xtol=1e-11, ftol=1e-12):
    """Root of ``fun(x, idx)`` above ``lo`` for each problem, where fun(lo) < 0 and fun
    becomes >= 0 somewhere above: the first point of lo + scale * (1e-9 ... 2^30) where
    fun >= 0 closes the bracket, refined by Illinois regula falsi (``roots.bracketed_root``).
    Returns (x, found); ``found`` is False (and x = lo) where no sign change was seen."""
    lo = np.asarray(lo, dtype=float)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), lo.shape)
    n, k = lo.size, _STEPS.size
    pts = lo[:, None] + scale[:, None] * _STEPS[None, :]
    idx = np.repeat(np.arange(n), k)
    f = fun(pts.ravel(), idx).reshape(n, k)
    f = np.where(np.isnan(f), -np.inf, f)
    pos = f >= 0
    found = pos.any(axis=1)
    j = np.argmax(pos, axis=1)
    rows = np.arange(n)
    fa0 = fun(lo, np.arange(n)) if f_lo is None else np.broadcast_to(f_lo, lo.shape)
    a = np.where(j > 0, pts[rows, np.maximum(j - 1, 0)], lo)
    fa = np.where(j > 0, f[rows, np.maximum(j - 1, 0)], fa0)
    b, fb = pts[rows, j], f[rows, j]
    x = lo.copy()
    ok = np.flatnonzero(found)
    if ok.size:
        xr, _ = bracketed_root(lambda xx, sub: fun(xx, ok[sub]), a[ok], b[ok], fa[ok], fb[ok],
                               xtol=xtol, ftol=ftol, maxiter=200)
        x[ok] = xr
    return x, found


def velocity_head(table: SectionTable, wse, discharge, g: float):
    """alpha Q^2 / (2 g A^2) at ``wse`` (inf where the section is dry)."""
    area, _, alpha, _ = flow_state(table, np.asarray(wse, dtype=float).ravel())
    q = np.asarray(discharge, dtype=float).ravel()
    with np.errstate(divide="ignore", invalid="ignore"):
        h = alpha * q * q / (2.0 * g * area * area)
    return np.where(area > 0, h, np.inf)


def wse_from_energy(table: SectionTable, energy, discharge, g: float):
    """WSE on the subcritical branch of ``table`` whose energy WSE + alpha V^2/2g equals
    ``energy`` (arrays (E,)). Where ``energy`` is below the section's critical energy the WSE
    is the critical WSE. Returns (wse, at_critical)."""
    e = np.asarray(energy, dtype=float).ravel()
    q = np.asarray(discharge, dtype=float).ravel()
    wc = critical_wse(table, q, g=g).wse
    ec = wc + velocity_head(table, wc, q, g)
    low = ~(e > ec)
    wse = wc.copy()
    idx = np.flatnonzero(~low)
    if idx.size:
        def fun(x, sub):
            ii = idx[sub]
            return x + velocity_head(table, x, q[ii], g) - e[ii]
        fa, fb = ec[idx] - e[idx], velocity_head(table, e[idx], q[idx], g)
        x, _ = bracketed_root(fun, wc[idx], e[idx], fa, fb, xtol=1e-10, ftol=1e-10, maxiter=200)
        wse[idx] = x
    return wse, low


def flags_per_event(n_events: int, named_masks) -> tuple:
    """Tuple (E,) of tuples of flag words from (word, bool mask (E,)) pairs, in order."""
    masks = [(w, np.broadcast_to(np.asarray(m, dtype=bool), (n_events,))) for w, m in named_masks]
    return tuple(tuple(w for w, m in masks if m[i]) for i in range(n_events))
