"""Rating curves at every section of a reach: the reach solved for a list of discharges at once.

Each discharge of ``[rating_curves] discharges`` is solved like an event (constant along the
reach: no flow changes), all of them together on one set of section tables (vectorised across
discharges, :func:`geoflow.batch.reach.solve_reach`) with the reach's calibrated n, the config's
regime and its downstream boundary (or ``[rating_curves] downstream``). Steady flow: no hysteresis.

Near the boundary the rating reflects the boundary assumption, not the section. The distance over
which a boundary disturbance decays upstream in subcritical flow is taken as the backwater length
L = 0.7 y_n / S0 (Samuels 1989, Proc. ICE Part 2, 87:571, from memory), with y_n the normal depth at
the boundary section for each discharge and S0 the reach's mean bed slope (least-squares line of the
lowest ground against chainage); with S0 <= 0 the whole reach is boundary controlled. Rows within L
of the controlling end (downstream; upstream in the supercritical regime) are flagged
``boundary_controlled``; a level that does not rise above the level at the next smaller discharge is
flagged ``not_rising``.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from ..config import Config, Event
from ..errors import GeoflowError, HydraulicsError
from ..hydraulics import Boundary
from ..outputs import INFO_ONLY_FLAGS, RATING_COLUMNS
from . import reach

SAMUELS_FACTOR = 0.7       # L = 0.7 y_n / S0 (Samuels 1989, from memory)
MIN_SLOPE = 1e-6           # bed slopes at or below this give an unbounded backwater length
RISE_TOLERANCE = 1e-6      # m: a level must rise by more than this to count as rising


def backwater_length(normal_depth, bed_slope: float) -> np.ndarray:
    """L = 0.7 y_n / S0 (m) for normal depths ``normal_depth`` (m); inf where S0 <= MIN_SLOPE."""
    y = np.asarray(normal_depth, dtype=float)
    if not bed_slope > MIN_SLOPE:
        return np.full(y.shape, np.inf)
    return SAMUELS_FACTOR * y / bed_slope


def mean_bed_slope(chainage, bed) -> float:
    """Mean bed slope (m/m, positive falling downstream): least-squares line of bed against chainage."""
    ch = np.asarray(chainage, dtype=float)
    if ch.size < 2 or np.ptp(ch) <= 0:
        return 0.0
    return float(-np.polyfit(ch, np.asarray(bed, dtype=float), 1)[0])


def _boundary_depths(cfg, geom, factors, discharges, slope, end: int) -> np.ndarray:
    """Normal depth (m) at the controlling end section for each discharge (nan when there is none)."""
    if not slope > MIN_SLOPE:
        return np.full(discharges.size, np.nan)
    one = dataclasses.replace(geom, sections=(geom.sections[end],), lengths=np.zeros((0, 3)))
    table = reach.build_tables(one, cfg, factors=factors)[0]
    try:
        return Boundary.normal_depth(slope).wse_at(table, discharges, None) - table.thalweg
    except GeoflowError:
        return np.full(discharges.size, np.nan)


def rating_rows(cfg: Config, geom, factors: dict | None = None) -> pd.DataFrame:
    """rating_curves.csv rows of one reach: per section, one row per discharge (ascending)."""
    rc = cfg.rating_curves
    q = np.asarray(rc.discharges, dtype=float)
    events = [Event(name=f"rating_{k}", discharge=float(v)) for k, v in enumerate(q)]
    profiles = reach.solve_reach(cfg, geom, events, None, factors=factors, downstream=rc.downstream)
    for ev, v in zip(events, q):
        if isinstance(profiles[ev.name], GeoflowError):
            raise HydraulicsError(f"reach {geom.reach_id!r}: rating curve at {v:g} m3/s failed: "
                                  f"{str(profiles[ev.name]).split(': ', 2)[-1]}")
    profs = [profiles[ev.name] for ev in events]
    wse = np.stack([np.asarray(p.wse, dtype=float) for p in profs])            # (K, N)
    chainage = np.array([s.chainage for s in geom.sections])
    bed = np.array([s.bed_elevation for s in geom.sections])
    upstream_control = cfg.boundary.regime == "supercritical"
    end = 0 if upstream_control else len(geom.sections) - 1
    slope = mean_bed_slope(chainage, bed)
    length = backwater_length(_boundary_depths(cfg, geom, factors, q, slope, end), slope)
    length = np.where(np.isnan(length), np.inf, length)
    distance = np.abs(chainage - chainage[end])
    near = distance[None, :] < length[:, None]                                 # (K, N)
    flat = np.vstack([np.zeros((1, wse.shape[1]), dtype=bool), np.diff(wse, axis=0) <= RISE_TOLERANCE])
    flags = [[";".join([w for w in p.flags[i] if w not in INFO_ONLY_FLAGS]
                       + (["boundary_controlled"] if near[k, i] else []) + (["not_rising"] if flat[k, i] else []))
              for i in range(wse.shape[1])] for k, p in enumerate(profs)]
    n, k = wse.shape[1], q.size
    df = pd.DataFrame({
        "reach_id": geom.reach_id, "section_id": np.tile([s.section_id for s in geom.sections], k),
        "chainage_m": np.tile(chainage, k), "discharge_m3s": np.repeat(q, n), "wse_m": wse.ravel(),
        "depth_m": (wse - bed[None, :]).ravel(),
        "area_m2": np.concatenate([p.area for p in profs]), "top_width_m": np.concatenate([p.top_width for p in profs]),
        "velocity_ms": np.concatenate([p.velocity for p in profs]),
        "froude": np.concatenate([p.froude for p in profs]),
        "regime": np.concatenate([np.asarray(p.regime) for p in profs]),
        "backwater_length_m": np.repeat(length, n), "flags": [f for row in flags for f in row]},
        columns=list(RATING_COLUMNS))
    return df.sort_values(["section_id", "discharge_m3s"], kind="stable").reset_index(drop=True)
