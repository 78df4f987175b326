"""Critical water-surface elevation as the level of minimum specific energy.

Specific energy E(h) = y + alpha(h) Q^2 / (2 g A(h)^2), with y the depth above the thalweg and
alpha the kinetic-energy coefficient of the subdivided section (Chow 1959, Open-Channel
Hydraulics, ch. 3, from memory). For a single-subdivision section the minimum satisfies
Q^2 T / (g A^3) = 1. Compound sections can have several local minima of E; every one found on the
table levels is refined by a bounded grid-zooming search, and the one with the LOWEST specific energy
is reported (common practice, no source). ``minima`` says how many local minima were found.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import SectionTable, properties
from geoflow.hydraulics.roots import zoom_minimum

G = 9.80665


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


def _scan_levels(table: SectionTable, q_max: float, g: float):
    """Table levels above the thalweg plus levels far above the top (walls), with alpha, A.
    The extension reaches 4096 times the larger of the relief, 1 m and the critical depth of a
    rectangle as wide as the section."""
    width = table.station[-1] - table.station[0]
    scale = max(table.top - table.thalweg, 1.0, (q_max ** 2 / (g * width ** 2)) ** (1 / 3))
    far = table.levels[-1] + scale * 2.0 ** np.arange(-3, 13)
    p_far = properties(table, far)
    keep = table.levels > table.thalweg
    lv = np.concatenate([table.levels[keep], far])
    alpha = np.concatenate([table.at_levels.alpha[keep], p_far.alpha])
    area = np.concatenate([table.at_levels.area[keep], p_far.area])
    return lv, lv - table.thalweg, alpha, area


def critical_wse(table: SectionTable, discharge, g: float = G, xtol: float = 1e-4) -> CriticalResult:
    """Critical WSE of ``table`` for each discharge in ``discharge`` (scalar or (E,), > 0)."""
    q = np.atleast_1d(np.asarray(discharge, dtype=float))
    if not np.all(np.isfinite(q) & (q > 0)):
        raise HydraulicsError(f"section {table.name!r}: discharge must be finite and > 0 "
                              "to find critical depth")
    lv, y, alpha, area = _scan_levels(table, float(q.max()), g)
    with np.errstate(divide="ignore", invalid="ignore"):
        e = y[None, :] + alpha[None, :] * q[:, None] ** 2 / (2.0 * g * area[None, :] ** 2)
    e[np.isnan(e)] = np.inf
    pad = np.full((q.size, 1), np.inf)
    ep = np.hstack([pad, e, pad])
    is_min = (ep[:, 1:-1] <= ep[:, :-2]) & (ep[:, 1:-1] < ep[:, 2:])
    is_min[np.arange(q.size), np.argmin(e, axis=1)] = True  # the grid minimum is always a candidate
    ev, j = np.nonzero(is_min)
    lv_pad = np.concatenate([[table.thalweg], lv, [lv[-1]]])
    lo, hi = lv_pad[j], lv_pad[j + 2]

    def fun(x, idx):
        return specific_energy(table, x, q[ev[idx]], g)

    x, ex = zoom_minimum(fun, lo, hi, xtol=xtol, points=25)
    e_grid = e[ev, j]
    grid_better = e_grid < ex
    x = np.where(grid_better, lv[j], x)
    ex = np.where(grid_better, e_grid, ex)
    by_x = np.lexsort((x, ev))
    distinct = np.concatenate([[True], (ev[by_x][1:] != ev[by_x][:-1])
                               | (np.diff(x[by_x]) > 1e-4)])
    order = np.lexsort((ex, ev))
    ev_s = ev[order]
    first = np.concatenate([[True], ev_s[1:] != ev_s[:-1]])
    pick = order[first]
    return CriticalResult(wse=x[pick], specific_energy=ex[pick],
                          minima=np.bincount(ev[by_x][distinct], minlength=q.size))
