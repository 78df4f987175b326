"""The unit of work a worker runs: one reach of one config, for a list of events.

A task receives the config path (and its expected hash) and a reach id, never arrays, and
opens its own inputs, so it runs the same in this process, in a local process pool or on a
Dask worker (which must see the same file system). It writes the reach's rasters, report and
part files (atomically) and returns a small dict of plain values for the manifest.
"""
from __future__ import annotations

import functools
import time
import traceback
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from .. import outputs, report
from ..config import Config, load_config
from ..constants import CAUTION
from ..errors import ConfigError, GeoflowError, HydraulicsError
from ..mapping import VelocityInputs, write_reach_maps
from ..naming import safe_name
from ..roughness import composite_n_by_part
from . import reach
from .inputs import Inputs, open_inputs
from .manifest import part_paths


@functools.lru_cache(maxsize=4)
def _config(path: str, sha256: str) -> Config:
    cfg = load_config(path)
    if cfg.sha256 != sha256:
        raise ConfigError(f"{path}: the config changed while the run was going on; run again")
    return cfg


@functools.lru_cache(maxsize=4)
def _inputs(path: str, sha256: str) -> Inputs:
    return open_inputs(_config(path, sha256))


def compute_reach(config_path: str, config_sha256: str, reach_id: str, events: list[str]) -> dict:
    """Compute and write one reach for the given events; never raises for a GeoflowError."""
    t0 = time.perf_counter()
    info = {"reach_id": reach_id, "status": "failed", "error": None, "events": {}, "warnings": [],
            "sections": 0, "timings_s": {}}
    try:
        cfg = _config(config_path, config_sha256)
        inputs = _inputs(config_path, config_sha256)
        geom = reach.build_geometry(cfg, inputs, reach_id, dict(inputs.reaches)[reach_id])
        info["sections"], info["warnings"] = len(geom.sections), list(geom.warnings)
        _write_sections_part(cfg, geom)
        t1 = time.perf_counter()
        todo = [e for e in cfg.events if e.name in events]
        profiles = reach.solve_reach(cfg, geom, todo, _junction_wse(cfg, inputs, geom, todo))
        info["timings_s"]["hydraulics"] = time.perf_counter() - t1
        for ev in todo:
            info["events"][ev.name] = _compute_event(cfg, inputs, geom, profiles[ev.name], ev)
        _write_reach_report(cfg, geom)
        info["timings_s"].update(sections=t1 - t0, total=time.perf_counter() - t0)
        failed = [e for e, u in info["events"].items() if u["status"] != "complete"]
        info["status"] = "failed" if failed else "complete"
        info["error"] = "; ".join(info["events"][e]["error"] for e in failed) or None
    except GeoflowError as exc:
        info["error"] = str(exc)
    except Exception as exc:  # a bug: keep the batch going, keep the evidence
        info["error"] = f"internal error ({type(exc).__name__}: {exc}); please report it with run.log"
        info["traceback"] = traceback.format_exc()
    for ev in events:
        info["events"].setdefault(ev, {"status": "failed", "error": info["error"]})
    return info


def _junction_wse(cfg: Config, inputs, geom, events) -> dict | None:
    """WSE per event where this reach joins the reach named by its junction boundary (or None)."""
    down, _ = cfg.boundary.for_reach(geom.reach_id)
    if down.type != "junction":
        return None
    prof = read_profile_parts(cfg, down.reach)
    if prof is None:
        raise HydraulicsError(f"reach {geom.reach_id!r}: junction reach {down.reach!r} has no results; it failed "
                              "or was not computed, so this reach cannot be either")
    lines = dict(inputs.reaches)
    try:
        return reach.junction_wse_from(lines[down.reach], prof, geom.centreline, [e.name for e in events],
                                          down.reach)
    except HydraulicsError as exc:
        raise HydraulicsError(f"reach {geom.reach_id!r}: {exc}") from None


def _compute_event(cfg: Config, inputs, geom, prof, ev) -> dict:
    """Map and write one event of a reach whose profile is solved (or failed)."""
    if isinstance(prof, GeoflowError):
        return {"status": "failed", "error": str(prof)}
    t1 = time.perf_counter()
    try:
        rows = outputs.profile_rows(geom, ev.name, prof)
        files = _write_maps(cfg, inputs, geom, ev.name, prof)
        parts = part_paths(cfg.run.output_dir, safe_name(geom.reach_id), safe_name(ev.name))
        outputs.write_profile_csv(parts["profile"], rows)
        t2 = time.perf_counter()
    except GeoflowError as exc:
        return {"status": "failed", "error": str(exc)}
    flagged = int((rows["flags"].str.len() > 0).sum())
    return {"status": "complete", "error": None, "files": [str(f) for f in files],
            "timings_s": {"mapping_and_writing": t2 - t1},
            "max_depth_m": float(np.nanmax(rows["depth_m"])), "flagged_sections": flagged}


def _write_maps(cfg: Config, inputs, geom, event: str, prof) -> list[Path]:
    """Rasters (block-wise COGs) and the extent part of one reach and event."""
    kinds = [k for k in ("wse", "depth", "velocity") if k in cfg.mapping.outputs]
    parts = part_paths(cfg.run.output_dir, safe_name(geom.reach_id), safe_name(event))
    if not kinds and "extent" not in cfg.mapping.outputs:
        return []
    rdir = cfg.run.output_dir / "rasters" / safe_name(geom.reach_id)
    paths = {k: rdir / f"{safe_name(event)}_{k}.tif" for k in kinds}
    velocity = _velocity_inputs(cfg, inputs, prof) if "velocity" in kinds else None
    m = write_reach_maps(inputs.dem, geom, np.asarray(prof.wse), paths, cell_size=cfg.mapping.cell_size,
                         velocity=velocity)
    ext = gpd.GeoDataFrame({"reach_id": [geom.reach_id] * len(m.extent), "event": [event] * len(m.extent),
                            "area_m2": [p.area for p in m.extent]}, geometry=list(m.extent),
                           crs=inputs.dem.crs.to_wkt())
    return list(paths.values()) + [outputs.write_extent_gpkg(parts["extent"], ext)]


def _velocity_inputs(cfg: Config, inputs, prof) -> VelocityInputs:
    """Velocity raster inputs: the profile's friction slope and each land-cover polygon's base n."""
    table = cfg.roughness.n_table()
    fallback = np.nan if cfg.roughness.default_n is None else cfg.roughness.default_n
    n = np.array([table.get(str(c), fallback) for c in inputs.cover.classes], dtype=float)
    return VelocityInputs(friction_slope=np.asarray(prof.friction_slope, dtype=float),
                          landcover=(np.asarray(inputs.cover.geometries), n), default_n=cfg.roughness.default_n)


def _write_sections_part(cfg: Config, geom) -> None:
    rows = outputs.section_rows(geom, composite_n_by_part)
    gdf = gpd.GeoDataFrame(rows, geometry="geometry", crs=_crs_wkt(cfg))
    outputs.write_sections_gpkg(part_paths(cfg.run.output_dir, safe_name(geom.reach_id))["sections"], gdf)


def _crs_wkt(cfg: Config) -> str:
    return _inputs(str(cfg.path), cfg.sha256).dem.crs.to_wkt()


def read_profile_parts(cfg: Config, reach_id: str) -> pd.DataFrame | None:
    """All events' profile rows of a reach found on disk, in config event order."""
    frames = []
    for ev in cfg.events:
        p = part_paths(cfg.run.output_dir, safe_name(reach_id), safe_name(ev.name))["profile"]
        if p.is_file():
            frames.append(pd.read_csv(p, keep_default_na=False, na_values=[""],
                                      dtype={"reach_id": str, "event": str, "flags": str}))
    return pd.concat(frames, ignore_index=True) if frames else None


def _write_reach_report(cfg: Config, geom) -> None:
    if "report" not in cfg.mapping.outputs:
        return
    prof = read_profile_parts(cfg, geom.reach_id)
    if prof is None:
        return
    prof["flags"] = prof["flags"].fillna("")
    events = [e.name for e in cfg.events if e.name in set(prof["event"])]
    report.write_report(cfg.run.output_dir / "report" / f"{safe_name(geom.reach_id)}.html", geom.reach_id, geom,
                        prof, events, caution=CAUTION)
