"""Build the run-level outputs from the per-reach part files of this run (and of units it reused).

Order is the centreline layer's reach order and the config's event order, so the same inputs
give byte-identical tables whichever engine computed the reaches and in whatever order.
"""
from __future__ import annotations

import concurrent.futures as cf
import os
import time

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
import shapely

from .. import __version__, outputs
from ..config import Config
from ..constants import CAUTION
from ..naming import safe_name
from . import tasks
from .layout import MANIFEST_NAME, relative_name, unrecorded_files
from .manifest import Manifest, calibration_entry, part_paths, unit_key
from .tasks import INDEX_NAME, read_profile_parts


def finish(cfg: Config, inputs, man: Manifest, result) -> None:
    """Write profile.csv, sections.gpkg, inundation.gpkg and the final manifest for one config."""
    out = cfg.run.output_dir
    units = man.data["units"]
    order = [rid for rid, _ in inputs.reaches] + list(inputs.unusable)
    done = {rid: [e.name for e in cfg.events if units.get(unit_key(rid, e.name), {}).get("status") == "complete"]
            for rid in order}
    profiles = []
    for rid in order:
        prof = read_profile_parts(cfg, rid) if done[rid] else None
        if prof is not None:
            profiles.append(prof[prof["event"].isin(done[rid])])
    profile = pd.concat(profiles, ignore_index=True) if profiles else outputs.empty_profile()
    profile["flags"] = profile["flags"].fillna("") if len(profile) else profile["flags"]
    crs = inputs.dem.crs.to_wkt()
    result.paths["profile"] = outputs.write_profile_csv(out / "profile.csv", profile)
    sections = _sections(cfg, order, profile, crs)
    result.paths["sections"] = outputs.write_sections_gpkg(out / "sections.gpkg", sections)
    man.data["sections_crossing_other_reaches"] = cross_reach_crossings(sections)
    extents = _extents(cfg, done, crs) if "extent" in cfg.mapping.outputs else None
    if extents is not None:
        result.paths["extent"] = outputs.write_extent_gpkg(out / "inundation.gpkg", extents)
    result.paths.update(_mosaics(cfg, done))
    result.paths.update(_spreads(cfg, done))
    result.paths.update(_reach_tables(cfg, order, man))
    if cfg.structures:
        result.paths["structures"] = outputs.write_structures_csv(out / "structures.csv", _structures(cfg, done))
    if cfg.calibration is not None:
        man.data["calibration"] = calibration_entry(cfg, man.data["reaches"])
    if "report" in cfg.mapping.outputs:
        t0 = time.perf_counter()
        result.paths["report_index"] = _write_index(cfg, inputs, man, result, profile, sections, extents)
        man.data["report_index_s"] = round(time.perf_counter() - t0, 3)
    man.data["files"] = sorted(relative_name(out, f) for f in result.paths.values())
    recorded = man.recorded_files() | {MANIFEST_NAME}
    man.data["stale_files"] = unrecorded_files(out, recorded)
    man.data["finished"] = time.strftime("%Y-%m-%dT%H:%M:%S%z")
    man.data["elapsed_s"] = round(result.elapsed_s, 3)
    man.data["failed_reaches"] = sorted(r for r, v in man.data["reaches"].items() if v.get("status") != "complete")
    man.save()
    result.paths["manifest"] = man.path
    result.profile = profile
    result.reaches = {rid: dict(man.data["reaches"].get(rid, {"status": "failed", "error": "not computed"}),
                                events={e.name: units[unit_key(rid, e.name)] for e in cfg.events
                                        if unit_key(rid, e.name) in units})
                      for rid in order}


def _write_index(cfg: Config, inputs, man: Manifest, result, profile, sections, extents):
    """report/index.html: every reach and event with status, flags and links (see geoflow.report.index).

    Drawn by the run's report process when it has one (matplotlib stays out of this process).
    """
    out = cfg.run.output_dir
    rdir = out / "report"
    pages = {rid: f"{safe_name(rid)}.html" for rid in man.data["reaches"] if (rdir / f"{safe_name(rid)}.html").is_file()}
    outlines = {} if extents is None else {(str(r), str(e)): g for r, e, g in
                                           zip(extents["reach_id"], extents["event"], extents.geometry)}
    lines = {(str(r), int(s)): g for r, s, g in zip(sections["reach_id"], sections["section_id"], sections.geometry)}
    files = [(relative_name(out, p), os.path.relpath(p, rdir)) for k, p in sorted(result.paths.items())
             if k != "report_index"] + [(MANIFEST_NAME, os.path.relpath(out / MANIFEST_NAME, rdir))]
    order = [rid for rid, _ in inputs.reaches] + list(inputs.unusable)
    parts = dict(events=[e.name for e in cfg.events],
                 reaches={rid: man.data["reaches"].get(rid, {"status": "failed"}) for rid in order},
                 units=man.data["units"], profile=profile, outlines=outlines,
                 centrelines=inputs.lines_by_id(), section_lines=lines, pages=pages, files=files,
                 crossings=list(man.data.get("sections_crossing_other_reaches", [])))
    path = rdir / INDEX_NAME
    if tasks.REPORTS is not None:
        try:
            return tasks.REPORTS.submit_index(path, str(cfg.path), cfg.sha256, inputs.dem, parts).result()
        except cf.process.BrokenProcessPool:
            pass                                   # the helper died: draw it here
    return write_index_page(path, cfg, inputs.dem, parts)


def write_index_page(path, cfg: Config, dem, parts: dict):
    """Draw and write the index page from :func:`_write_index`'s ``parts`` (the RunPage fields)."""
    from .. import report
    run = report.RunPage(run_facts=report.run_facts(cfg, dem), **parts)
    return report.write_index(path, run, caution=CAUTION)


def cross_reach_crossings(sections: gpd.GeoDataFrame) -> list[str]:
    """Pairs of section lines of different reaches that cross (e.g. near a confluence), as text.

    Sections are repaired within a reach and kept off other reaches' centrelines when cut; two
    reaches' floodplain sections can still cross. They are reported here for review.
    """
    if len(sections) < 2:
        return []
    geoms = np.asarray(sections.geometry.values)
    left, right = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    rid = sections["reach_id"].to_numpy()
    sid = sections["section_id"].to_numpy()
    keep = (left < right) & (rid[left] != rid[right])
    return [f"reach {rid[a]} section {sid[a]} crosses reach {rid[b]} section {sid[b]}"
            for a, b in zip(left[keep], right[keep])]


def _mosaics(cfg: Config, done: dict[str, list[str]]) -> dict:
    """Where reach rasters overlap (confluences, shared reach ends), the largest value; one view of all.

    mosaic/<event>_max_<kind>/<reach>+<reach>....tif: the cell-wise maximum over one patch where
    rasters overlap (:func:`geoflow.mapping.mosaic.overlap_patches`; named after the first two
    reaches in layer order that cover it). mosaic/<event>_max_<kind>.vrt: a virtual raster of
    every reach raster with the patches on top, i.e. the largest value everywhere. Nothing is
    written for an event and kind with fewer than two reach rasters.
    """
    from ..mapping.mosaic import mosaic_max, overlap_patches, write_vrt  # only runs that map need it
    written = {}
    for ev in cfg.events:
        for kind in ("wse", "depth"):
            if kind not in cfg.mapping.outputs:
                continue
            found = [(rid, cfg.run.output_dir / "rasters" / safe_name(rid) / f"{safe_name(ev.name)}_{kind}.tif")
                     for rid, events in done.items() if ev.name in events]
            found = [(rid, t) for rid, t in found if t.is_file()]
            if len(found) < 2:
                continue
            base = cfg.run.output_dir / "mosaic" / f"{safe_name(ev.name)}_max_{kind}"
            meta = outputs.raster_metadata(kind, CAUTION, event=ev.name, run=cfg.run.name,
                                           geoflow_version=__version__, config_sha256=cfg.sha256,
                                           combined="largest value of the overlapping reach rasters")
            patches = []
            for box_, members in overlap_patches([_bounds(t) for _, t in found]):
                path = _patch_name(base, [found[k][0] for k in members], patches)
                patches.append(mosaic_max([found[k][1] for k in members], path, meta=meta, bounds=box_))
                written[f"mosaic_{ev.name}_{kind}_{path.stem}"] = path
            written[f"mosaic_{ev.name}_{kind}"] = write_vrt([t for _, t in found] + patches, base.with_suffix(".vrt"),
                                                            meta=meta)
    return written


def _spreads(cfg: Config, done: dict[str, list[str]]) -> dict:
    """uncertainty/<event>_wse_spread.tif: high-minus-low WSE of every reach (the larger where reaches overlap)."""
    from ..mapping.mosaic import mosaic_max  # only runs that map need it
    written = {}
    for ev in cfg.events:
        tifs = [part_paths(cfg.run.output_dir, safe_name(rid), safe_name(ev.name))["spread"]
                for rid, events in done.items() if ev.name in events]
        tifs = [t for t in tifs if t.is_file()]
        if tifs:
            path = cfg.run.output_dir / "uncertainty" / f"{safe_name(ev.name)}_wse_spread.tif"
            written[f"spread_{ev.name}"] = mosaic_max(tifs, path)
    return written


def _reach_tables(cfg: Config, order: list[str], man: Manifest) -> dict:
    """calibration.csv and rating_curves.csv from the per-reach parts of complete reaches."""
    written = {}
    specs = (("calibration", cfg.calibration, "calibration.csv", outputs.write_calibration_csv,
              outputs.CALIBRATION_COLUMNS),
             ("ratings", cfg.rating_curves, "rating_curves.csv", outputs.write_rating_csv, outputs.RATING_COLUMNS))
    for key, wanted, name, write, columns in specs:
        if wanted is None:
            continue
        frames = []
        for rid in order:
            path = part_paths(cfg.run.output_dir, safe_name(rid))[key]
            if man.data["reaches"].get(rid, {}).get("status") == "complete" and path.is_file():
                frames.append(pd.read_csv(path, keep_default_na=False, na_values=[""],
                                          dtype={"reach_id": str, "event": str, "flags": str, "regime": str}))
        table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame({c: [] for c in columns})
        written[key] = write(cfg.run.output_dir / name, table)
    return written


def _structures(cfg: Config, done: dict[str, list[str]]) -> pd.DataFrame:
    """structures.csv: the per reach x event parts of the complete units, in reach and event order."""
    frames = []
    for rid, events in done.items():
        for ev in events:
            path = part_paths(cfg.run.output_dir, safe_name(rid), safe_name(ev))["structures"]
            if path.is_file():
                frames.append(pd.read_csv(path, keep_default_na=False, na_values=[""],
                                          dtype={"reach_id": str, "structure_id": str, "event": str,
                                                 "roughness_case": str, "control": str, "flags": str}))
    return pd.concat(frames, ignore_index=True) if frames else outputs.empty_structures()


def _patch_name(base, reaches: list[str], taken: list):
    """<base>/<first>+<second>[+N_more].tif, with _2, _3 ... if that name is taken already."""
    stem = "+".join(safe_name(r) for r in reaches[:2]) + (f"+{len(reaches) - 2}_more" if len(reaches) > 2 else "")
    path, k = base / f"{stem}.tif", 1
    while path in taken:
        k += 1
        path = base / f"{stem}_{k}.tif"
    return path


def _bounds(tif) -> tuple:
    with rasterio.open(tif) as ds:
        return tuple(ds.bounds)


def _sections(cfg: Config, order: list[str], profile: pd.DataFrame, crs: str) -> gpd.GeoDataFrame:
    frames = []
    for rid in order:
        path = part_paths(cfg.run.output_dir, safe_name(rid))["sections"]
        if not path.is_file():
            continue
        gdf = gpd.read_file(path, layer="sections")
        gdf["reach_id"] = gdf["reach_id"].astype(str)
        gdf["flags"] = gdf["flags"].fillna("")
        mine = profile[(profile["reach_id"] == rid) & (profile["roughness_case"] == "normal")] if len(profile) \
            else profile
        for ev in cfg.events:
            rows = mine[mine["event"] == ev.name] if len(mine) else mine
            if len(rows):
                gdf[f"wse_{safe_name(ev.name)}_m"] = gdf["section_id"].map(rows.set_index("section_id")["wse_m"])
        frames.append(gdf)
    if not frames:
        return gpd.GeoDataFrame({c: [] for c in outputs.SECTION_COLUMNS}, geometry=[], crs=crs)
    return gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), geometry="geometry", crs=crs)


def _extents(cfg: Config, done: dict[str, list[str]], crs: str) -> gpd.GeoDataFrame:
    frames = []
    for rid, events in done.items():
        for ev in events:
            path = part_paths(cfg.run.output_dir, safe_name(rid), safe_name(ev))["extent"]
            if path.is_file():
                frames.append(gpd.read_file(path, layer="extent"))
    if not frames:
        return gpd.GeoDataFrame({"reach_id": [], "event": [], "roughness_case": [], "area_m2": []}, geometry=[],
                                crs=crs)
    gdf = pd.concat(frames, ignore_index=True)
    gdf["reach_id"] = gdf["reach_id"].astype(str)
    if "roughness_case" not in gdf:                 # parts written before roughness cases existed
        gdf.insert(2, "roughness_case", "normal")
    gdf["roughness_case"] = gdf["roughness_case"].fillna("normal")
    return gpd.GeoDataFrame(gdf, geometry="geometry", crs=crs)
