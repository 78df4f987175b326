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

import logging
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..config import Config
from ..config.crosscheck import junction_order
from ..constants import CAUTION
from ..errors import OutputError
from ..naming import safe_name
from . import assemble, manifest
from .check import _as_config, precheck_reaches
from .engines import engine
from .inputs import Inputs, open_inputs

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
class _Plan:
    cfg: Config
    inputs: Inputs
    manifest: manifest.Manifest
    todo: dict[str, list[str]]          # reach id -> events to compute
    result: RunResult


def _plan(config, resume: bool) -> _Plan:
    cfg = _as_config(config)
    inputs = open_inputs(cfg)
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
    submit, as_completed, close = engine(workers, scheduler)
    try:
        waiting = []
        for p in plans:
            p.manifest.save()
            log.info("run %s: %d reach(es) to compute, %d unit(s) reused (config %s, caution: %s)",
                     p.cfg.run.name, len(p.todo), p.result.reused_units, p.cfg.path, CAUTION)
            for rid, entry in p.manifest.data["reaches"].items():
                if entry.get("status") == "failed":
                    log.error("reach %s: failed the pre-check - %s", rid, entry.get("error"))
            deps = junction_order(p.cfg, list(p.todo))
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
