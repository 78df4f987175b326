"""Reaches x events over one or many configs: validate, lock, compute on an engine, assemble.

``run()`` is the library entry point behind ``geoflow run`` (and ``geoflow.run``).

1. Validate (:func:`geoflow.batch.validate.validate`, exactly what ``geoflow check`` does) every
   config before anything is written: any problem raises one line, nothing written. With
   ``keep_going`` the reaches that fail validation are recorded as failed and the rest go on.
2. Connect the engine (a Dask scheduler that cannot be reached fails here, nothing written),
   then lock every output folder (a second run into the same folder is refused).
3. Clear what earlier runs left: the files a previous manifest records (with ``--resume``, all
   but those of the units it proves current) and temporary files of killed runs.
4. Compute: each reach is one task run in this process, in a local process pool (``workers >
   1``) or on a Dask cluster (``scheduler``). A reach with a junction boundary starts once the
   reach it joins is done. The manifest is saved after every reach, so a killed run can resume.
5. Assemble profile.csv, sections.gpkg, inundation.gpkg, mosaics and the final manifest, list
   files in the managed folders that no run recorded as stale, release the locks.
"""
from __future__ import annotations

import collections
import contextlib
import logging
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .. import timing
from ..config import Config
from ..config.crosscheck import junction_order
from ..constants import CAUTION
from ..errors import GeoflowError, OutputError, is_disk_full, write_error
from ..naming import safe_name
from ..sections.channel import describe_channel
from . import assemble, layout, manifest, reports, tasks
from .engines import engine
from .inputs import Inputs
from .lock import FolderLock
from .progress import Progress
from .tasks import GEOMETRY_CACHE, TaskSpec, check_reach
from .validate import as_config, validate

log = logging.getLogger("geoflow")
GEOMETRY_CACHE_STATIONS = 1_000_000  # ground points of geometry kept from validation for in-process tasks (~100 MB)


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
    stale_files: list = field(default_factory=list)           # files in managed folders no run recorded

    @property
    def failed(self) -> list[str]:
        return [rid for rid, r in self.reaches.items() if r.get("status") != "complete"]


@dataclass
class _Plan:
    cfg: Config
    inputs: Inputs
    problems: dict[str, str]
    hashes: dict
    identity: str
    fingerprints: tuple
    result: RunResult
    manifest: manifest.Manifest | None = None
    todo: dict[str, list[str]] = field(default_factory=dict)     # reach id -> events to compute
    remove: set = field(default_factory=set)                      # files of earlier runs to delete


def _plan(cfg: Config, others: tuple, keep_going: bool, runner) -> _Plan:
    """Validate one config (on the run's workers when there are some) and fix its input identity.

    In-process runs keep the geometry built while validating (up to GEOMETRY_CACHE_STATIONS
    ground points) for their tasks; runs on workers validate each reach there, in parallel, and
    the tasks build it again (cheap next to computing the reach), so nothing of a network's
    geometry is held here.
    """
    identity: dict = {}

    def fix_identity() -> None:          # once the inputs are known to open
        if not identity:
            identity["hashes"] = manifest.input_hashes(cfg)
            identity["ident"] = manifest.identity(cfg, identity["hashes"])
            identity["fingerprints"] = manifest.fingerprints(cfg)

    def elsewhere(rids):
        fix_identity()
        return _check_on(runner, cfg, identity["ident"], identity["fingerprints"], rids)
    if runner.parallel:
        checked = validate(cfg, others, keep_stations=0, elsewhere=elsewhere)
    else:
        checked = validate(cfg, others, keep_stations=GEOMETRY_CACHE_STATIONS)
    if not keep_going or not checked.reaches:
        checked.raise_problems()
    fix_identity()
    hashes, ident, fingerprints = identity["hashes"], identity["ident"], identity["fingerprints"]
    GEOMETRY_CACHE.update({(ident, rid): g for rid, g in checked.geometries.items()})
    return _Plan(cfg=cfg, inputs=checked.inputs, problems=checked.problems, hashes=hashes, identity=ident,
                 fingerprints=fingerprints, result=RunResult(config=cfg, output_dir=cfg.run.output_dir))


def _check_on(runner, cfg: Config, ident: str, fingerprints: tuple, rids: list):
    """Validate reaches on the run's workers: (reach id, problem or None, summary or None) as each ends."""
    handles = {runner.submit(TaskSpec(config_path=str(cfg.path), config_sha256=cfg.sha256, identity=ident,
                                      fingerprints=fingerprints, reach_id=rid, events=()), check_reach): rid
               for rid in rids}
    while handles:
        h = runner.wait(handles)
        rid = handles.pop(h)
        out = runner.result(h)
        if isinstance(out, dict):             # the worker died
            yield rid, f"reach {rid!r}: {out.get('error')}", None
        else:
            yield out


def _start(p: _Plan, resume: bool) -> None:
    """With the folder locked: decide what to reuse and remove, and start the manifest."""
    cfg = p.cfg
    previous = manifest.load_previous(cfg.run.output_dir)
    reuse = manifest.reusable_units(previous, cfg, p.identity, safe_name) if resume else set()
    keep = manifest.kept_files(previous, reuse)
    p.remove = manifest.previous_files(previous) - keep
    man = manifest.Manifest.start(cfg, p.hashes, p.identity, previous, reuse)
    for rid in [r for r, _ in p.inputs.reaches] + list(p.inputs.unusable):
        if rid in p.problems:
            err = p.problems[rid]
            man.record_reach(rid, {"status": "failed", "error": err,
                                   "events": {e.name: {"status": "failed", "error": err} for e in cfg.events}})
            continue
        events = [e.name for e in cfg.events if manifest.unit_key(rid, e.name) not in reuse]
        if events:
            p.todo[rid] = events
        else:
            man.data["reaches"][rid] = (previous or {}).get("reaches", {}).get(rid, {"status": "complete"})
    p.manifest = man
    p.result.reused_units = len(reuse)


def _clear_previous(p: _Plan) -> None:
    out = p.cfg.run.output_dir
    protect = {Path(f).resolve() for path in p.cfg.input_files().values() for f in layout.side_files(path)}
    removed = layout.remove_recorded(out, sorted(p.remove), protect)
    temps = manifest.clear_stale_temporaries(out)
    if removed or temps:
        log.info("run %s: removed %d file(s) of an earlier run and %d temporary file(s) of a killed run",
                 p.cfg.run.name, removed, temps)


def run(config, workers: int = 1, scheduler: str | None = None, resume: bool = False,
        progress: bool = False, keep_going: bool = False):
    """Run every reach x event of one config (-> RunResult) or of a list of configs (-> list).

    Raises a GeoflowError (nothing written) when validation finds a problem, unless ``keep_going``:
    then reaches that fail validation are recorded as failed and the others are computed.
    """
    many = isinstance(config, (list, tuple))
    cfgs = [as_config(c) for c in (config if many else [config])]
    with contextlib.ExitStack() as stack:
        tasks.REPORTS = stack.enter_context(_report_process(workers, scheduler, cfgs))  # warms up while we validate
        runner = engine(workers, scheduler)          # an unreachable scheduler fails here, before writing
        stack.callback(runner.close)
        stack.callback(GEOMETRY_CACHE.clear)
        plans = [_plan(c, tuple(o for o in cfgs if o is not c), keep_going, runner) for c in cfgs]  # raises, no writes
        results = _run_plans(plans, runner, stack, resume, progress)
    return results if many else results[0]


@contextlib.contextmanager
def _report_process(workers: int, scheduler, cfgs):
    helper = reports.start(workers, scheduler, cfgs)
    try:
        yield helper
    finally:
        tasks.REPORTS = None
        if helper is not None:
            helper.close()


def _run_plans(plans: list[_Plan], runner, stack: contextlib.ExitStack, resume: bool, progress: bool) -> list:
    """Lock, clear, compute and assemble every planned config (validation already passed)."""
    t0 = time.perf_counter()
    locks = [stack.enter_context(FolderLock(p.cfg.run.output_dir, p.cfg.run.name)) for p in plans]
    stack.enter_context(_logging([p.cfg.run.output_dir for p in plans]))
    for p, lock in zip(plans, locks):
        if lock.previous_owner:
            log.warning("run %s: took over the lock left by a run that ended without releasing it (%s)",
                        p.cfg.run.name, lock.previous_owner)
        _start(p, resume)
        _clear_previous(p)
    _compute(plans, runner, progress)
    for p in plans:
        p.result.elapsed_s = time.perf_counter() - t0
        _finish(p)
    return [p.result for p in plans]


def _finish(p: _Plan) -> None:
    try:
        with timing.stage("assemble"):
            assemble.finish(p.cfg, p.inputs, p.manifest, p.result)
    except Exception as exc:
        if not isinstance(exc, GeoflowError) and not is_disk_full(exc):
            raise
        err = exc if isinstance(exc, GeoflowError) else write_error(p.cfg.run.output_dir, exc)
        log.error("run %s: assembling the run-level outputs failed - %s", p.cfg.run.name, err)
        p.manifest.data["error"] = f"assembling the run-level outputs failed: {err}"
        with contextlib.suppress(GeoflowError):        # best effort: the disk may still be full
            p.manifest.save()
        raise err from None
    p.result.crossings = list(p.manifest.data.get("sections_crossing_other_reaches", []))
    for line in p.result.crossings:
        log.warning("%s; check the sections near the confluence", line)
    p.result.stale_files = list(p.manifest.data.get("stale_files", []))
    if p.result.stale_files:
        log.warning("run %s: %d file(s) in the output folder were not written by this run (listed in "
                    "manifest.json as stale_files), e.g. %s", p.cfg.run.name, len(p.result.stale_files),
                    p.result.stale_files[0])
    log.info("run %s finished in %.1f s: %d reach(es) failed", p.cfg.run.name, p.result.elapsed_s,
             len(p.result.failed))


@contextlib.contextmanager
def _logging(out_dirs: list[Path]):
    handlers = []
    log.setLevel(logging.INFO)
    try:
        for d in out_dirs:
            try:
                d.mkdir(parents=True, exist_ok=True)
                h = logging.FileHandler(d / layout.LOG_NAME, mode="a", encoding="utf-8")
            except OSError as exc:
                raise write_error(d / layout.LOG_NAME, exc) from None
            h.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
            log.addHandler(h)
            handlers.append(h)
        yield handlers
    finally:
        for h in handlers:
            log.removeHandler(h)
            h.close()


def _compute(plans: list[_Plan], runner, progress: bool) -> None:
    """Run every planned reach; a reach with a junction boundary starts once the reach it joins is done."""
    bar = Progress(sum(len(ev) for p in plans for ev in p.todo.values()), progress)
    waiting = []
    for p in plans:
        p.manifest.save()
        log.info("run %s: %d reach(es) to compute, %d unit(s) reused (config %s, caution: %s)",
                 p.cfg.run.name, len(p.todo), p.result.reused_units, p.cfg.path, CAUTION)
        for rid, entry in p.manifest.data["reaches"].items():
            if entry.get("status") == "failed":
                log.error("reach %s: failed validation - %s", rid, entry.get("error"))
        _log_cases(p)
        deps = junction_order(p.cfg, list(p.todo))
        waiting.extend((p, rid, deps.get(rid) if deps.get(rid) in p.todo else None) for rid in p.todo)
    after: dict = {}                  # (plan, reach) -> the reaches that wait for it
    handles: dict = {}
    for p, rid, dep in waiting:
        if dep is None:
            handles[runner.submit(_spec(p, rid))] = (p, rid)
        else:
            after.setdefault((id(p), dep), []).append((p, rid))
    computed: dict = {}               # (plan, reach) -> events computed in this run (for junctions)
    unrecorded: collections.deque = collections.deque()     # computed, report still being drawn
    while handles or unrecorded:
        if handles:
            h = runner.wait(handles)
            p, rid = handles.pop(h)
            info = runner.result(h)
            computed[(id(p), rid)] = [e for e, u in (info.get("events") or {}).items() if u.get("status") == "complete"]
            for q, dependent in after.pop((id(p), rid), []):
                handles[runner.submit(_spec(q, dependent, computed))] = (q, dependent)
            unrecorded.append((p, rid, info))
        # record in the order computed; wait for a report only when there is nothing else to do
        while unrecorded and (not handles or _report_done(unrecorded[0][2])):
            p, rid, info = unrecorded.popleft()
            pending = info.pop("report_pending", None)
            if pending is not None:
                pending.finish(info)
            _record(p, rid, info)
            bar.step(f"{p.cfg.run.name}/{rid}: {p.manifest.data['reaches'][rid]['status']}", len(p.todo[rid]))


def _report_done(info: dict) -> bool:
    pending = info.get("report_pending")
    return pending is None or pending.future.done()


def _log_cases(p: _Plan) -> None:
    """run.log: which roughness cases are computed and which classes keep their n in each."""
    entry = p.manifest.data.get("roughness_cases")
    if not entry:
        return
    log.info("run %s: roughness cases %s (%s)", p.cfg.run.name, ", ".join(entry["cases"]), entry["rule"])
    for case, keep in entry["classes_keeping_n"].items():
        if keep:
            log.warning("run %s: roughness case %r: class(es) %s give no n_%s and keep their n", p.cfg.run.name,
                        case, ", ".join(keep), case)


def _spec(p: _Plan, rid: str, computed: dict | None = None) -> TaskSpec:
    """The task of one reach; a junction reach gets the events of the reach it joins that this run
    computed (``computed``, possibly not recorded yet while their report is drawn) or reused."""
    down, _ = p.cfg.boundary.for_reach(rid)
    complete = ()
    if down.type == "junction":
        units = p.manifest.data["units"]
        done = set((computed or {}).get((id(p), down.reach), ()))
        complete = tuple(e.name for e in p.cfg.events if e.name in done or
                         units.get(manifest.unit_key(down.reach, e.name), {}).get("status") == "complete")
    return TaskSpec(config_path=str(p.cfg.path), config_sha256=p.cfg.sha256, identity=p.identity,
                    fingerprints=p.fingerprints, reach_id=rid, events=tuple(p.todo[rid]), junction_events=complete)


def _record(p: _Plan, rid: str, info: dict) -> None:
    for ev in p.todo[rid]:
        info.setdefault("events", {}).setdefault(ev, {"status": "failed", "error": info.get("error")})
    p.manifest.record_reach(rid, info)
    try:
        p.manifest.checkpoint(rid)
    except OutputError as exc:
        log.error("run %s: %s", p.cfg.run.name, exc)
        raise
    level = logging.INFO if info["status"] == "complete" else logging.ERROR
    log.log(level, "reach %s: %s%s", rid, info["status"], f" - {info['error']}" if info.get("error") else "")
    if info.get("channel"):
        log.info("%s", describe_channel(rid, info["channel"]))
    cal = info.get("calibration")
    if cal:
        mult = ", ".join(f"{g} x{m:.4f}" for g, m in cal["multipliers"].items())
        log.info("reach %s: calibrated to %d mark(s): %s, rmse %.4f m, %s", rid, cal["marks"], mult, cal["rmse_m"],
                 "well determined" if cal["well_determined"] else "NOT well determined")
        for w in cal.get("warnings", []):
            log.warning("%s", w)
    if "traceback" in info:
        log.error("%s", info["traceback"])
