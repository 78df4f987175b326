"""The numpy reference engine of the solver: vectorised across events, one Python step per
section (``step``, ``critical``, ``geometry``). The compiled engine (``engine_compiled``) is
checked against it. Both engines offer the same four operations to ``solver``:

- ``critical(q)``: critical WSE (E, N) and where specific energy has several minima;
- ``march_piece(q, wc, lengths, wse, res, status, i_from, i_to)``: solve sections
  i_from +- 1 .. i_to in place from the WSE at i_from (upstream when i_to < i_from);
- ``mixed(q, wc, lengths, result, w_up, blocked)``: overlay supercritical runs by specific force
  (no step into the sections ``blocked`` marks: the downstream faces of structures);
- ``props(wse)``: section properties at the solved WSE, dict of (E, N) / (E, N, 3) arrays.
"""
from __future__ import annotations

import numpy as np

from geoflow.hydraulics.critical import critical_many
from geoflow.hydraulics.geometry import fast_properties, specific_force
from geoflow.hydraulics.profile import section_props
from geoflow.hydraulics.step import OK, section_state, solve_step


class NumpyEngine:
    """The reference implementation on a list of SectionTable."""

    name = "numpy"

    def __init__(self, tables, opts):
        self.tables, self.opts = tables, opts

    def critical(self, q):
        wse, _, minima = critical_many(self.tables, q, self.opts.g)
        return wse, minima > 1

    def march_piece(self, q, wc, lengths, wse, res, status, i_from, i_to):
        up = i_to < i_from
        step = -1 if up else 1
        for i in range(i_from + step, i_to + step, step):
            k = i - step
            known = section_state(self.tables[k], wse[:, k], q[:, k], self.opts.g)
            wse[:, i], res[:, i], status[:, i] = solve_step(
                self.tables[i], q[:, i], known, lengths[min(i, k)], wc[:, i], up, self.opts)

    def mixed(self, q, wc, lengths, result, w_up, blocked=None):
        """Supercritical runs from the upstream boundary WSE ``w_up`` (E,) or None, and from
        every section where the subcritical run assumed critical depth; at each section the
        branch with the larger specific force governs. ``blocked`` (N,) or None: no energy
        step into section i where True (a structure lies between i-1 and i): a supercritical
        run that reached i-1 ends there, with a jump at i when the subcritical level there is
        solved."""
        tables, opts = self.tables, self.opts
        wse, res, status = (a.copy() for a in result)
        e, n = q.shape
        sup = np.zeros((e, n), dtype=bool)
        jump = np.zeros((e, n), dtype=bool)

        def force(i, w, idx):
            return specific_force(fast_properties(tables[i], w), q[idx, i], opts.g)

        all_ev = np.arange(e)
        if w_up is not None:
            fallback = status[:, 0] != OK
            take = (w_up < wc[:, 0]) & (fallback | (force(0, w_up, all_ev) > force(0, wse[:, 0], all_ev)))
            wse[take, 0], res[take, 0], status[take, 0], sup[take, 0] = w_up[take], 0.0, OK, True
        for i in range(1, n):
            idx = np.flatnonzero(sup[:, i - 1] | (status[:, i - 1] != OK))
            if idx.size == 0:
                continue
            if blocked is not None and blocked[i]:
                jump[idx[sup[idx, i - 1] & (status[idx, i] == OK)], i] = True
                continue
            known = section_state(tables[i - 1], wse[idx, i - 1], q[idx, i - 1], opts.g)
            w, r, st = solve_step(tables[i], q[idx, i], known, lengths[i - 1], wc[idx, i], False, opts)
            take = (st == OK) & ((status[idx, i] != OK) | (force(i, w, idx) > force(i, wse[idx, i], idx)))
            jump[idx[~take & sup[idx, i - 1] & (status[idx, i] == OK)], i] = True
            t = idx[take]
            wse[t, i], res[t, i], status[t, i], sup[t, i] = w[take], r[take], OK, True
        return (wse, res, status), sup, jump

    def props(self, wse):
        return section_props(self.tables, wse)
