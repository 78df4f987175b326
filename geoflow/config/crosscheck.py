"""Cross-checks of a loaded config against what its inputs hold (reach ids, land-cover classes).

Pure: the callers open the inputs and pass plain lists. Each problem raises one ConfigError
naming the TOML key and the input file, and saying what to do.
"""
from __future__ import annotations

from ..errors import ConfigError
from .model import Config


def check_classes(cfg: Config, present: list[str]) -> None:
    """Every land-cover class ``present`` in the layer has an n, or ``[roughness] default_n`` is set."""
    missing = [c for c in present if c not in cfg.roughness.classes]
    if missing and cfg.roughness.default_n is None:
        raise ConfigError(
            f"{cfg.roughness.landcover}: land-cover class(es) {', '.join(map(repr, missing))} in field "
            f"{cfg.roughness.class_field!r} have no Manning's n; add [roughness.classes.<name>] tables or set "
            f"[roughness] default_n"
        )


def check_events(cfg: Config, reach_ids: list[str]) -> None:
    """Reach ids named by events, per-reach tables and junction boundaries exist in the centrelines."""
    known = set(reach_ids)
    for ev in cfg.events:
        if not isinstance(ev.discharge, float):
            for rid in ev.discharge:
                if rid not in known:
                    raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} discharge names reach {rid!r}, which is "
                                      f"not in {cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
            for rid in known - set(ev.discharge):
                raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} discharge gives no value for reach {rid!r}; "
                                  f"add {rid} = <m3/s> to its discharge table")
        for ch in ev.changes:
            if ch.reach is not None and ch.reach not in known:
                raise ConfigError(f"{cfg.path}: [[events]] {ev.name!r} changes names unknown reach {ch.reach!r}")
    for rid in cfg.sections.reaches:
        if rid not in known:
            raise ConfigError(f"{cfg.path}: [sections.reaches.{rid}] names a reach that is not in "
                              f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
    for rid in known:
        down, _ = cfg.boundary.for_reach(rid)
        if down.type == "junction":
            where = f"[boundary.reaches.{rid}] downstream" if rid in cfg.boundary.reaches else "[boundary] downstream"
            if down.reach not in known or down.reach == rid:
                raise ConfigError(f"{cfg.path}: {where}: junction reach {down.reach!r} must be another reach of "
                                  f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
    junction_order(cfg, sorted(known))
    for rid in cfg.boundary.reaches:
        if rid not in known:
            raise ConfigError(f"{cfg.path}: [boundary.reaches.{rid}] names a reach that is not in "
                              f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")


def junction_order(cfg: Config, reach_ids: list[str]) -> dict[str, str]:
    """{reach: the reach whose WSE is its downstream boundary}; raises on a cycle."""
    deps = {}
    for rid in reach_ids:
        down, _ = cfg.boundary.for_reach(rid)
        if down.type == "junction":
            deps[rid] = down.reach
    for start in deps:
        seen, cur = {start}, start
        while cur in deps:
            cur = deps[cur]
            if cur in seen:
                raise ConfigError(f"{cfg.path}: junction boundaries form a loop through reach {start!r}; "
                                  "each chain must end at a reach with its own downstream boundary")
            seen.add(cur)
    return deps
