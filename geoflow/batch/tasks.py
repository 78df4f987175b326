"""The unit of work a worker runs: one reach of one config, for a list of events.

A task receives a :class:`TaskSpec` (the config path, its hash, the run's input identity, cheap
fingerprints of the input files, a reach id and event names: plain values, never arrays) and
opens its own inputs, so it runs the same in this process, in a local process pool or on a Dask
worker (which must see the same file system). It writes the reach's rasters, report and part
files (atomically) and returns a small dict of plain values for the manifest. Opened inputs are
cached per process, keyed on the input identity, so an edited input is never served from cache.
"""
from __future__ import annotations

import concurrent.futures as cf
import functools
import time
import traceback
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .. import __version__, outputs, timing
from ..config import Config, load_config
from ..constants import CAUTION
from ..errors import ConfigError, GeoflowError, HydraulicsError, InputDataError, is_disk_full, nearly_full, write_error
from ..naming import safe_name
from ..records import ReachGeometry
from ..roughness import case_factors, combine, composite_n_by_part
from ..roughness.overlay import GAP_CLASS
from . import calibrate, ratings, reach, structures
from .inputs import Inputs, open_inputs
from .layout import relative_name
from .manifest import part_paths
from .summary import event_summary

#: geometry built while validating, reused by in-process (and forked) tasks: {(identity, reach id): geometry}
GEOMETRY_CACHE: dict[tuple[str, str], ReachGeometry] = {}
#: a :class:`geoflow.batch.reports.ReportProcess` drawing reports beside an in-process run (or None: inline)
REPORTS = None
#: a :class:`geoflow.batch.reports.ReportProcess` drawing reports beside an in-process run (or None: inline)
REPORTS = None


@dataclass(frozen=True)
class TaskSpec:
    """Everything a reach task needs, as plain values."""

    config_path: str
    config_sha256: str
    identity: str                                  # manifest.identity(): config + input contents + version
    fingerprints: tuple                            # ((path, size, mtime_ns), ...) of the inputs at planning
    reach_id: str
    events: tuple[str, ...]
    junction_events: tuple[str, ...] = ()          # events of the receiving reach complete in this run


@functools.lru_cache(maxsize=4)
def _config(path: str, sha256: str, identity: str) -> Config:
    cfg = load_config(path)
    if cfg.sha256 != sha256:
        raise ConfigError(f"{path}: the config changed while the run was going on; run again")
    return cfg


@functools.lru_cache(maxsize=4)
def _inputs(path: str, sha256: str, identity: str) -> Inputs:
    return open_inputs(_config(path, sha256, identity))


def check_reach(spec: TaskSpec) -> tuple:
    """Validate one reach where it will be computed (a run's worker): (reach id, problem or None,
    summary or None), as :func:`geoflow.batch.validate.check_geometry`; the geometry stays here."""
    from .validate import check_geometry
    cfg = _config(spec.config_path, spec.config_sha256, spec.identity)
    inputs = _inputs(spec.config_path, spec.config_sha256, spec.identity)
    with inputs.dem.kept_open():
        return check_geometry(cfg, inputs, spec.reach_id)


def _check_unchanged(spec: TaskSpec) -> None:
    for path, size, mtime in spec.fingerprints:
        try:
            st = Path(path).stat()
        except OSError:
            raise InputDataError(f"{path}: input file disappeared while the run was going on; restore it and "
                                 "run again") from None
        if (st.st_size, st.st_mtime_ns) != (size, mtime):
            raise InputDataError(f"{path}: input file changed while the run was going on; run again")


def compute_reach(spec: TaskSpec) -> dict:
    """Compute and write one reach for the given events; never raises for a GeoflowError."""
    t0 = time.perf_counter()
    info = {"reach_id": spec.reach_id, "status": "failed", "error": None, "events": {}, "warnings": [],
            "sections": 0, "timings_s": {}}
    out = None
    try:
        _check_unchanged(spec)
        cfg = _config(spec.config_path, spec.config_sha256, spec.identity)
        out = cfg.run.output_dir
        inputs = _inputs(spec.config_path, spec.config_sha256, spec.identity)
        with inputs.dem.kept_open():          # one handle (and GDAL block cache) for the whole task
            _compute(cfg, inputs, spec, info, t0)
    except GeoflowError as exc:
        info["error"] = str(exc)
    except Exception as exc:  # disk full in a library's own words, or a bug: keep the batch going
        if is_disk_full(exc) or (out is not None and nearly_full(out)):
            info["error"] = str(write_error(f"reach {spec.reach_id!r} outputs", exc))
        else:
            info["error"] = f"internal error ({type(exc).__name__}: {exc}); please report it with run.log"
            info["traceback"] = traceback.format_exc()
    for ev in spec.events:
        info["events"].setdefault(ev, {"status": "failed", "error": info["error"]})
    return info


def _compute(cfg: Config, inputs: Inputs, spec: TaskSpec, info: dict, t0: float) -> None:
    """The stages of one reach; ``timings_s`` gets the seconds each took (:mod:`geoflow.timing`)."""
    rid = spec.reach_id
    before, before_cpu = timing.snapshot(), timing.snapshot(cpu=True)
    geom = GEOMETRY_CACHE.get((spec.identity, rid)) or reach.build_geometry(cfg, inputs, rid, inputs.line_of(rid))
    info["sections"], info["warnings"] = len(geom.sections), list(geom.warnings)
    if geom.channel:
        info["channel"] = geom.channel
    if geom.structures:
        info["structures"] = structures.manifest_entry(cfg, geom)
    with timing.stage("tables"):
        info["files"] = [relative_name(cfg.run.output_dir, _write_sections_part(cfg, inputs, geom))]
    todo = [e for e in cfg.events if e.name in spec.events]
    marks = inputs.marks.get(rid) if cfg.calibration is not None else None
    needed = [e for e in cfg.events if e.name in spec.events or (marks is not None and e.name in set(marks.event))]
    junction = _junction_wse(cfg, inputs, geom, needed, spec.junction_events)
    with timing.stage("calibration"):
        factors = _calibrate(cfg, geom, marks, junction, info) if marks is not None else {}
    with timing.stage("hydraulics"):
        profiles = {case: reach.solve_reach(cfg, geom, todo, None if junction is None else junction[case],
                                            factors=combine(factors, case_factors(cfg.roughness.classes, case)))
                    for case in cfg.roughness.all_cases()}
    release_memory()                    # the section tables are gone: give their pages back before mapping
    info["events"].update(_compute_events(cfg, inputs, geom, profiles, todo, factors))
    if cfg.rating_curves is not None:
        with timing.stage("rating_curves"):
            path = part_paths(cfg.run.output_dir, safe_name(rid))["ratings"]
            info["files"].append(relative_name(cfg.run.output_dir, outputs.write_rating_csv(
                path, ratings.rating_rows(cfg, geom, factors))))
    # the report is drawn from the rasters and outlines just written: after the maps
    if REPORTS is not None and "report" in cfg.mapping.outputs:
        info["report_pending"] = PendingReport(REPORTS.submit(spec, geom), spec, geom)
    else:
        with timing.stage("report"):
            info["files"] += [relative_name(cfg.run.output_dir, f) for f in write_reach_report(cfg, inputs, geom)]
    info["timings_s"] = {k: round(v, 4) for k, v in timing.since(before).items()}
    info["timings_s"]["total"] = round(time.perf_counter() - t0, 4)
    info["timings_s"]["cpu"] = {k: round(v, 4) for k, v in timing.since(before_cpu, cpu=True).items()}
    failed = [e for e, u in info["events"].items() if u["status"] != "complete"]
    info["status"] = "failed" if failed else "complete"
    info["error"] = "; ".join(info["events"][e]["error"] for e in failed) or None


def _calibrate(cfg: Config, geom, marks, junction: dict | None, info: dict) -> dict:
    """Calibrate the reach's n to its marks; record it (manifest entry, part file) -> {class: factor}."""
    cal = calibrate.calibrate_reach(cfg, geom, marks, None if junction is None else junction["normal"])
    info["calibration"] = dict(cal.record, warnings=list(cal.warnings))
    info["warnings"] += cal.warnings
    path = part_paths(cfg.run.output_dir, safe_name(geom.reach_id))["calibration"]
    info["files"].append(relative_name(cfg.run.output_dir, outputs.write_calibration_csv(path, cal.rows)))
    return cal.factors
def release_memory() -> None:
    """Return freed heap pages to the operating system (glibc ``malloc_trim``; elsewhere nothing).

    After a stage frees large arrays (a long reach's section tables are a few hundred MB),
    glibc keeps the pages for reuse, so the next stage's peak would stack on top of this one's;
    trimming makes the peak of a run the largest stage, not the sum.
    """
    trim = _malloc_trim()
    if trim is not None:
        trim(0)


@functools.lru_cache(maxsize=1)
def _malloc_trim():
    import ctypes
    import ctypes.util
    try:
        return ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6").malloc_trim
    except (OSError, AttributeError):
        return None


def _junction_wse(cfg: Config, inputs, geom, events, complete: tuple[str, ...]) -> dict | None:
    """{roughness case: {event: WSE}} where this reach joins the reach named by its junction boundary
    (or None): each case of this reach ends at the same case of the receiving reach.

    Only results of the receiving reach that this run computed (or reused after proving them
    current) are read: ``complete`` lists those events.
    """
    down, _ = cfg.boundary.for_reach(geom.reach_id)
    if down.type != "junction":
        return None
    missing = [e.name for e in events if e.name not in complete]
    if missing:
        raise HydraulicsError(f"reach {geom.reach_id!r}: junction reach {down.reach!r} has no result for event(s) "
                              f"{', '.join(missing)} in this run (it failed); fix that reach first")
    prof = read_profile_parts(cfg, down.reach, [e.name for e in events])
    if prof is None:
        raise HydraulicsError(f"reach {geom.reach_id!r}: junction reach {down.reach!r} has no results; it failed "
                              "or was not computed, so this reach cannot be either")
    try:
        return {case: reach.junction_wse_from(inputs.line_of(down.reach), prof[prof["roughness_case"] == case],
                                              geom.centreline, [e.name for e in events], down.reach)
                for case in cfg.roughness.all_cases()}
    except HydraulicsError as exc:
        raise HydraulicsError(f"reach {geom.reach_id!r}: {exc}") from None


def _compute_events(cfg: Config, inputs, geom, profiles: dict, todo: list, factors: dict) -> dict:
    """Map and write the events of a reach whose profiles are solved (or failed): the rasters of all
    of them, every roughness case, in one pass over the reach's blocks (:func:`_write_maps`), then
    each event's tables. {event name: manifest entry}, in ``todo`` order."""
    out, ready = {}, []
    for ev in todo:
        profs = {case: p[ev.name] for case, p in profiles.items()}
        failed = [(case, prof) for case, prof in profs.items() if isinstance(prof, GeoflowError)]
        if failed:
            case, prof = failed[0]
            where = "" if case == "normal" else f" (roughness case {case!r})"
            out[ev.name] = {"status": "failed", "error": f"{prof}{where}"}
        else:
            ready.append((ev, profs))
    t1 = time.perf_counter()
    try:
        with timing.stage("mapping"):
            files = _write_maps(cfg, inputs, geom, ready, factors)
    except GeoflowError as exc:
        files = {ev.name: exc for ev, _ in ready}
    share = (time.perf_counter() - t1) / max(len(ready), 1)
    for ev, profs in ready:
        got = files[ev.name]
        out[ev.name] = ({"status": "failed", "error": str(got)} if isinstance(got, GeoflowError)
                        else _finish_event(cfg, geom, ev, profs, got, share))
        release_memory()
    return {ev.name: out[ev.name] for ev in todo}


def _finish_event(cfg: Config, geom, ev, profs: dict, files: list[Path], mapping_s: float) -> dict:
    """Tables of one mapped event (every roughness case) and its manifest entry; ``mapping_s``: its
    share of the reach's mapping time."""
    t1 = time.perf_counter()
    parts = part_paths(cfg.run.output_dir, safe_name(geom.reach_id), safe_name(ev.name))
    try:
        with timing.stage("tables"):
            rows = pd.concat([outputs.profile_rows(geom, ev.name, p, case) for case, p in profs.items()],
                             ignore_index=True)
            files.append(outputs.write_profile_csv(parts["profile"], rows))
            if geom.structures:
                table = pd.concat([outputs.structure_rows(geom, ev.name, p, case) for case, p in profs.items()],
                                  ignore_index=True)
                files.append(outputs.write_structures_csv(parts["structures"], table))
        t2 = time.perf_counter()
    except GeoflowError as exc:
        return {"status": "failed", "error": str(exc)}
    normal = rows[rows["roughness_case"] == "normal"]
    flagged = int((normal["flags"].str.len() > 0).sum())
    return {"status": "complete", "error": None, "files": [relative_name(cfg.run.output_dir, f) for f in files],
            "timings_s": {"mapping_and_writing": mapping_s + t2 - t1},
            "max_depth_m": float(np.nanmax(normal["depth_m"])), "flagged_sections": flagged, **event_summary(normal)}


def _write_maps(cfg: Config, inputs, geom, ready: list, factors: dict) -> dict:
    """Rasters (block-wise COGs, with their units and the caution as metadata) of every event in
    ``ready`` ((event, {case: profile})) and roughness case, written in one pass over the reach's
    blocks (:func:`geoflow.mapping.write_reach_maps_many`); then per event the outline part (one
    multipolygon per reach, event and case) and the WSE spread part. {event name: files}.

    The normal case keeps the names <event>_<kind>.tif (and is the only one with velocity); the
    other cases write <event>.<case>_wse.tif and <event>.<case>_depth.tif.
    """
    from ..mapping import MapJob, write_reach_maps_many
    rdir = cfg.run.output_dir / "rasters" / safe_name(geom.reach_id)
    jobs, keys = [], []
    for ev, profs in ready:
        for case, prof in profs.items():
            kinds = [k for k in ("wse", "depth", "velocity") if k in cfg.mapping.outputs
                     and (case == "normal" or k != "velocity")]
            if not kinds and "extent" not in cfg.mapping.outputs:
                continue
            stem = safe_name(ev.name) if case == "normal" else f"{safe_name(ev.name)}.{case}"
            meta = {k: outputs.raster_metadata(k, CAUTION, reach_id=geom.reach_id, event=ev.name, run=cfg.run.name,
                                               geoflow_version=__version__, config_sha256=cfg.sha256,
                                               roughness_case=case)
                    for k in kinds}
            velocity = _velocity_inputs(cfg, inputs, geom, prof, factors) if "velocity" in kinds else None
            jobs.append(MapJob(np.asarray(prof.wse), {k: rdir / f"{stem}_{k}.tif" for k in kinds}, velocity, meta))
            keys.append((ev.name, case))
    summaries = write_reach_maps_many(inputs.dem, geom, jobs, cell_size=cfg.mapping.cell_size,
                                      clip=reach.map_clip(cfg, inputs, geom)) if jobs else []
    by_event: dict = {ev.name: [] for ev, _ in ready}
    for (event, case), m in zip(keys, summaries):
        by_event[event].append((case, m))
    return {ev.name: _event_files(cfg, inputs, geom, ev.name, profs, by_event[ev.name]) for ev, profs in ready}


def _event_files(cfg: Config, inputs, geom, event: str, profs: dict, maps: list) -> list[Path]:
    """Rasters of one event (``maps``: (case, MapSummary)), its outline part and WSE spread part."""
    import geopandas as gpd
    import shapely

    from ..mapping import write_wse_spread
    parts = part_paths(cfg.run.output_dir, safe_name(geom.reach_id), safe_name(event))
    written, extents, wse_paths = [], [], {}
    for case, m in maps:
        written += list(m.paths.values())
        wse_paths[case] = m.paths.get("wse")
        if m.extent:
            outline = shapely.multipolygons(m.extent)
            extents.append(gpd.GeoDataFrame({"reach_id": [geom.reach_id], "event": [event], "roughness_case": [case],
                                             "area_m2": [outline.area]}, geometry=[outline],
                                            crs=inputs.dem.crs.to_wkt()))
    if "extent" in cfg.mapping.outputs or extents:
        ext = (gpd.GeoDataFrame(pd.concat(extents, ignore_index=True), geometry="geometry", crs=inputs.dem.crs.to_wkt())
               if extents else gpd.GeoDataFrame({"reach_id": [], "event": [], "roughness_case": [], "area_m2": []},
                                                geometry=[], crs=inputs.dem.crs.to_wkt()))
        written.append(outputs.write_extent_gpkg(parts["extent"], ext))
    if wse_paths.get("low") is not None and wse_paths.get("high") is not None:
        written.append(write_wse_spread(geom, profs["low"].wse, profs["high"].wse, wse_paths["low"],
                                        wse_paths["high"], parts["spread"]))
    return written


def _velocity_inputs(cfg: Config, inputs, geom, prof, factors: dict | None = None):
    """Velocity raster inputs: per section the slope under which the depth strips carry the section's
    discharge (geoflow.mapping.strips), and each land-cover polygon's base n (times its class's
    calibration factor)."""
    from ..mapping import VelocityInputs
    from ..mapping.strips import strip_slope
    table = cfg.roughness.n_table()
    factors = factors or {}
    gap_n = None if cfg.roughness.default_n is None else cfg.roughness.default_n * factors.get(GAP_CLASS, 1.0)
    fallback = np.nan if cfg.roughness.default_n is None else cfg.roughness.default_n
    n = np.array([table.get(str(c), fallback) * factors.get(str(c), 1.0) for c in inputs.cover.classes], dtype=float)
    slope = strip_slope(geom.sections, np.asarray(prof.wse, dtype=float), np.asarray(prof.discharge, dtype=float))
    return VelocityInputs(friction_slope=slope, landcover=(np.asarray(inputs.cover.geometries), n), default_n=gap_n)


def _write_sections_part(cfg: Config, inputs: Inputs, geom) -> Path:
    import geopandas as gpd
    rows = outputs.section_rows(geom, composite_n_by_part)
    gdf = gpd.GeoDataFrame(rows, geometry="geometry", crs=inputs.dem.crs.to_wkt())
    return outputs.write_sections_gpkg(part_paths(cfg.run.output_dir, safe_name(geom.reach_id))["sections"], gdf)


def read_profile_parts(cfg: Config, reach_id: str, events: list[str] | None = None) -> pd.DataFrame | None:
    """Profile rows of a reach found on disk for ``events`` (default: all), in config event order."""
    frames = []
    for ev in cfg.events:
        if events is not None and ev.name not in events:
            continue
        p = part_paths(cfg.run.output_dir, safe_name(reach_id), safe_name(ev.name))["profile"]
        if p.is_file():
            frame = pd.read_csv(p, keep_default_na=False, na_values=[""],
                                dtype={"reach_id": str, "event": str, "roughness_case": str, "flags": str})
            if "roughness_case" not in frame:       # parts written before roughness cases existed
                frame.insert(2, "roughness_case", "normal")
            frames.append(frame)
    return pd.concat(frames, ignore_index=True) if frames else None


@dataclass
class PendingReport:
    """A reach report being drawn by the report process (in-process runs; see :mod:`.reports`)."""

    future: object
    spec: TaskSpec
    geom: ReachGeometry

    def finish(self, info: dict) -> None:
        """Wait for the report and complete the reach's ``info`` with it (files, time, or the error).

        A report process that died leaves the report to be drawn here.
        """
        cfg = _config(self.spec.config_path, self.spec.config_sha256, self.spec.identity)
        try:
            try:
                files, seconds = self.future.result()
                info["timings_s"]["report_process"] = round(seconds, 4)
            except cf.process.BrokenProcessPool:
                inputs = _inputs(self.spec.config_path, self.spec.config_sha256, self.spec.identity)
                files = write_reach_report(cfg, inputs, self.geom)
        except GeoflowError as exc:
            info["status"], info["error"] = "failed", str(exc)
            return
        info["files"] = list(info.get("files") or []) + [relative_name(cfg.run.output_dir, f) for f in files]


def report_in_helper(spec: TaskSpec, geom: ReachGeometry) -> tuple[list[Path], float]:
    """What the report process runs for one reach (it opens the task's inputs itself, once): the
    report's files and the seconds spent."""
    t0 = time.perf_counter()
    cfg = _config(spec.config_path, spec.config_sha256, spec.identity)
    inputs = _inputs(spec.config_path, spec.config_sha256, spec.identity)
    return write_reach_report(cfg, inputs, geom), time.perf_counter() - t0


def write_reach_report(cfg: Config, inputs, geom) -> list[Path]:
    """The reach's HTML page, from its profile parts, the rasters and outlines just written, and a
    DEM window (all read here, at the edge; the report itself reads nothing)."""
    if "report" not in cfg.mapping.outputs:
        return []
    prof = read_profile_parts(cfg, geom.reach_id)
    if prof is None:
        return []
    prof = prof[prof["roughness_case"] == "normal"].reset_index(drop=True)   # the report shows the normal case
    from .. import report
    prof["flags"] = prof["flags"].fillna("")
    events = [e.name for e in cfg.events if e.name in set(prof["event"])]
    lines = inputs.lines_by_id()
    ctx = report.ReachContext(
        run_facts=report.run_facts(cfg, inputs.dem), section_facts=report.section_facts(cfg, geom.reach_id,
                                                                                         len(geom.sections)),
        events_table=report.events_table(cfg, geom.reach_id, prof, events), roughness_table=report.roughness_table(cfg),
        layers=_map_layers(cfg, inputs, geom, events),
        markers=tuple(sorted(report.markers(cfg, geom.reach_id, lines) + geom.structure_markers())),
        index=INDEX_NAME)
    path = cfg.run.output_dir / "report" / f"{safe_name(geom.reach_id)}.html"
    return [report.write_report(path, geom.reach_id, geom, prof, events, caution=CAUTION, context=ctx)]


#: the run's index page, beside the reach pages in report/
INDEX_NAME = "index.html"
PREVIEW_CELLS = 1000           # longest side of the rasters drawn on a map, in cells


def _map_layers(cfg: Config, inputs, geom, events):
    """Plan-map layers of a reach: DEM preview, depth per event, outlines per event, other reaches."""
    import geopandas as gpd
    import shapely

    from ..report import MapLayers
    coords = np.concatenate([np.asarray(s.line.coords)[:, :2] for s in geom.sections])
    (x0, y0), (x1, y1) = coords.min(axis=0), coords.max(axis=0)
    pad = 0.03 * max(x1 - x0, y1 - y0)
    bounds = (x0 - pad, y0 - pad, x1 + pad, y1 + pad)
    depth, outlines = {}, {}
    for ev in events:
        tif = cfg.run.output_dir / "rasters" / safe_name(geom.reach_id) / f"{safe_name(ev)}_depth.tif"
        if tif.is_file():
            arr, box, _ = outputs.read_raster(tif, PREVIEW_CELLS)
            depth[ev] = (arr, box)
        part = part_paths(cfg.run.output_dir, safe_name(geom.reach_id), safe_name(ev))["extent"]
        if part.is_file():
            ext = gpd.read_file(part, layer="extent")
            if "roughness_case" in ext:
                ext = ext[ext["roughness_case"] == "normal"]
            outlines[ev] = list(ext.geometry)
    area = shapely.box(*bounds)
    others = {rid: inputs.line_of(rid) for rid in inputs.reaches_near(bounds)
              if rid != geom.reach_id and inputs.line_of(rid).intersects(area)}
    places = [(geom.centreline.interpolate(c), label) for c, label in geom.structure_markers()]
    return MapLayers(dem=inputs.dem.read_preview(bounds, PREVIEW_CELLS), depth=depth, outlines=outlines,
                      other_lines=others, structures=tuple((p.x, p.y, label) for p, label in places))
