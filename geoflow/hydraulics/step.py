"""One standard-step energy balance between two neighbouring sections.

Energy equation between an upstream section u and a downstream section d (Chow 1959,
Open-Channel Hydraulics, ch. 10, standard-step method, from memory):

    WSE_u + alpha_u V_u^2/2g = WSE_d + alpha_d V_d^2/2g + L Sf_bar + C |alpha_u V_u^2/2g - alpha_d V_d^2/2g|

- Sf_bar averages the friction slopes Sf = (Q/K)^2 of both ends with the selected rule
  (average conveyance, arithmetic, geometric, harmonic; compared by Reed & Wolfkill 1976, from memory);
- L is the discharge-weighted reach length (L_lob Q_lob + L_ch Q_ch + L_rob Q_rob) / Q with the
  mean of both sections' part discharges (part discharges split Q in proportion to conveyance);
- C is the contraction coefficient where the velocity head rises in the direction of flow and
  the expansion coefficient where it falls (USACE EM 1110-2-1416, 1993, from memory).

The unknown WSE is bracketed on a grid (table levels clipped to the wanted branch, plus points
relative to critical and to the known energy; at the table levels the section's cached flow
terms are used, so only the relative points are evaluated) and refined by regula falsi
(Illinois). Subcritical
steps take the root nearest above critical WSE, supercritical steps the root nearest below it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.hydraulics.geometry import SectionTable, flow_state
from geoflow.hydraulics.roots import bracketed_root

OK, CRITICAL, NO_CONVERGENCE = 0, 1, 2
_ABOVE = np.array([1e-4, 1e-3, 1e-2, 0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 1.5, 2.0, 4.0, 10.0])
_BELOW = np.array([1e-4, 1e-3, 3e-3, 0.01, 0.03, 0.06, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5, 0.6,
                   0.7, 0.8, 0.9, 0.95, 0.99, 1.0])


@dataclass(frozen=True)
class State:
    """Hydraulic state of one section for several events (arrays (e,), part_q (e, 3))."""

    wse: np.ndarray
    energy: np.ndarray
    head: np.ndarray        # alpha V^2 / 2g, m
    discharge: np.ndarray
    conveyance: np.ndarray
    part_q: np.ndarray

    def take(self, idx) -> "State":
        """The state of events ``idx``."""
        return State(self.wse[idx], self.energy[idx], self.head[idx], self.discharge[idx],
                     self.conveyance[idx], self.part_q[idx])


def section_state(table: SectionTable, wse, discharge, g: float) -> State:
    """State at ``wse`` (flattened) with discharge broadcast to it; head = alpha Q^2/(2 g A^2)
    and part discharges split Q in proportion to part conveyance."""
    w = np.asarray(wse, dtype=float).ravel()
    area, conv, alpha, part_k = flow_state(table, w)
    q = np.broadcast_to(np.asarray(discharge, dtype=float).ravel(), w.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        head = alpha * q * q / (2.0 * g * area * area)
        share = np.where(conv[:, None] > 0, part_k / conv[:, None], 1.0 / 3.0)
    return State(w, w + head, head, q, conv, share * q[:, None])


def mean_friction_slope(q1, k1, q2, k2, rule: str):
    """Representative friction slope of a reach (Reed & Wolfkill 1976, from memory)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if rule == "average_conveyance":
            return ((q1 + q2) / (k1 + k2)) ** 2
        s1, s2 = (q1 / k1) ** 2, (q2 / k2) ** 2
        if rule == "arithmetic":
            return 0.5 * (s1 + s2)
        if rule == "geometric":
            return np.sqrt(s1 * s2)
        return 2.0 * s1 * s2 / (s1 + s2)


def step_residual(table, w, q, known: State, lengths, unknown_upstream: bool, opts):
    """Energy-balance residual (m) at trial WSE ``w`` (e,) or (e, G) of the unknown section;
    the known state (e,) is broadcast along the trial axis."""
    w2 = w.reshape(w.shape[0], -1)
    area, conv, alpha, part_k = flow_state(table, w2.ravel())
    flow = tuple(a.reshape(w2.shape) for a in (area, conv, alpha)) + \
        (part_k.reshape(w2.shape + (3,)),)
    return _balance(w2, flow, q, known, lengths, unknown_upstream, opts).reshape(w.shape)


def _balance(w, flow, q, known: State, lengths, unknown_upstream: bool, opts):
    """Residual E_unknown - (E_known +- losses) of the energy equation (module docstring) at
    trial WSE ``w`` (e or 1, G) with the unknown section's (area, K, alpha, part K) ``flow``."""
    area, conv, alpha, part_k = flow
    qq = q[:, None]
    with np.errstate(all="ignore"):  # dry trial levels give inf/nan, mapped to inf by callers
        return _balance_terms(w, area, conv, alpha, part_k, qq, known, lengths,
                              unknown_upstream, opts)


def _balance_terms(w, area, conv, alpha, part_k, qq, known, lengths, unknown_upstream, opts):
    """The terms of ``_balance``: velocity head, discharge-weighted length (``lengths`` weighted
    by the mean part discharges, broadcast over trials), mean friction slope and eddy loss."""
    head = alpha * qq * qq / (2.0 * opts.g * area * area)
    share = part_k / conv[..., None]
    share[~(conv > 0)] = 1.0 / 3.0
    mean_q = 0.5 * (known.part_q[:, None, :] + share * qq[..., None])
    length = (mean_q @ np.asarray(lengths, dtype=float)) / mean_q.sum(axis=2)
    sf = mean_friction_slope(known.discharge[:, None], known.conveyance[:, None], qq, conv,
                             opts.friction_slope)
    kh = known.head[:, None]
    head_up, head_dn = (head, kh) if unknown_upstream else (kh, head)
    coef = np.where(head_dn > head_up, opts.contraction, opts.expansion)
    loss = length * sf + coef * np.abs(head_dn - head_up)
    ke = known.energy[:, None]
    target = ke + loss if unknown_upstream else ke - loss
    return w + head - target


def _grid(table: SectionTable, q, known: State, lengths, wc, unknown_upstream: bool, opts):
    """Ascending trial WSE per event (e, G) on the wanted side of critical WSE ``wc``, and the
    residuals there: every table level (clipped to the branch) plus points relative to ``wc``.
    Residuals at the table levels come from the table's cached flow at its levels; only the
    relative points (and ``wc``) are evaluated."""
    lv = table.levels[None, :]
    if unknown_upstream:
        scale = np.maximum(known.energy - wc, 1e-3)[:, None]
        rel = np.hstack([wc[:, None], wc[:, None] + scale * _ABOVE])
        lo, hi = wc[:, None], np.full_like(rel[:, :1], np.inf)
    else:
        rel = table.thalweg + (wc - table.thalweg)[:, None] * _BELOW
        lo, hi = rel[:, :1], wc[:, None]
    r_ext = step_residual(table, np.hstack([rel, wc[:, None]]), q, known, lengths,
                          unknown_upstream, opts)
    flow = tuple(a[None] for a in table.flow_at_levels)
    r_lv = _balance(lv, flow, q, known, lengths, unknown_upstream, opts)
    r_lv = np.where(lv < lo, r_ext[:, :1], r_lv)  # clipped up to the lowest relative point
    r_lv = np.where(lv > hi, r_ext[:, -1:], r_lv)
    pts = np.hstack([np.clip(lv, lo, hi), rel])
    order = np.argsort(pts, axis=1, kind="stable")
    r = np.hstack([r_lv, r_ext[:, :-1]])
    return np.take_along_axis(pts, order, 1), np.take_along_axis(r, order, 1)


def solve_step(table: SectionTable, q, known: State, lengths, wc, unknown_upstream: bool, opts):
    """WSE of the unknown section per event. Returns (wse, residual, status) arrays (e,);
    where no root exists on the wanted branch the WSE is critical (status CRITICAL), and where
    the root finder misses the tolerance it is also critical (status NO_CONVERGENCE)."""
    grid, r = _grid(table, q, known, lengths, wc, unknown_upstream, opts)
    r[np.isnan(r)] = np.inf  # no flow area at a trial level: treat as far too much energy
    pos = r >= 0
    ev = np.arange(q.size)
    if unknown_upstream:
        start_ok = r[:, 0] < 0
        j = np.maximum(np.argmax(pos, axis=1), 1)
        a, b, fa, fb = grid[ev, j - 1], grid[ev, j], r[ev, j - 1], r[ev, j]
    else:
        start_ok = r[:, -1] < 0
        j = np.minimum(grid.shape[1] - 1 - np.argmax(pos[:, ::-1], axis=1), grid.shape[1] - 2)
        a, b, fa, fb = grid[ev, j], grid[ev, j + 1], r[ev, j], r[ev, j + 1]
    has = start_ok & pos.any(axis=1)
    wse = np.array(wc, dtype=float)
    res = r[:, 0] if unknown_upstream else r[:, -1]  # residual at critical WSE (grid end)
    status = np.where(start_ok, NO_CONVERGENCE, CRITICAL)
    idx = np.flatnonzero(has)
    if idx.size:
        kn_idx, q_idx = known.take(idx), q[idx]

        def fun(x, sub):
            return step_residual(table, x, q_idx[sub], kn_idx.take(sub), lengths,
                                 unknown_upstream, opts)

        x, fx = bracketed_root(fun, a[idx], b[idx], fa[idx], fb[idx], xtol=1e-10,
                               ftol=1e-3 * opts.tolerance, maxiter=opts.max_iterations)
        good = np.abs(fx) <= opts.tolerance
        wse[idx[good]], res[idx[good]], status[idx[good]] = x[good], fx[good], OK
    return wse, res, status
