"""Critical water-surface elevation as the level of minimum specific energy.

Specific energy E(h) = y + alpha(h) Q^2 / (2 g A(h)^2), with y the depth above the thalweg and
alpha the kinetic-energy coefficient of the subdivided section (Chow 1959, Open-Channel
Hydraulics, ch. 3, from memory). For a single-subdivision section the minimum satisfies
Q^2 T / (g A^3) = 1. Compound sections can have several local minima of E; every one found on the
table levels is refined, and the one with the LOWEST specific energy is reported (common
practice, no source). ``minima`` says how many local minima were found. Refinement: on the two
table intervals around a minimum, regula falsi on the analytic dE/dw of the level tables
(``lookup.slopes_in_windows``); sections with a depth law for n use a bounded grid-zooming
search to ``xtol`` instead. All sections of a reach are refined together (``critical_many``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.constants import G
from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import SectionTable, flow_state, properties
from geoflow.hydraulics.lookup import flow_in_windows, slopes_in_windows, windows
from geoflow.hydraulics.roots import bracketed_root, zoom_minimum


@dataclass(frozen=True)
class CriticalResult:
    """Critical WSE per discharge (arrays (E,)): wse (m), specific energy (m above the
    thalweg) and the number of local minima of specific energy found."""

    wse: np.ndarray
    specific_energy: np.ndarray
    minima: np.ndarray


def specific_energy(table: SectionTable, wse, discharge, g: float = G):
    """E = (wse - thalweg) + alpha Q^2 / (2 g A^2), m; inf where the section is dry."""
    p = properties(table, wse)
    q = np.broadcast_to(np.asarray(discharge, dtype=float), p.area.shape)
    with np.errstate(divide="ignore"):
        return p.depth + p.alpha * q * q / (2.0 * g * p.area ** 2)


def _far_levels(table: SectionTable, q_max: float, g: float):
    """Levels far above the top (walls): 2^-3 .. 2^12 times the larger of the relief, 1 m and
    the critical depth of a rectangle as wide as the section."""
    width = table.station[-1] - table.station[0]
    scale = max(table.top - table.thalweg, 1.0, (q_max ** 2 / (g * width ** 2)) ** (1 / 3))
    return table.levels[-1] + scale * 2.0 ** np.arange(-3, 13)


def _scan(tables, q, g, evaluator):
    """Scan levels per section (table levels above the thalweg, then far levels), padded to a
    common length by repeating the last level, with A and alpha there (NaN in the padding)."""
    far = np.stack([_far_levels(t, float(q[:, i].max()), g) for i, t in enumerate(tables)])
    sec = np.repeat(np.arange(len(tables)), far.shape[1])
    at = evaluator(sec, far.ravel())
    a_far, alpha_far = (v.reshape(far.shape) for v in at(np.arange(sec.size), far.ravel()))
    keep = [t.levels > t.thalweg for t in tables]
    size = max(int(k.sum()) for k in keep) + far.shape[1]
    lv, area, alpha = (np.full((len(tables), size), np.nan) for _ in range(3))
    for i, (t, k) in enumerate(zip(tables, keep)):
        a_lv, _, al_lv, _ = t.flow_at_levels
        row = np.concatenate([t.levels[k], far[i]])
        lv[i, :row.size], lv[i, row.size:] = row, row[-1]
        area[i, :row.size] = np.concatenate([a_lv[k], a_far[i]])
        alpha[i, :row.size] = np.concatenate([al_lv[k], alpha_far[i]])
    return lv, area, alpha


def _evaluator(tables):
    """``evaluator(sec, lo)`` prepares queries on sections ``sec`` just above levels ``lo``
    and returns ``at(cand, x)`` -> (area, alpha) at points ``x`` of queries ``cand``; every
    point must lie in [lo, the second table level above lo]. Uses windows of the level
    tables (one evaluation for all sections), or ``flow_state`` per section without tables."""
    if any(t.lookup is None for t in tables):
        def by_section(sec, lo):
            def at(cand, x):
                out = [np.empty(x.size) for _ in range(2)]
                for i in np.unique(sec[cand]):
                    m = sec[cand] == i
                    a, _, al, _ = flow_state(tables[i], x[m])
                    out[0][m], out[1][m] = a, al
                return out
            return at
        return by_section
    lookups = [t.lookup for t in tables]

    def in_windows(sec, lo):
        win = windows(lookups, sec, lo)

        def at(cand, x):
            a, _, al = flow_in_windows(win, cand, x)
            return a, al
        setattr(at, "slopes", lambda cand, x: slopes_in_windows(win, cand, x))  # noqa: B010
        return at
    return in_windows


def critical_many(tables, discharge, g: float = G, xtol: float = 1e-4):
    """Critical WSE of N sections for E discharges each, ``discharge`` (E, N) > 0, all refined
    together. Returns (wse, specific energy, minima), arrays (E, N)."""
    q = np.asarray(discharge, dtype=float)
    thalweg = np.array([t.thalweg for t in tables])
    evaluator = _evaluator(tables)
    lv, area, alpha = _scan(tables, q, g, evaluator)
    e_n, n = q.shape
    sec = np.tile(np.arange(n), e_n)           # row r = event * N + section
    qr = q.ravel()
    with np.errstate(divide="ignore", invalid="ignore"):
        e = (lv - thalweg[:, None])[sec] + alpha[sec] * qr[:, None] ** 2 / (2.0 * g * area[sec] ** 2)
    e[np.isnan(e)] = np.inf
    x, ex, rows = _refine(e, lv, area, thalweg, sec, qr, g, xtol, evaluator)
    wse, energy, minima = _select(x, ex, rows, qr.size)
    return wse.reshape(e_n, n), energy.reshape(e_n, n), minima.reshape(e_n, n)


def _refine(e, lv, area, thalweg, sec, qr, g, xtol, evaluator):
    """Refine the local minima of the scanned energies ``e`` (rows, levels) on the two scan
    intervals [lo, hi] around each (slope root search, or zooming without level tables). A minimum is left unrefined (at its scan level)
    when it cannot hold the row's lowest energy: on [lo, hi] E >= (lo - thalweg) +
    Q^2 / (2 g A(hi)^2), since alpha >= 1 (Cauchy-Schwarz) and A grows with the level; when
    that bound exceeds the row's lowest scanned E, refining cannot make it the critical one."""
    pad = np.full((e.shape[0], 1), np.inf)
    ep = np.hstack([pad, e, pad])
    is_min = (ep[:, 1:-1] <= ep[:, :-2]) & (ep[:, 1:-1] < ep[:, 2:])
    is_min[np.arange(e.shape[0]), np.argmin(e, axis=1)] = True  # the grid minimum always counts
    rows, j = np.nonzero(is_min)
    s = sec[rows]
    lv_pad = np.hstack([thalweg[:, None], lv, lv[:, -1:]])
    lo, hi = lv_pad[s, j], lv_pad[s, j + 2]
    a_hi = np.hstack([np.zeros((lv.shape[0], 1)), area, area[:, -1:]])[s, j + 2]
    with np.errstate(divide="ignore"):
        bound = (lo - thalweg[s]) + (1.0 - 1e-9) * qr[rows] ** 2 / (2.0 * g * a_hi ** 2)
    e_grid = e[rows, j]
    x, ex = lv[s, j], e_grid.copy()
    live = np.flatnonzero(~(bound > np.min(e, axis=1)[rows]))
    rows_all, lo, hi = rows, lo[live], hi[live]
    rows, s = rows[live], s[live]
    at = evaluator(s, lo)

    def fun(x, cand):
        a, al = at(cand, x)
        qq = qr[rows[cand]]
        with np.errstate(divide="ignore", invalid="ignore"):
            return (x - thalweg[s[cand]]) + al * qq * qq / (2.0 * g * a * a)

    if hasattr(at, "slopes"):
        xz, ez = _slope_minimum(at, fun, lo, lv[s, j[live]], hi, qr[rows], g)
    else:
        xz, ez = zoom_minimum(fun, lo, hi, xtol=xtol, points=25)
    better = ez <= e_grid[live]
    x[live[better]], ex[live[better]] = xz[better], ez[better]
    return x, ex, rows_all


def _slope_minimum(at, energy, lo, mid, hi, q, g):
    """Minimum of E on each (lo, hi], which holds one table level ``mid``: on each side of it
    (where E is smooth) the point where dE/dw changes sign from - to + is found by regula
    falsi on dE/dw = 1 + Q^2/(2g) (alpha'/A^2 - 2 alpha T/A^3) (differentiating
    E = y + alpha Q^2/(2 g A^2), with dA/dw = T and alpha' from ``lookup.slopes_in_windows``);
    where dE/dw keeps one sign the end where E is lower is taken. Returns (x, E(x))."""
    n = lo.size
    head = np.tile(q * q / (2.0 * g), 2)
    cand = np.tile(np.arange(n), 2)

    def slope(x, idx):
        a, al, t, dal = at.slopes(cand[idx], x)
        with np.errstate(divide="ignore", invalid="ignore"):
            f = 1.0 + head[idx] * (dal / (a * a) - 2.0 * al * t / a ** 3)
        return np.where(np.isnan(f), -1.0, f)  # dry: E falls from +inf

    left, right = np.concatenate([lo, np.maximum(mid, lo)]), np.concatenate([mid, hi])
    idx = np.arange(2 * n)
    a = left + 1e-9 * (right - left)
    fa, fb = slope(a, idx), slope(right, idx)
    x = np.where(fb <= 0, right, a)
    k = np.flatnonzero((fa < 0) & (fb > 0))
    if k.size:
        x[k] = bracketed_root(lambda xx, sub: slope(xx, k[sub]), a[k], right[k], fa[k], fb[k],
                              xtol=1e-10, ftol=1e-12)[0]
    e = energy(x, cand)
    first = ~(e[n:] < e[:n])
    return np.where(first, x[:n], x[n:]), np.where(first, e[:n], e[n:])


def _select(x, ex, rows, nrows):
    """Per row: the refined minimum of lowest energy, and the count of distinct minima."""
    by_x = np.lexsort((x, rows))
    distinct = np.concatenate([[True], (rows[by_x][1:] != rows[by_x][:-1])
                               | (np.diff(x[by_x]) > 1e-4)])
    order = np.lexsort((ex, rows))
    r_s = rows[order]
    pick = order[np.concatenate([[True], r_s[1:] != r_s[:-1]])]
    return x[pick], ex[pick], np.bincount(rows[by_x][distinct], minlength=nrows)


def critical_wse(table: SectionTable, discharge, g: float = G, xtol: float = 1e-4) -> CriticalResult:
    """Critical WSE of ``table`` for each discharge in ``discharge`` (scalar or (E,), > 0)."""
    q = np.atleast_1d(np.asarray(discharge, dtype=float))
    if not np.all(np.isfinite(q) & (q > 0)):
        raise HydraulicsError(f"section {table.name!r}: discharge must be finite and > 0 "
                              "to find critical depth")
    wse, energy, minima = critical_many([table], q[:, None], g, xtol)
    return CriticalResult(wse=wse[:, 0], specific_energy=energy[:, 0], minima=minima[:, 0])
