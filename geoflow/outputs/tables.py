"""The tables geoflow writes, as pandas frames: column contracts and the rows of each reach.

Pure pandas/numpy (no file I/O): :mod:`geoflow.outputs.files` writes what is built here.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

#: profile.csv: these columns first, in this order (a contract; extra columns follow).
PROFILE_COLUMNS = (
    "reach_id", "event", "section_id", "chainage_m", "discharge_m3s", "bed_m", "wse_m", "energy_m",
    "critical_wse_m", "velocity_ms", "froude", "alpha", "area_m2", "top_width_m", "friction_slope", "flags",
)
#: sections.gpkg layer "sections": required attributes.
SECTION_COLUMNS = ("reach_id", "section_id", "chainage_m", "left_bank_station_m", "right_bank_station_m", "flags")
#: inundation.gpkg layer "extent": required attributes.
EXTENT_COLUMNS = ("reach_id", "event")

#: Solver flags that describe the section rather than call for review; kept out of profile.csv.
INFO_ONLY_FLAGS = frozenset({"several_critical_depths"})


def profile_rows(geom, event: str, prof) -> pd.DataFrame:
    """profile.csv rows (contract columns first) for one reach and event.

    ``geom``: :class:`geoflow.records.ReachGeometry`; ``prof``: :class:`geoflow.hydraulics.Profile`.
    """
    n = len(geom.sections)
    flags = [";".join(k for k in dict.fromkeys(tuple(s.flags) + tuple(f)) if k not in INFO_ONLY_FLAGS)
             for s, f in zip(geom.sections, prof.flags)]
    df = pd.DataFrame({
        "reach_id": [geom.reach_id] * n,
        "event": [event] * n,
        "section_id": [s.section_id for s in geom.sections],
        "chainage_m": [s.chainage for s in geom.sections],
        "discharge_m3s": prof.discharge,
        "bed_m": [s.bed_elevation for s in geom.sections],
        "wse_m": prof.wse,
        "energy_m": prof.energy,
        "critical_wse_m": prof.critical_wse,
        "velocity_ms": prof.velocity,
        "froude": prof.froude,
        "alpha": prof.alpha,
        "area_m2": prof.area,
        "top_width_m": prof.top_width,
        "friction_slope": prof.friction_slope,
        "flags": flags,
    })
    df["regime"] = list(prof.regime)
    df["depth_m"] = df["wse_m"] - df["bed_m"]
    for j, name in enumerate(("left_overbank", "channel", "right_overbank")):
        df[f"q_{name}_m3s"] = prof.part_discharge[:, j]
    return df


def section_rows(geom, composite_n) -> list[dict]:
    """Attribute rows of sections.gpkg for one reach (geometry under ``"geometry"``).

    ``composite_n(section)`` -> (n left floodplain, n channel, n right floodplain).
    """
    rows = []
    for s in geom.sections:
        lb, rb = s.bank_stations
        n_lob, n_ch, n_rob = composite_n(s)
        rows.append({"reach_id": geom.reach_id, "section_id": s.section_id, "chainage_m": s.chainage,
                     "left_bank_station_m": lb, "right_bank_station_m": rb, "bed_m": s.bed_elevation,
                     "n_left_overbank": n_lob, "n_channel": n_ch, "n_right_overbank": n_rob,
                     "flags": ";".join(s.flags), "geometry": s.line})
    return rows


def empty_profile() -> pd.DataFrame:
    """A profile table with the contract columns and no rows."""
    return pd.DataFrame({c: np.array([], dtype=object) for c in PROFILE_COLUMNS})
