"""Validation of a config and its inputs: what ``geoflow check`` reports and ``geoflow run`` does first.

``run`` calls the same :func:`validate` before it writes anything, so whatever ``check`` rejects,
``run`` rejects the same way (one line, exit status 2, nothing written), and the other way round.

Steps, each problem collected rather than raised at once where that makes sense:

1. the config (``load_config``), the inputs opened and cross-checked (land-cover classes and the
   channel class, reach ids named by events and per-reach tables, junctions, ``[mapping]
   cell_size`` against the DEM);
2. every reach: its id (path-safe, not too long, unique once made path-safe), its centreline
   inside the DEM and over DEM data, flow changes within its length;
3. every reach's sections cut and given Manning's n (what the run will use), stage / rating
   boundaries checked against the ground of the end sections, observed levels
   ([calibration] observations) within the sections of the reach they belong to, and its
   structures ([[structures]]) checked against their face sections;
4. no output may overwrite an input (:func:`geoflow.batch.layout.check_inputs_not_outputs`).

Reach-level problems (2-3) are returned by reach; :func:`check` and ``run`` raise them as one
line unless the caller keeps going past bad reaches (``run(..., keep_going=True)``).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry import box

from .. import timing
from ..config import Config, load_config
from ..config.crosscheck import boundary_level_problems, discharge_at_ends, raise_problems, reach_length_problems
from ..errors import GeoflowError, GeometryError, InputDataError
from ..naming import safe_name
from ..records import ReachGeometry
from ..sections.channel import describe_channel
from ..sections.common import points_along
from . import reach, structures
from .inputs import Inputs, open_inputs
from .layout import check_inputs_not_outputs
from .marks import check_within_sections

MAX_LISTED = 3      # problems spelt out in the one-line message; the rest are counted


@dataclass(frozen=True)
class ReachSummary:
    """What validation reports of a reach that passed: length (m), sections, flagged sections,
    warnings, ground points of all its sections, the chainages of its first and last section (m),
    lines describing its channel and structures."""

    length_m: float
    sections: int
    flagged: int
    warnings: tuple[str, ...]
    stations: int = 0           # ground points of all sections (the geometry's size)
    first_last: tuple[float, float] = (0.0, 0.0)
    details: tuple[str, ...] = ()

    @classmethod
    def of(cls, geom: ReachGeometry) -> "ReachSummary":
        details = [describe_channel(geom.reach_id, geom.channel)] if geom.channel else []
        for p in geom.structures:
            up, down = geom.sections[p.upstream], geom.sections[p.upstream + 1]
            details.append(f"{p.kind} {p.structure_id} at {p.chainage:g} m: faces sections {up.section_id} / "
                           f"{down.section_id} ({up.chainage:.1f} / {down.chainage:.1f} m)")
        return cls(float(geom.sections[-1].chainage), len(geom.sections), sum(1 for s in geom.sections if s.flags),
                   tuple(geom.warnings), sum(int(s.station.size) for s in geom.sections),
                   (float(geom.sections[0].chainage), float(geom.sections[-1].chainage)), tuple(details))


@dataclass
class CheckResult:
    """What :func:`check` found: the config, its opened inputs, a summary of every reach that passed
    (``reaches``), their geometry (``geometries``: all of them, or as many as the caller kept) and
    the problems by reach."""

    config: Config
    inputs: Inputs
    geometries: dict[str, ReachGeometry]
    problems: dict[str, str] = field(default_factory=dict)
    reaches: dict[str, ReachSummary] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        cfg = self.config
        lines = [f"config {cfg.path}: OK", f"DEM {cfg.terrain.dem} ({self.inputs.dem.crs.to_string()}, "
                 f"{self.inputs.dem.cell_size:g} m cells)",
                 f"{len(self.reaches) + len(self.problems)} reach(es), {len(cfg.events)} event(s): "
                 + ", ".join(e.name for e in cfg.events)]
        if cfg.roughness.cases:
            lines.append(f"roughness cases: {', '.join(cfg.roughness.all_cases())}")
        for rid, r in self.reaches.items():
            marks = self.inputs.marks.get(rid)
            observed = f", {marks.wse.size} observed level(s) to calibrate to" if marks is not None else ""
            lines.append(f"  reach {rid}: {r.length_m:.0f} m, {r.sections} sections, {r.flagged} flagged{observed}")
            lines.extend(f"    {d}" for d in r.details)
            lines.extend(f"    warning: {w}" for w in r.warnings)
        lines.extend(f"  reach {rid}: PROBLEM: {msg}" for rid, msg in self.problems.items())
        return lines

    def raise_problems(self) -> None:
        """Raise the reach problems as one GeometryError line (first few in full, the rest counted)."""
        if not self.problems:
            return
        msgs = list(self.problems.values())
        head = "; ".join(msgs[:MAX_LISTED])
        more = f" (and {len(msgs) - MAX_LISTED} more reach(es); `geoflow check` lists them all)" \
            if len(msgs) > MAX_LISTED else ""
        raise GeometryError(head + more)


def as_config(config: str | Path | Config) -> Config:
    return config if isinstance(config, Config) else load_config(config)


def validate(config: str | Path | Config, others: tuple = (), keep_stations: float = float("inf"),
             elsewhere=None) -> CheckResult:
    """Validate a config and its inputs (see the module notes); reach problems are returned, not raised.

    ``others``: configs run together with this one (their inputs are protected from its outputs).
    ``keep_stations``: keep the geometry of reaches (in layer order) while their sections' ground
    points add up to at most this many; the others are summarised only (a network's geometry need
    not fit in memory).
    ``elsewhere``: a callable ``(reach ids) -> iterable of (reach id, problem or None, summary or
    None)`` that checks reaches' geometry somewhere else (in parallel on a run's workers).
    """
    cfg = as_config(config)
    with timing.stage("inputs"):
        inputs = open_inputs(cfg)
    geoms: dict = {}
    summaries: dict = {}
    with inputs.dem.kept_open(), timing.stage("validate"):
        problems = reach_problems(cfg, inputs)
        todo = [rid for rid, _ in inputs.reaches if rid not in problems]
        found = elsewhere(todo) if elsewhere is not None else \
            (check_geometry(cfg, inputs, rid, keep=True) for rid in todo)
        kept = 0
        for rid, problem, summary, *geom in found:
            if problem is not None:
                problems[rid] = problem
                continue
            summaries[rid] = summary
            if geom and geom[0] is not None and kept + summary.stations <= keep_stations:
                geoms[rid], kept = geom[0], kept + summary.stations
    check_within_sections(cfg, inputs.marks, {rid: r.first_last for rid, r in summaries.items()})
    check_inputs_not_outputs(cfg, tuple(others))
    order = [rid for rid, _ in inputs.reaches] + list(inputs.unusable)
    problems = {rid: problems[rid] for rid in order if rid in problems}
    summaries = {rid: summaries[rid] for rid in order if rid in summaries}
    return CheckResult(config=cfg, inputs=inputs, geometries=geoms, problems=problems, reaches=summaries)


def check_geometry(cfg: Config, inputs: Inputs, rid: str, keep: bool = False) -> tuple:
    """(reach id, problem or None, ReachSummary or None[, geometry]): sections cut, n given,
    boundary levels checked against the end sections' ground; the geometry only with ``keep``."""
    from .tasks import release_memory
    try:
        geom = reach.build_geometry(cfg, inputs, rid, inputs.line_of(rid))
    except GeoflowError as exc:
        return (rid, str(exc), None) + ((None,) if keep else ())
    finally:
        release_memory()        # cutting a long valley's sections peaks at a few hundred MB of temporaries
    level = boundary_level_problems(cfg, rid, _end_ground(geom), _end_discharges(cfg, rid, geom))
    built = _structure_problems(cfg, geom)
    if level or built:
        return (rid, f"{cfg.path}: " + "; ".join(level + built), None) + ((None,) if keep else ())
    return (rid, None, ReachSummary.of(geom)) + ((geom,) if keep else ())


def check(config: str | Path | Config, keep_geometries: bool = True) -> CheckResult:
    """Validate config and inputs and cut every reach's sections; compute and write nothing.

    Raises a GeoflowError (one line) for any problem, reach problems included. With
    ``keep_geometries`` the result holds every reach's geometry (``geometries``); without, only
    their summaries (``reaches``), in bounded memory however large the network.
    """
    result = validate(config, keep_stations=float("inf") if keep_geometries else 0)
    result.raise_problems()
    return result


def reach_problems(cfg: Config, inputs: Inputs) -> dict[str, str]:
    """Cheap per-reach checks -> {reach_id: problem}; config-level problems raise a ConfigError."""
    names = [safe_name(r) for r, _ in inputs.reaches]
    if len(set(names)) != len(names):
        dup = sorted({r for r, n in zip((r for r, _ in inputs.reaches), names) if names.count(n) > 1})
        raise InputDataError(f"{cfg.reaches.centrelines}: reach ids {', '.join(dup)} become the same file name "
                             "once made path-safe; give them ids that differ in letters or digits")
    extent = box(*inputs.dem.bounds)
    problems = dict(inputs.unusable)
    no_data = []
    for rid, line in inputs.reaches:
        if not shapely.contains(extent, line):
            problems[rid] = (f"reach {rid!r}: centreline in {cfg.reaches.centrelines.name} runs outside the DEM "
                             f"{cfg.terrain.dem.name}; trim the line to the DEM or use a DEM that covers it")
        elif not np.isfinite(_ground_under(line, inputs.dem)).any():
            no_data.append(rid)
            problems[rid] = (f"reach {rid!r}: the DEM {cfg.terrain.dem.name} has no data under its centreline "
                             "(nodata there); use a DEM that covers the reach")
    if no_data and len(no_data) == len(inputs.reaches):
        raise InputDataError(f"{cfg.terrain.dem}: the DEM has no data under any centreline (is it all nodata, or "
                             "in another place than the centrelines?); check [terrain] dem")
    lengths = {rid: float(line.length) for rid, line in inputs.reaches}
    raise_problems(cfg, reach_length_problems(cfg, lengths))
    return problems


def _structure_problems(cfg: Config, geom: ReachGeometry) -> list[str]:
    """Problems of the reach's structures on its sections (a culvert wider than the valley, a
    bridge opening the face sections cannot hold, ...)."""
    if not geom.structures:
        return []
    return structures.check(cfg, geom, reach.build_tables(geom, cfg))


def _ground_under(line, dem, max_points: int = 2000) -> np.ndarray:
    """DEM ground (m, NaN where nodata) at points about one cell apart along ``line``."""
    count = int(min(max(line.length / dem.cell_size, 2), max_points))
    pts = points_along(line, np.linspace(0, line.length, count))
    return dem.sample(pts[:, 0], pts[:, 1])


def _end_ground(geom: ReachGeometry) -> dict[str, tuple[float, float]]:
    first, last = geom.sections[0], geom.sections[-1]
    return {"upstream": (float(np.min(first.elevation)), float(np.max(first.elevation))),
            "downstream": (float(np.min(last.elevation)), float(np.max(last.elevation)))}


def _end_discharges(cfg: Config, rid: str, geom: ReachGeometry) -> dict[str, np.ndarray]:
    length = geom.sections[-1].chainage
    q = np.array([discharge_at_ends(ev, rid, length) for ev in cfg.events], dtype=float).reshape(-1, 2)
    return {"upstream": q[:, 0], "downstream": q[:, 1]}
