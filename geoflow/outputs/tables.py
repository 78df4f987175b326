"""The tables geoflow writes, as pandas frames: column contracts and the rows of each reach.

Pure pandas/numpy (no file I/O): :mod:`geoflow.outputs.files` writes what is built here.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

#: profile.csv columns, grouped by meaning: where; the flow; levels and depths; velocity and its
#: measures; section properties; how the flow splits between channel and floodplains; flags.
#: All are written in this order (a contract; see CHANGELOG.md for changes).
PROFILE_COLUMNS = (
    "reach_id", "event", "section_id", "chainage_m",
    "discharge_m3s", "regime",
    "bed_m", "wse_m", "depth_m", "energy_m", "critical_wse_m", "critical_depth_m",
    "velocity_ms", "froude", "alpha",
    "area_m2", "top_width_m", "friction_slope",
    "q_channel_m3s", "q_floodplain_left_m3s", "q_floodplain_right_m3s",
    "spill_left_m", "spill_right_m",
    "flags",
)
#: what each profile.csv column holds (units in the name: _m metres, _m2, _m3s m3/s, _ms m/s)
PROFILE_MEANING = {
    "reach_id": "reach id (from the centreline layer)", "event": "event name",
    "section_id": "cross-section number, 0 at the upstream end",
    "chainage_m": "distance along the centreline from its upstream end, m",
    "discharge_m3s": "discharge through the section, m3/s", "regime": "subcritical, supercritical or critical",
    "bed_m": "lowest ground of the section, m", "wse_m": "water-surface elevation, m",
    "depth_m": "water-surface elevation minus the lowest ground, m", "energy_m": "energy grade elevation, m",
    "critical_wse_m": "water-surface elevation at critical depth, m",
    "critical_depth_m": "critical depth above the lowest ground, m",
    "velocity_ms": "mean velocity Q/A, m/s", "froude": "Froude number V / sqrt(g A / T)",
    "alpha": "energy (velocity-head) coefficient of the subdivided section",
    "area_m2": "flow area, m2", "top_width_m": "water-surface width, m",
    "friction_slope": "friction slope (Q/K)^2, m/m",
    "q_channel_m3s": "discharge in the channel, m3/s", "q_floodplain_left_m3s": "discharge on the left floodplain, m3/s",
    "q_floodplain_right_m3s": "discharge on the right floodplain, m3/s",
    "spill_left_m": "height of the water surface above the left end of the section where it spills there, m "
                    "(empty where it does not)",
    "spill_right_m": "height of the water surface above the right end of the section where it spills there, m",
    "flags": "';'-separated flag words (see the README flag table)",
}
#: Words naming the end a spill goes over, appended where the water stands above that end.
SPILL_WORDS = ("spills_left", "spills_right")
#: Words saying that an end of a section meets another reach's area (a spill there is expected).
OTHER_REACH_WORDS = ("left_end_at_other_reach", "right_end_at_other_reach")

#: sections.gpkg layer "sections": required attributes.
SECTION_COLUMNS = ("reach_id", "section_id", "chainage_m", "channel_edge_left_m", "channel_edge_right_m", "flags")
#: inundation.gpkg layer "extent": required attributes.
EXTENT_COLUMNS = ("reach_id", "event")

#: Solver flags that describe the section rather than call for review; kept out of profile.csv.
INFO_ONLY_FLAGS = frozenset({"several_critical_depths"})


def profile_rows(geom, event: str, prof) -> pd.DataFrame:
    """profile.csv rows (contract columns first) for one reach and event.

    ``geom``: :class:`geoflow.records.ReachGeometry`; ``prof``: :class:`geoflow.hydraulics.Profile`.
    """
    n = len(geom.sections)
    spill = spill_heights(geom, prof.wse)
    flags = [";".join(k for k in dict.fromkeys(tuple(s.flags) + tuple(f) + _spill_words(h)) if k not in INFO_ONLY_FLAGS)
             for s, f, h in zip(geom.sections, prof.flags, spill)]
    bed = np.array([s.bed_elevation for s in geom.sections])
    q = np.asarray(prof.part_discharge)
    df = pd.DataFrame({
        "reach_id": [geom.reach_id] * n,
        "event": [event] * n,
        "section_id": [s.section_id for s in geom.sections],
        "chainage_m": [s.chainage for s in geom.sections],
        "discharge_m3s": prof.discharge,
        "regime": list(prof.regime),
        "bed_m": bed,
        "wse_m": prof.wse,
        "depth_m": np.asarray(prof.wse) - bed,
        "energy_m": prof.energy,
        "critical_wse_m": prof.critical_wse,
        "critical_depth_m": np.asarray(prof.critical_wse) - bed,
        "velocity_ms": prof.velocity,
        "froude": prof.froude,
        "alpha": prof.alpha,
        "area_m2": prof.area,
        "top_width_m": prof.top_width,
        "friction_slope": prof.friction_slope,
        "q_channel_m3s": q[:, 1],
        "q_floodplain_left_m3s": q[:, 0],
        "q_floodplain_right_m3s": q[:, 2],
        "spill_left_m": spill[:, 0],
        "spill_right_m": spill[:, 1],
        "flags": flags,
    })
    return df


def spill_heights(geom, wse) -> np.ndarray:
    """(N, 2) height (m) of the water surface above the left / right end of each section; NaN where
    the end is above the water (no spill there)."""
    ends = np.array([[s.elevation[0], s.elevation[-1]] for s in geom.sections], dtype=float)
    h = np.asarray(wse, dtype=float)[:, None] - ends
    return np.where(h > 0, h, np.nan)


def _spill_words(heights) -> tuple[str, ...]:
    return tuple(w for w, h in zip(SPILL_WORDS, heights) if np.isfinite(h))


def section_rows(geom, composite_n) -> list[dict]:
    """Attribute rows of sections.gpkg for one reach (geometry under ``"geometry"``).

    ``composite_n(section)`` -> (n left floodplain, n channel, n right floodplain).
    """
    rows = []
    for s in geom.sections:
        lb, rb = s.channel_edges
        n_left, n_ch, n_right = composite_n(s)
        storage = 0.0 if s.storage is None else float(np.sum(np.diff(s.station)[np.asarray(s.storage)]))
        rows.append({"reach_id": geom.reach_id, "section_id": s.section_id, "chainage_m": s.chainage,
                     "channel_edge_left_m": lb, "channel_edge_right_m": rb, "bed_m": s.bed_elevation,
                     "n_floodplain_left": n_left, "n_channel": n_ch, "n_floodplain_right": n_right,
                     "storage_m": storage, "flags": ";".join(s.flags), "geometry": s.line})
    return rows


def empty_profile() -> pd.DataFrame:
    """A profile table with the contract columns and no rows."""
    return pd.DataFrame({c: np.array([], dtype=object) for c in PROFILE_COLUMNS})
