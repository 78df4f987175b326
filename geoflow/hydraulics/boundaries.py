"""Boundary conditions of a steady profile and normal depth.

A boundary fixes the water-surface elevation (WSE) at the first section of a march: the most
downstream section for a subcritical run, the most upstream one for a supercritical run.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import SectionTable, flow_state
from geoflow.hydraulics.roots import bracketed_root

KINDS = ("normal_depth", "stage", "critical", "rating")


@dataclass(frozen=True, eq=False)
class Boundary:
    """One boundary condition; build it with a constructor, e.g. ``Boundary.stage(12.3)``."""

    kind: str
    slope: float | None = None
    wse: np.ndarray | None = None
    rating_discharge: np.ndarray | None = None
    rating_stage: np.ndarray | None = None

    @classmethod
    def normal_depth(cls, slope: float) -> "Boundary":
        """WSE at normal depth for the energy slope ``slope`` (m/m, > 0): Q = K(h) sqrt(S)."""
        s = float(slope)
        if not (np.isfinite(s) and s > 0):
            raise HydraulicsError(f"normal-depth boundary: slope must be > 0 (got {slope!r})")
        return cls("normal_depth", slope=s)

    @classmethod
    def stage(cls, wse) -> "Boundary":
        """A known WSE (m): a scalar, or one value per event for ``solve_events``."""
        w = np.atleast_1d(np.asarray(wse, dtype=float))
        if not np.all(np.isfinite(w)):
            raise HydraulicsError(f"stage boundary: WSE must be finite (got {wse!r})")
        return cls("stage", wse=w)

    @classmethod
    def critical(cls) -> "Boundary":
        """Critical depth (minimum specific energy) at the boundary section."""
        return cls("critical")

    @classmethod
    def rating(cls, discharge, stage) -> "Boundary":
        """A stage-discharge table: WSE interpolated linearly in discharge (ascending)."""
        q = np.asarray(discharge, dtype=float).ravel()
        h = np.asarray(stage, dtype=float).ravel()
        if q.size < 2 or q.size != h.size or not np.all(np.isfinite(q) & np.isfinite(h)):
            raise HydraulicsError("rating boundary: discharge and stage need the same length >= 2 "
                                  "and finite values")
        if np.any(np.diff(q) <= 0):
            raise HydraulicsError("rating boundary: discharge values must increase strictly")
        return cls("rating", rating_discharge=q, rating_stage=h)

    def wse_at(self, table: SectionTable, discharge, critical_wse) -> np.ndarray:
        """Boundary WSE at ``table`` for each discharge (E,); ``critical_wse`` (E,) is used by
        the critical kind. Raises HydraulicsError when the boundary cannot apply."""
        q = np.atleast_1d(np.asarray(discharge, dtype=float))
        if self.kind == "critical":
            return np.array(critical_wse, dtype=float)
        if self.kind == "normal_depth":
            assert self.slope is not None            # set by Boundary.normal_depth
            return normal_wse(table, q, self.slope)
        if self.kind == "stage":
            assert self.wse is not None              # set by Boundary.stage
            if self.wse.size not in (1, q.size):
                raise HydraulicsError(f"stage boundary at section {table.name!r}: give one WSE or "
                                      f"one per event ({q.size}), got {self.wse.size}")
            w = np.broadcast_to(self.wse, q.shape).astype(float)
        else:
            assert self.rating_discharge is not None and self.rating_stage is not None
            lo, hi = self.rating_discharge[0], self.rating_discharge[-1]
            if np.any((q < lo) | (q > hi)):
                raise HydraulicsError(f"rating boundary at section {table.name!r}: discharge "
                                      f"{q.min():g}-{q.max():g} m3/s is outside the table "
                                      f"({lo:g}-{hi:g} m3/s); extend the rating")
            w = np.interp(q, self.rating_discharge, self.rating_stage)
        if np.any(w <= table.thalweg):
            raise HydraulicsError(f"{self.kind} boundary at section {table.name!r}: WSE "
                                  f"{w.min():.3f} m is at or below the thalweg "
                                  f"{table.thalweg:.3f} m; raise the boundary level")
        return w


def normal_wse(table: SectionTable, discharge, slope: float, xtol: float = 1e-9) -> np.ndarray:
    """WSE where Manning's uniform-flow equation Q = K(h) sqrt(S) holds, per discharge (E,).

    K is the total conveyance of the subdivided section; the root is bracketed on the table
    levels (extended upward with walls when needed) and refined by regula falsi."""
    q = np.atleast_1d(np.asarray(discharge, dtype=float))
    root_s = np.sqrt(slope)
    relief = max(table.top - table.thalweg, 1.0)
    far = table.levels[-1] + relief * 2.0 ** np.arange(-3, 20)
    lv = np.concatenate([table.levels, far])
    cap = np.concatenate([table.flow_at_levels[1], flow_state(table, far)[1]]) * root_s
    f = cap[None, :] - q[:, None]
    above = f >= 0
    if not np.all(above[:, -1]):
        raise HydraulicsError(f"section {table.name!r}: no normal depth for {q.max():g} m3/s "
                              f"at slope {slope:g}; check n and the section")
    j = np.maximum(np.argmax(above, axis=1), 1)
    ev = np.arange(q.size)

    def fun(x, idx):
        return flow_state(table, x)[1] * root_s - q[idx]

    x, _ = bracketed_root(fun, lv[j - 1], lv[j], f[ev, j - 1], f[ev, j], xtol=xtol,
                          ftol=1e-9 * q.max())
    return x
