"""Reaches x events over one or many configs: check first, then compute on an engine, then assemble.

``run()`` is the library entry point behind ``geoflow run`` (and ``geoflow.run``).

1. Plan: every config is loaded and its inputs opened and checked before anything is written;
   a config error, or a config whose every reach is unusable, raises (nothing written).
   Reaches that fail the cheap pre-check (e.g. centreline off the DEM) are recorded as failed.
2. Compute: each reach is one task (tasks.compute_reach) run in this process, in a local
   process pool (``workers > 1``) or on a Dask cluster (``scheduler`` address). Tasks get the
   config path and a reach id, never arrays; results are identical whichever engine runs them.
   The manifest is saved after every finished reach, so a killed run can be resumed.
3. Assemble: profile.csv, sections.gpkg, inundation.gpkg and the final manifest are built from
   the per-reach part files, in the order of the centreline layer.
"""
from __future__ import annotations

import concurrent.futures as cf
import logging
import multiprocessing
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
import shapely
from shapely.geometry import box

from . import CAUTION, assemble, manifest, pipeline
from .config import Config, load_config
from .errors import GeometryError, GeoflowError, OutputError
from .naming import safe_name
from .records import ReachGeometry
from .tasks import compute_reach

log = logging.getLogger("geoflow")
LOG_NAME = "run.log"


@dataclass
class RunResult:
    """What a run of one config produced."""

    config: Config
    output_dir: Path
    reaches: dict[str, dict] = field(default_factory=dict)     # reach id -> manifest entry
    profile: pd.DataFrame | None = None                        # the rows of profile.csv
    paths: dict[str, Path] = field(default_factory=dict)
    elapsed_s: float = 0.0
    reused_units: int = 0
    crossings: list = field(default_factory=list)             # section pairs of different reaches that cross

    @property
    def failed(self) -> list[str]:
        return [rid for rid, r in self.reaches.items() if r.get("status") != "complete"]


@dataclass
class CheckResult:
    config: Config
    inputs: pipeline.Inputs
    geometries: dict[str, ReachGeometry]
    problems: dict[str, str] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        cfg = self.config
        lines = [f"config {cfg.path}: OK", f"DEM {cfg.terrain.dem} ({self.inputs.dem.crs.to_string()}, "
                 f"{self.inputs.dem.cell_size:g} m cells)",
                 f"{len(self.geometries) + len(self.problems)} reach(es), {len(cfg.events)} event(s): "
                 + ", ".join(e.name for e in cfg.events)]
        for rid, g in self.geometries.items():
            flagged = sum(1 for s in g.sections if s.flags)
            lines.append(f"  reach {rid}: {g.sections[-1].chainage:.0f} m, {len(g.sections)} sections, "
                         f"{flagged} flagged")
            lines.extend(f"    warning: {w}" for w in g.warnings)
        lines.extend(f"  reach {rid}: PROBLEM: {msg}" for rid, msg in self.problems.items())
        return lines


def _as_config(config: str | Path | Config) -> Config:
    return config if isinstance(config, Config) else load_config(config)


def precheck_reaches(cfg: Config, inputs: pipeline.Inputs) -> dict[str, str]:
    """Cheap per-reach checks -> {reach_id: problem}. Raises when no reach is usable."""
    names = [safe_name(r) for r, _ in inputs.reaches]
    if len(set(names)) != len(names):
        raise GeoflowError(f"{cfg.reaches.centrelines}: reach ids collide once made path-safe "
                           f"({', '.join(r for r, _ in inputs.reaches)}); give them distinct letters/digits")
    extent = box(*inputs.dem.bounds)
    problems = dict(inputs.unusable)
    for rid, line in inputs.reaches:
        if not shapely.contains(extent, line):
            problems[rid] = (f"reach {rid!r}: centreline in {cfg.reaches.centrelines.name} runs outside the DEM "
                             f"{cfg.terrain.dem.name}; trim the line to the DEM or use a DEM that covers it")
    if problems and not set(r for r, _ in inputs.reaches) - set(problems):
        first = next(iter(problems.values()))
        more = f" (and {len(problems) - 1} more reach(es))" if len(problems) > 1 else ""
        raise GeometryError(first + more)
    return problems


def check(config: str | Path | Config) -> CheckResult:
    """Validate config and inputs and cut every reach's sections; compute and write nothing."""
    cfg = _as_config(config)
    inputs = pipeline.open_inputs(cfg)
    problems = precheck_reaches(cfg, inputs)
    geoms = {}
    for rid, line in inputs.reaches:
        if rid in problems:
            continue
        try:
            geoms[rid] = pipeline.build_geometry(cfg, inputs, rid, line)
        except GeoflowError as exc:
            problems[rid] = str(exc)
    if not geoms:
        raise GeometryError(next(iter(problems.values())))
    return CheckResult(config=cfg, inputs=inputs, geometries=geoms, problems=problems)


@dataclass
class _Plan:
    cfg: Config
    inputs: pipeline.Inputs
    manifest: manifest.Manifest
    todo: dict[str, list[str]]          # reach id -> events to compute
    result: RunResult


def _plan(config, resume: bool) -> _Plan:
    cfg = _as_config(config)
    inputs = pipeline.open_inputs(cfg)
    problems = precheck_reaches(cfg, inputs)
    hashes = manifest.input_hashes(cfg)
    previous = manifest.load_previous(cfg.run.output_dir) if resume else None
    if resume:
        manifest.clear_stale_temporaries(cfg.run.output_dir)
    reuse = manifest.reusable_units(previous, cfg, hashes, safe_name) if resume else set()
    man = manifest.Manifest.start(cfg, hashes, previous, reuse)
    todo = {}
    for rid in [r for r, _ in inputs.reaches] + list(inputs.unusable):
        if rid in problems:
            man.record_reach(rid, {"status": "failed", "error": problems[rid],
                                   "events": {e.name: {"status": "failed", "error": problems[rid]}
                                              for e in cfg.events}})
            continue
        events = [e.name for e in cfg.events if manifest.unit_key(rid, e.name) not in reuse]
        if events:
            todo[rid] = events
        elif previous:
            man.data["reaches"][rid] = previous.get("reaches", {}).get(rid, {"status": "complete"})
    result = RunResult(config=cfg, output_dir=cfg.run.output_dir, reused_units=len(reuse))
    return _Plan(cfg=cfg, inputs=inputs, manifest=man, todo=todo, result=result)


class Progress:
    """One-line progress over reach x event units on stderr, with an ETA."""

    def __init__(self, total: int, enabled: bool):
        self.total, self.done, self.enabled, self.t0 = max(total, 1), 0, enabled, time.perf_counter()

    def step(self, label: str, units: int = 1) -> None:
        self.done += units
        if not self.enabled:
            return
        el = time.perf_counter() - self.t0
        eta = el / self.done * (self.total - self.done) if self.done else 0.0
        sys.stderr.write(f"\r[{self.done}/{self.total}] {label:<44.44} {el:7.1f} s elapsed, ETA {eta:6.1f} s")
        if self.done >= self.total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _engine(workers: int, scheduler: str | None):
    """(submit, as_completed, close) for the chosen engine."""
    if scheduler:
        from distributed import Client, as_completed
        client = Client(scheduler, timeout="30s")
        return (lambda *a: client.submit(compute_reach, *a, pure=False)), as_completed, client.close
    if workers > 1:
        pool = cf.ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context())
        return (lambda *a: pool.submit(compute_reach, *a)), cf.as_completed, pool.shutdown
    return (lambda *a: _Deferred(a)), iter, lambda: None


class _Deferred:
    """In-process engine: the task runs when its result is asked for (so progress stays live)."""

    def __init__(self, args):
        self.args = args

    def result(self):
        return compute_reach(*self.args)


def _pool_context():
    """'fork' when it is safe (POSIX, no other threads: workers start without re-importing the GIS
    stack, which dominates start-up); otherwise 'spawn'. Tasks open their own files either way."""
    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


def _start_logging(out_dirs: list[Path]) -> list[logging.Handler]:
    handlers = []
    log.setLevel(logging.INFO)
    for d in out_dirs:
        try:
            d.mkdir(parents=True, exist_ok=True)
            h = logging.FileHandler(d / LOG_NAME, mode="a", encoding="utf-8")
        except OSError as exc:
            raise OutputError(f"{d}: cannot create the output folder or its {LOG_NAME} ({exc.strerror or exc}); "
                              "check [run] output_dir and its permissions") from None
        h.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
        log.addHandler(h)
        handlers.append(h)
    return handlers


def run(config, workers: int = 1, scheduler: str | None = None, resume: bool = False,
        progress: bool = False):
    """Run every reach x event of one config (-> RunResult) or of a list of configs (-> list)."""
    many = isinstance(config, (list, tuple))
    plans = [_plan(c, resume) for c in (config if many else [config])]     # raises before writing
    t0 = time.perf_counter()
    handlers = _start_logging([p.cfg.run.output_dir for p in plans])
    try:
        _compute(plans, workers, scheduler, progress)
        for p in plans:
            p.result.elapsed_s = time.perf_counter() - t0
            assemble.finish(p.cfg, p.inputs, p.manifest, p.result)
            p.result.crossings = list(p.manifest.data.get("sections_crossing_other_reaches", []))
            for line in p.result.crossings:
                log.warning("%s; check the sections near the confluence", line)
            log.info("run %s finished in %.1f s: %d reach(es) failed", p.cfg.run.name, p.result.elapsed_s,
                     len(p.result.failed))
    finally:
        for h in handlers:
            log.removeHandler(h)
            h.close()
    results = [p.result for p in plans]
    return results if many else results[0]


def _compute(plans: list[_Plan], workers: int, scheduler: str | None, progress: bool) -> None:
    """Run every planned reach; a reach with a junction boundary starts once the reach it joins is done."""
    total = sum(len(ev) for p in plans for ev in p.todo.values())
    bar = Progress(total, progress)
    submit, as_completed, close = _engine(workers, scheduler)
    try:
        waiting = []
        for p in plans:
            p.manifest.save()
            log.info("run %s: %d reach(es) to compute, %d unit(s) reused (config %s, caution: %s)",
                     p.cfg.run.name, len(p.todo), p.result.reused_units, p.cfg.path, CAUTION)
            for rid, entry in p.manifest.data["reaches"].items():
                if entry.get("status") == "failed":
                    log.error("reach %s: failed the pre-check - %s", rid, entry.get("error"))
            deps = pipeline.junction_order(p.cfg, list(p.todo))
            waiting.extend((p, rid, deps.get(rid) if deps.get(rid) in p.todo else None) for rid in p.todo)
        futures, finished = {}, set()
        while waiting or futures:
            ready = [w for w in waiting if w[2] is None or (id(w[0]), w[2]) in finished]
            waiting = [w for w in waiting if w not in ready]
            for p, rid, _ in ready:
                futures[submit(str(p.cfg.path), p.cfg.sha256, rid, p.todo[rid])] = (p, rid)
            if not futures:
                break
            fut = next(iter(as_completed(list(futures))))
            p, rid = futures.pop(fut)
            _record(p, rid, fut.result())
            finished.add((id(p), rid))
            bar.step(f"{p.cfg.run.name}/{rid}: {p.manifest.data['reaches'][rid]['status']}", len(p.todo[rid]))
    finally:
        close()


def _record(p: _Plan, rid: str, info: dict) -> None:
    p.manifest.record_reach(rid, info)
    p.manifest.save()
    level = logging.INFO if info["status"] == "complete" else logging.ERROR
    log.log(level, "reach %s: %s%s", rid, info["status"], f" - {info['error']}" if info["error"] else "")
    if "traceback" in info:
        log.error("%s", info["traceback"])
