"""The tables geoflow writes, as pandas frames: column contracts and the rows of each reach.

Pure pandas/numpy (no file I/O): :mod:`geoflow.outputs.files` writes what is built here.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..constants import MIN_OUTLINE_PART_CELLS

#: profile.csv columns, grouped by meaning: where; the flow; levels and depths; velocity and its
#: measures; section properties; how the flow splits between channel and floodplains; flags.
#: All are written in this order (a contract; see CHANGELOG.md for changes).
PROFILE_COLUMNS = (
    "reach_id", "event", "roughness_case", "section_id", "chainage_m",
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
    "roughness_case": "Manning's n used: normal (the class n, calibrated if [calibration] is given), low (n_low) "
                      "or high (n_high) of every class that gives them",
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
EXTENT_COLUMNS = ("reach_id", "event", "roughness_case")
#: calibration.csv: one row per observed level (mark).
CALIBRATION_COLUMNS = ("reach_id", "mark", "event", "chainage_m", "observed_wse_m", "computed_wse_m", "residual_m")
CALIBRATION_MEANING = {
    "reach_id": "reach the mark belongs to (nearest centreline)", "mark": "feature number in the observations layer, "
    "from 0", "event": "event that left the mark", "chainage_m": "where the mark projects onto the centreline, m",
    "observed_wse_m": "observed level, m", "computed_wse_m": "level computed with the calibrated n, linear in "
    "chainage between the sections either side, m", "residual_m": "computed minus observed, m",
}
#: rating_curves.csv: one row per section and discharge (discharges ascending within a section).
RATING_COLUMNS = ("reach_id", "section_id", "chainage_m", "discharge_m3s", "wse_m", "depth_m", "area_m2",
                  "top_width_m", "velocity_ms", "froude", "regime", "backwater_length_m", "flags")
RATING_MEANING = {
    "reach_id": "reach id", "section_id": "cross-section number, 0 at the upstream end",
    "chainage_m": "distance along the centreline from its upstream end, m",
    "discharge_m3s": "discharge of the rating (upstream end, constant along the reach), m3/s",
    "wse_m": "water-surface elevation, m", "depth_m": "water-surface elevation minus the lowest ground, m",
    "area_m2": "flow area, m2", "top_width_m": "water-surface width, m", "velocity_ms": "mean velocity Q/A, m/s",
    "froude": "Froude number", "regime": "subcritical, supercritical or critical",
    "backwater_length_m": "0.7 y_n / S0 at the controlling boundary for this discharge (inf where the bed does "
                          "not fall), m; sections closer to the boundary are flagged boundary_controlled",
    "flags": "';'-separated flag words: solver flags, boundary_controlled, not_rising",
}

#: structures.csv: one row per structure x event x roughness case (a contract; extra columns follow).
STRUCTURE_COLUMNS = ("reach_id", "structure_id", "event", "roughness_case", "discharge_m3s", "headwater_m",
                     "tailwater_m", "control", "q_over_crest_m3s", "flags")
STRUCTURE_MEANING = {
    "reach_id": "reach the structure is on", "structure_id": "the structure's id ([[structures]] id)",
    "event": "event name", "roughness_case": "Manning's n used (as in profile.csv)",
    "discharge_m3s": "discharge through and over the structure, m3/s",
    "headwater_m": "water level at the structure's upstream face in the profile, m: the structure's headwater, or "
                   "critical depth there where that is higher (flag headwater_critical); in the supercritical and "
                   "mixed regimes the supercritical level where the flow arrives supercritical",
    "tailwater_m": "water level at the structure's downstream face, m (the profile's; critical depth there in the "
                   "supercritical regime)",
    "control": "what sets the headwater: inlet or outlet (culvert barrel), weir, free_surface (bridge low flow), "
               "pressure (bridge deck reached), overtopping (part of the flow passes over the road or deck)",
    "q_over_crest_m3s": "flow over the road crest or the bridge deck, m3/s",
    "flags": "';'-separated flag words (see the README flag table)",
    "type": "culvert, weir or bridge", "chainage_m": "the structure's chainage, m",
    "q_through_m3s": "flow through the barrels or the bridge opening (over the crest for a weir), m3/s",
    "structure_headwater_m": "headwater the structure's equations give for this discharge and tailwater, m",
}

#: What each raster kind holds: band description and unit, carried in the file's own metadata.
RASTER_MEANING = {
    "wse": ("water-surface elevation", "m"),
    "depth": ("water depth above the ground (water-surface elevation minus DEM)", "m"),
    "velocity": ("depth-averaged velocity estimate, Manning strip method (see README)", "m/s"),
}
#: What each GeoPackage layer holds: stored as the layer's description (gpkg_contents) and metadata.
LAYER_MEANING = {
    "sections": "cross-section lines of geoflow, one per section; attributes: reach_id, section_id, chainage_m "
                "(m from the upstream end), channel_edge_left_m / channel_edge_right_m (m from the left end, "
                "looking downstream), bed_m (m), Manning's n per part (s/m^(1/3)), flags, wse_<event>_m (m)",
    "extent": "flood outlines of geoflow, one multipolygon per reach and event (parts smaller than "
              f"{MIN_OUTLINE_PART_CELLS} output cells left out); attributes reach_id, event, area_m2 (m2)",
}


def raster_metadata(kind: str, caution: str, **facts) -> tuple[dict, str, str]:
    """(dataset tags, band description, band unit) of a raster of ``kind`` (``RASTER_MEANING``).

    The tags carry the quantity, its unit, the caution and any further ``facts`` (reach id,
    event, program version ...), so a file passed on alone still says what it holds.
    """
    what, unit = RASTER_MEANING[kind]
    tags = {"quantity": what, "units": unit, "caution": caution, "producer": "geoflow"}
    tags.update({k: str(v) for k, v in facts.items() if v is not None})
    return tags, f"{what} ({unit})", unit

#: Solver flags that describe the section rather than call for review; kept out of profile.csv.
INFO_ONLY_FLAGS = frozenset({"several_critical_depths"})


def profile_rows(geom, event: str, prof, case: str = "normal") -> pd.DataFrame:
    """profile.csv rows (contract columns first) for one reach, event and roughness case.

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
        "roughness_case": [case] * n,
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


def structure_rows(geom, event: str, prof, case: str = "normal") -> pd.DataFrame:
    """structures.csv rows (contract columns first) of one reach, event and roughness case.

    ``prof.structures``: the :class:`geoflow.hydraulics.StructureLevel` of each structure;
    ``geom.structures`` gives their type and chainage."""
    places = {p.structure_id: p for p in geom.structures}
    rows = [{"reach_id": geom.reach_id, "structure_id": s.name, "event": event, "roughness_case": case,
             "discharge_m3s": s.discharge, "headwater_m": s.headwater_wse, "tailwater_m": s.tailwater_wse,
             "control": s.control, "q_over_crest_m3s": s.q_over_crest, "flags": ";".join(s.flags),
             "type": places[s.name].kind, "chainage_m": places[s.name].chainage,
             "q_through_m3s": s.q_through, "structure_headwater_m": s.structure_headwater_wse}
            for s in prof.structures]
    return pd.DataFrame(rows) if rows else empty_structures()


def empty_structures() -> pd.DataFrame:
    """A structures table with the contract columns and no rows."""
    return pd.DataFrame({c: np.array([], dtype=object) for c in STRUCTURE_COLUMNS})


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
                     "bed_source": s.bed_source, "dem_bed_m": float(np.min(s.dem_ground)),
                     "n_floodplain_left": n_left, "n_channel": n_ch, "n_floodplain_right": n_right,
                     "storage_m": storage, "flags": ";".join(s.flags), "geometry": s.line})
    return rows


def empty_profile() -> pd.DataFrame:
    """A profile table with the contract columns and no rows."""
    return pd.DataFrame({c: np.array([], dtype=object) for c in PROFILE_COLUMNS})
