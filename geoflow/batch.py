"""Reaches x events: validate everything first, then compute each reach and write the outputs.

``run()`` is the library entry point behind ``geoflow run`` (and ``geoflow.run``). Inputs are
checked for every reach before anything is written, so a bad config leaves no output behind;
after that a reach that fails is recorded in the manifest and the batch goes on.
"""
from __future__ import annotations

import hashlib
import re
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import geopandas as gpd
import pandas as pd

from . import __version__, outputs, pipeline, report
from .config import Config, load_config
from .errors import GeoflowError
from .records import ReachGeometry

CAUTION = ("Screening-level 1D steady-flow estimates. Results must be reviewed by a qualified engineer; "
           "local codes, regulators and licensed practice govern their use.")


@dataclass
class RunResult:
    """What a run produced: per-reach results, the output folder and the paths written."""

    config: Config
    output_dir: Path
    reaches: dict[str, pipeline.ReachResult] = field(default_factory=dict)
    paths: dict[str, Path] = field(default_factory=dict)
    elapsed_s: float = 0.0
    crs: str | None = None                      # DEM CRS (WKT) of every output

    @property
    def failed(self) -> list[str]:
        return [rid for rid, r in self.reaches.items() if r.status != "complete"]

    @property
    def profile(self) -> pd.DataFrame:
        frames = [r.profile for r in self.reaches.values() if r.profile is not None]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=pipeline.PROFILE_COLUMNS)


@dataclass
class CheckResult:
    config: Config
    inputs: pipeline.Inputs
    geometries: dict[str, ReachGeometry]

    def summary_lines(self) -> list[str]:
        cfg = self.config
        lines = [f"config {cfg.path}: OK", f"DEM {cfg.terrain.dem.name}",
                 f"{len(self.geometries)} reach(es), {len(cfg.events)} event(s): "
                 + ", ".join(e.name for e in cfg.events)]
        for rid, g in self.geometries.items():
            ch = g.sections[-1].chainage if g.sections else 0.0
            flagged = sum(1 for s in g.sections if s.flags)
            lines.append(f"  reach {rid}: {ch:.0f} m, {len(g.sections)} sections, {flagged} flagged")
            lines.extend(f"    warning: {w}" for w in g.warnings)
        return lines


def safe_name(text: str) -> str:
    """Path-safe version of a reach id or event name (letters, digits, '_', '-', '.')."""
    name = re.sub(r"[^A-Za-z0-9_.-]+", "_", str(text)).strip("._") or "reach"
    return name


def _as_config(config: str | Path | Config) -> Config:
    return config if isinstance(config, Config) else load_config(config)


def check(config: str | Path | Config) -> CheckResult:
    """Validate config and inputs and cut every reach's sections; compute and write nothing."""
    cfg = _as_config(config)
    inputs = pipeline.open_inputs(cfg)
    geoms = {rid: pipeline.build_geometry(cfg, inputs, rid, line) for rid, line in inputs.reaches}
    names = [safe_name(r) for r in geoms]
    if len(set(names)) != len(names):
        raise GeoflowError(f"{cfg.reaches.centrelines}: reach ids {sorted(geoms)} collide once made path-safe; "
                           "rename them to distinct letters/digits")
    return CheckResult(config=cfg, inputs=inputs, geometries=geoms)


class Progress:
    """One-line progress over reach x event units on stderr, with an ETA."""

    def __init__(self, total: int, enabled: bool):
        self.total, self.done, self.enabled, self.t0 = total, 0, enabled, time.perf_counter()

    def step(self, label: str, units: int = 1) -> None:
        self.done += units
        if not self.enabled:
            return
        el = time.perf_counter() - self.t0
        eta = el / self.done * (self.total - self.done) if self.done else 0.0
        sys.stderr.write(f"\r[{self.done}/{self.total}] {label:<40.40} {el:6.1f} s elapsed, ETA {eta:5.1f} s")
        if self.done >= self.total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def run(config: str | Path | Config, progress: bool = False) -> RunResult:
    """Run every reach x event of a config; write the outputs of the output contract."""
    t0 = time.perf_counter()
    checked = check(config)           # raises before anything is written
    cfg, inputs = checked.config, checked.inputs
    lines = dict(inputs.reaches)
    out = cfg.run.output_dir
    result = RunResult(config=cfg, output_dir=out, crs=inputs.dem.crs.to_wkt())
    bar = Progress(len(checked.geometries) * len(cfg.events), progress)
    for rid, geom in checked.geometries.items():
        res = pipeline.run_reach(cfg, inputs, rid, lines[rid], geom=geom)
        result.reaches[rid] = res
        if res.status == "complete":
            try:
                _write_reach(cfg, out, res)
            except GeoflowError as exc:
                res.status, res.error = "failed", str(exc)
        bar.step(f"reach {rid}: {res.status}", len(cfg.events))
    result.elapsed_s = time.perf_counter() - t0
    _write_run_outputs(cfg, result)
    return result


def _write_reach(cfg: Config, out: Path, res: pipeline.ReachResult) -> None:
    rdir = out / "rasters" / safe_name(res.reach_id)
    for ev, m in res.maps.items():
        for kind in ("wse", "depth"):
            if kind in cfg.mapping.outputs:
                outputs.write_raster(rdir / f"{safe_name(ev)}_{kind}.tif", getattr(m, kind), m.transform, m.crs)
    if "report" in cfg.mapping.outputs:
        report.write_report(out / "report" / f"{safe_name(res.reach_id)}.html", res.reach_id, res.geometry,
                            res.profile, [e.name for e in cfg.events], caution=CAUTION)


def _sections_frame(result: RunResult, crs) -> gpd.GeoDataFrame:
    rows = []
    for rid, res in result.reaches.items():
        if res.geometry is None:
            continue
        wse = {}
        if res.profile is not None:
            for ev, grp in res.profile.groupby("event", sort=False):
                wse[ev] = grp.set_index("section_id")["wse_m"]
        for s in res.geometry.sections:
            lb, rb = s.bank_stations
            row = {"reach_id": rid, "section_id": s.section_id, "chainage_m": s.chainage,
                   "left_bank_station_m": lb, "right_bank_station_m": rb, "bed_m": s.bed_elevation,
                   "flags": ";".join(s.flags), "geometry": s.line}
            row.update({f"wse_{safe_name(ev)}_m": float(w.get(s.section_id, float("nan"))) for ev, w in wse.items()})
            rows.append(row)
    return gpd.GeoDataFrame(rows, geometry="geometry", crs=crs)


def _extent_frame(result: RunResult, crs) -> gpd.GeoDataFrame:
    rows = []
    for rid, res in result.reaches.items():
        for ev, m in res.maps.items():
            rows.extend({"reach_id": rid, "event": ev, "area_m2": p.area, "geometry": p} for p in m.extent)
    return gpd.GeoDataFrame(rows, geometry="geometry", crs=crs) if rows else gpd.GeoDataFrame(
        {"reach_id": [], "event": [], "area_m2": []}, geometry=[], crs=crs)


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _input_paths(cfg: Config) -> dict[str, Path]:
    paths = {"dem": cfg.terrain.dem, "centrelines": cfg.reaches.centrelines, "landcover": cfg.roughness.landcover}
    return {k: p for k, p in paths.items() if p.is_file()}


def _write_run_outputs(cfg: Config, result: RunResult) -> None:
    out = result.output_dir
    crs = result.crs
    outputs.write_profile_csv(out / "profile.csv", result.profile)
    outputs.write_sections_gpkg(out / "sections.gpkg", _sections_frame(result, crs))
    if "extent" in cfg.mapping.outputs:
        outputs.write_extent_gpkg(out / "inundation.gpkg", _extent_frame(result, crs))
    manifest = {
        "geoflow_version": __version__,
        "caution": CAUTION,
        "config": str(cfg.path),
        "config_sha256": cfg.sha256,
        "inputs": {k: {"path": str(p), "sha256": file_sha256(p)} for k, p in _input_paths(cfg).items()},
        "events": [e.name for e in cfg.events],
        "elapsed_s": round(result.elapsed_s, 3),
        "reaches": {
            rid: {"status": r.status, "error": r.error, "sections": len(r.geometry.sections) if r.geometry else 0,
                  "timings_s": {k: round(v, 4) for k, v in r.timings.items()}, "warnings": r.warnings}
            for rid, r in result.reaches.items()
        },
    }
    outputs.write_manifest(out / "manifest.json", manifest)
    result.paths = {"profile": out / "profile.csv", "sections": out / "sections.gpkg",
                    "extent": out / "inundation.gpkg", "manifest": out / "manifest.json"}
