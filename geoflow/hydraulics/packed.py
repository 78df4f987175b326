"""The level tables of all sections of a reach in flat arrays, for the compiled kernel.

``pack_reach(tables)`` concatenates, per section i (upstream -> downstream), the interval
starts and the coefficient planes of its ``lookup.LevelTable`` (the exact interval polynomials),
the cached flow terms at its table levels and a few scalars, with offsets per section. The
kernel reads them as

    start[s_off[i] + k]                            interval k of section i (k = 0 is the dry sentinel)
    coef[c_off[i] + (p * L1_i + k) * S_i + s]      plane p (A, T, t, N, v, P, p, M) of subdivision s
    level_flow[s_off[i] + k]                       area, conveyance, alpha, part conveyance (3) at start k
    sub_part[p_off[i] + s]                         part code of subdivision s

with L1_i = s_off[i+1] - s_off[i] and S_i = nsub[i]. Packing copies the tables once per reach,
table by table, re-pointing each table's ``lookup`` to views of the pack as it goes (the same
values, so the numpy path is unchanged, and memory is never doubled: each table's own
coefficients are freed as soon as they are copied) and later calls on the same list of
tables reuse the pack.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

from geoflow.hydraulics.lookup import LevelTable


class Reach(NamedTuple):
    """Flat level tables of N sections (module docstring)."""

    start: np.ndarray        # (sum L1,) interval starts
    s_off: np.ndarray        # (N+1,) offsets into start / level_flow
    coef: np.ndarray         # (sum 8 L1 S,) coefficient planes, plane-major per section
    c_off: np.ndarray        # (N+1,) offsets into coef
    nsub: np.ndarray         # (N,) subdivisions per section
    sub_part: np.ndarray     # (sum S,) part code of each subdivision
    p_off: np.ndarray        # (N+1,) offsets into sub_part
    level_flow: np.ndarray   # (sum L1, 6) flow terms at each interval start (row 0 unused)
    scalars: np.ndarray      # (N, 5) thalweg, top, width, left and right end elevations
                             # (columns kernel.THALWEG .. kernel.Z_RIGHT)


class _Pack:
    """A reach pack and the ids of the tables it was made from (in order)."""

    def __init__(self, reach: Reach, ids: tuple):
        self.reach, self.ids = reach, ids


def packable(tables) -> bool:
    """True when every section has level tables (sections with a depth law for n do not)."""
    return all(t.lookup is not None for t in tables)


def pack_reach(tables) -> Reach:
    """The ``Reach`` of ``tables`` (all with level tables), reused when already packed."""
    ids = tuple(id(t) for t in tables)
    pack = tables[0].__dict__.get("_reach_pack")
    if pack is not None and pack.ids == ids and all(
            t.__dict__.get("_reach_pack") is pack for t in tables):
        return pack.reach
    reach = _build(tables)
    pack = _Pack(reach, ids)
    for i, t in enumerate(tables):
        _repoint(t, reach, i)
        object.__setattr__(t, "_reach_pack", pack)
    return reach


def _offsets(sizes):
    return np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)


def _level_flow(table):
    area, conv, alpha, part_k = table.flow_at_levels
    rows = np.zeros((area.size + 1, 6))
    rows[1:, 0], rows[1:, 1], rows[1:, 2], rows[1:, 3:] = area, conv, alpha, part_k
    return rows


def _build(tables) -> Reach:
    lts = [t.lookup for t in tables]
    nsub = np.array([lt.coef.shape[2] for lt in lts], dtype=np.int64)
    scalars = np.array([[t.thalweg, t.top, t.station[-1] - t.station[0], t.elevation[0],
                         t.elevation[-1]] for t in tables], dtype=float)
    c_off = _offsets([lt.coef.size for lt in lts])
    coef = np.empty(int(c_off[-1]))
    for i, t in enumerate(tables):         # copy table by table, each table's own copy freed at once
        own = t.lookup
        coef[c_off[i]:c_off[i + 1]] = own.coef.ravel()
        object.__setattr__(t, "lookup", LevelTable(own.start, coef[c_off[i]:c_off[i + 1]].reshape(own.coef.shape),
                                                   own.to_part))
    del lts
    return Reach(
        start=np.concatenate([t.lookup.start for t in tables]),
        s_off=_offsets([t.lookup.start.size for t in tables]),
        coef=coef,
        c_off=c_off,
        nsub=nsub,
        sub_part=np.concatenate([t.subdivision_part for t in tables]).astype(np.int64),
        p_off=_offsets(nsub),
        level_flow=np.concatenate([_level_flow(t) for t in tables]),
        scalars=scalars)


def _repoint(table, reach: Reach, i: int):
    """Let ``table.lookup`` use views of the pack (equal values; frees the table's copies)."""
    lt = table.lookup
    start = reach.start[reach.s_off[i]:reach.s_off[i + 1]]
    coef = reach.coef[reach.c_off[i]:reach.c_off[i + 1]].reshape(lt.coef.shape)
    object.__setattr__(table, "lookup", LevelTable(start, coef, lt.to_part))
