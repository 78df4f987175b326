"""``geoflow check``: validate a config and its inputs and cut every reach's sections; write nothing."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import shapely
from shapely.geometry import box

from ..config import Config, load_config
from ..errors import GeoflowError, GeometryError
from ..naming import safe_name
from ..records import ReachGeometry
from . import reach
from .inputs import Inputs, open_inputs


@dataclass
class CheckResult:
    config: Config
    inputs: Inputs
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


def precheck_reaches(cfg: Config, inputs: Inputs) -> dict[str, str]:
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
    inputs = open_inputs(cfg)
    problems = precheck_reaches(cfg, inputs)
    geoms = {}
    for rid, line in inputs.reaches:
        if rid in problems:
            continue
        try:
            geoms[rid] = reach.build_geometry(cfg, inputs, rid, line)
        except GeoflowError as exc:
            problems[rid] = str(exc)
    if not geoms:
        raise GeometryError(next(iter(problems.values())))
    return CheckResult(config=cfg, inputs=inputs, geometries=geoms, problems=problems)
