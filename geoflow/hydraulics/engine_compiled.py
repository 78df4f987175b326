"""The compiled engine of the solver: numba kernels on the packed level tables of a reach
(``packed``), one call per operation for all events and sections (the kernels loop over
sections and events inside). Same operations and results as ``engine_numpy.NumpyEngine``
(WSE within 1e-6 m, same status and flags); sections without level tables (a depth law
for n) are not supported here and use the numpy engine (``solver`` decides).
"""
from __future__ import annotations

import numpy as np

from geoflow.hydraulics.kernel import (
    N_PROPS,
    P_ALPHA,
    P_AREA,
    P_BETA,
    P_CONV,
    P_MOMENT,
    P_OUT,
    P_PART_A,
    P_PART_K,
    P_PERIM,
    P_TOP,
    RULES,
    critical_reach,
    march_piece,
    mixed_overlay,
    properties_reach,
)
from geoflow.hydraulics.packed import pack_reach


def option_array(opts) -> np.ndarray:
    """Solver options in the order of ``kernel`` (O_G .. O_RULE)."""
    return np.array([opts.g, opts.contraction, opts.expansion, opts.tolerance,
                     float(int(opts.max_iterations)), float(RULES.index(opts.friction_slope))])


class CompiledEngine:
    """The compiled implementation on a list of SectionTable that all have level tables."""

    name = "compiled"

    def __init__(self, tables, opts):
        self.reach = pack_reach(tables)
        self.opts, self.opt = opts, option_array(opts)

    def critical(self, q):
        wse, minima = np.empty(q.shape), np.empty(q.shape, dtype=np.int64)
        critical_reach(self.reach, np.ascontiguousarray(q), float(self.opts.g), wse, minima)
        return wse, minima > 1

    def march_piece(self, q, wc, lengths, wse, res, status, i_from, i_to):
        march_piece(self.reach, q, wc, lengths, self.opt, wse, res, status, int(i_from), int(i_to))

    def mixed(self, q, wc, lengths, result, w_up, blocked=None):
        wse, res, status = (a.copy() for a in result)
        sup, jump = np.zeros(q.shape, dtype=bool), np.zeros(q.shape, dtype=bool)
        has_up = w_up is not None
        w_up = np.zeros(q.shape[0]) if w_up is None else np.asarray(w_up, dtype=float)
        blocked = np.zeros(q.shape[1], dtype=bool) if blocked is None else np.asarray(blocked, dtype=bool)
        mixed_overlay(self.reach, q, wc, lengths, self.opt, wse, res, status, w_up, has_up,
                      sup, jump, blocked)
        return (wse, res, status), sup, jump

    def props(self, wse):
        out = np.empty(wse.shape + (N_PROPS,))
        properties_reach(self.reach, np.ascontiguousarray(wse), out)
        one = {"area": P_AREA, "top_width": P_TOP, "wetted_perimeter": P_PERIM,
               "conveyance": P_CONV, "alpha": P_ALPHA, "beta": P_BETA, "first_moment": P_MOMENT}
        p = {k: np.ascontiguousarray(out[..., j]) for k, j in one.items()}
        p["part_area"] = np.ascontiguousarray(out[..., P_PART_A:P_PART_A + 3])
        p["part_conveyance"] = np.ascontiguousarray(out[..., P_PART_K:P_PART_K + 3])
        p["not_contained"] = out[..., P_OUT] > 0.5
        return p
