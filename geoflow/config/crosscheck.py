"""Cross-checks of a loaded config against what its inputs hold (reaches, land cover, DEM).

Pure: the callers open the inputs and pass plain values. Every problem found is collected with
the TOML key it concerns and all are raised together in one ConfigError (as load_config does),
each naming the key and the input file and saying what to do.
"""
from __future__ import annotations

import difflib
import math
from collections.abc import Mapping

import numpy as np

from ..constants import MAX_NAME_LENGTH
from ..errors import ConfigError
from .model import BoundarySpec, Config, Event


def raise_problems(cfg: Config, problems: list[str]) -> None:
    """One ConfigError listing every problem (the first in full, then the others), if any."""
    if not problems:
        return
    head = f"{cfg.path}: {problems[0]}"
    more = f" (and {len(problems) - 1} more: " + "; ".join(problems[1:]) + ")" if len(problems) > 1 else ""
    raise ConfigError(head + more, problems=[f"{cfg.path}: {p}" for p in problems])


def input_problems(cfg: Config, reach_ids: list[str], classes: list[str], dem_cell: float) -> list[str]:
    """Problems of the config against the inputs' reach ids, land-cover classes and DEM cell size."""
    return (_class_problems(cfg, classes) + _reach_name_problems(cfg, reach_ids) + _junction_problems(cfg, reach_ids)
            + _cell_size_problems(cfg, dem_cell) + _calibration_problems(cfg, classes)
            + _rating_problems(cfg, reach_ids))


def _calibration_problems(cfg: Config, present: list[str]) -> list[str]:
    """Classes named in [calibration] adjust must exist; the channel class cannot be in two groups."""
    cal = cfg.calibration
    if cal is None:
        return []
    known = set(present) | set(cfg.roughness.classes)
    out = []
    for i, group in enumerate(cal.adjust):
        if isinstance(group, str):
            continue
        unknown = [c for c in group if c not in known]
        if unknown:
            out.append(f"[calibration] adjust[{i}]: class(es) {', '.join(map(repr, unknown))} are neither in field "
                       f"{cfg.roughness.class_field!r} of {cfg.roughness.landcover.name} nor in [roughness.classes] "
                       f"(classes: {', '.join(sorted(known))})")
        if "channel" in cal.adjust and cfg.roughness.channel_class in group:
            out.append(f"[calibration] adjust[{i}]: the channel class {cfg.roughness.channel_class!r} is already the "
                       "'channel' group; take it out of this list or drop 'channel'")
    return out


def _rating_problems(cfg: Config, reach_ids: list[str]) -> list[str]:
    """Ratings need a boundary that gives a level for any discharge: not a junction, a rating that covers them."""
    rc = cfg.rating_curves
    if rc is None:
        return []
    out = []
    junctions = [rid for rid in reach_ids if cfg.boundary.for_reach(rid)[0].type == "junction"]
    if junctions and rc.downstream is None:
        out.append(f"[rating_curves]: reach(es) {', '.join(map(repr, junctions))} end at a junction, which gives "
                   "levels only for the receiving reach's events; add [rating_curves] downstream = { type = ... } "
                   "(e.g. normal_depth) for the ratings")
    specs = {rid: rc.downstream or cfg.boundary.for_reach(rid)[0] for rid in reach_ids}
    for rid, spec in specs.items():
        if spec.type == "rating" and (rc.discharges[0] < spec.discharge[0] or rc.discharges[-1] > spec.discharge[-1]):
            where = "[rating_curves] downstream" if rc.downstream is not None else _where(cfg, rid, "downstream")
            out.append(f"{where}: rating discharges {rc.discharges[0]:g}-{rc.discharges[-1]:g} m3/s of reach {rid!r} "
                       f"go beyond the boundary rating ({spec.discharge[0]:g}-{spec.discharge[-1]:g} m3/s); extend it")
            break
    return out


def _class_problems(cfg: Config, present: list[str]) -> list[str]:
    out = []
    missing = [c for c in present if c not in cfg.roughness.classes]
    if missing and cfg.roughness.default_n is None:
        out.append(f"[roughness.classes]: land-cover class(es) {', '.join(map(repr, missing))} in field "
                   f"{cfg.roughness.class_field!r} of {cfg.roughness.landcover.name} have no Manning's n; add "
                   "[roughness.classes.<name>] tables or set [roughness] default_n")
    if cfg.roughness.channel_class not in present:
        near = difflib.get_close_matches(cfg.roughness.channel_class, present, n=1)
        hint = f"did you mean {near[0]!r}? " if near else ""
        out.append(f"[roughness] channel_class {cfg.roughness.channel_class!r} matches no polygon in field "
                   f"{cfg.roughness.class_field!r} of {cfg.roughness.landcover.name} (classes there: "
                   f"{', '.join(present)}); {hint}name the class that marks the main channel")
    return out


def _reach_name_problems(cfg: Config, reach_ids: list[str]) -> list[str]:
    out = []
    known = set(reach_ids)
    listing = f"(reaches: {', '.join(sorted(known))})"
    for rid in reach_ids:
        if len(rid) > MAX_NAME_LENGTH:
            out.append(f"[reaches] id_field: reach id {rid[:40]!r}... in {cfg.reaches.centrelines.name} is "
                       f"{len(rid)} characters long; reach ids become file names, keep them to {MAX_NAME_LENGTH}")
    out += _event_reach_problems(cfg, known, listing)
    channel = cfg.channel.reaches if cfg.channel is not None else {}
    for table, names in (("sections.reaches", cfg.sections.reaches), ("boundary.reaches", cfg.boundary.reaches),
                         ("channel.reaches", channel)):
        for rid in names:
            if rid not in known:
                out.append(f"[{table}.{rid}]: names a reach that is not in {cfg.reaches.centrelines.name} {listing}")
    for s in cfg.structures:
        if s.reach not in known:
            near = difflib.get_close_matches(s.reach, sorted(known), n=1)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            out.append(f"{s.where} reach: {s.reach!r} is not a reach of {cfg.reaches.centrelines.name} {listing}{hint}")
    return out


def _event_reach_problems(cfg: Config, known: set, listing: str) -> list[str]:
    out = []
    for ev in cfg.events:
        if not isinstance(ev.discharge, float):
            for rid in ev.discharge:
                if rid not in known:
                    out.append(f"[[events]] {ev.name!r} discharge: names reach {rid!r}, which is not in "
                               f"{cfg.reaches.centrelines.name} {listing}")
            for rid in sorted(known - set(ev.discharge)):
                out.append(f"[[events]] {ev.name!r} discharge: gives no value for reach {rid!r}; add "
                           f"{rid} = <m3/s> to its discharge table")
        for i, ch in enumerate(ev.changes):
            if ch.reach is not None and ch.reach not in known:
                out.append(f"[[events]] {ev.name!r} changes[{i}]: names reach {ch.reach!r}, which is not in "
                           f"{cfg.reaches.centrelines.name} {listing}")
    return out


def _junction_problems(cfg: Config, reach_ids: list[str]) -> list[str]:
    known = set(reach_ids)
    out = []
    for rid in reach_ids:
        down, _ = cfg.boundary.for_reach(rid)
        if down.type == "junction" and (down.reach not in known or down.reach == rid):
            out.append(f"{_where(cfg, rid, 'downstream')}: junction reach {down.reach!r} must be another reach of "
                       f"{cfg.reaches.centrelines.name} (reaches: {', '.join(sorted(known))})")
    if not out:
        try:
            junction_order(cfg, reach_ids)
        except ConfigError as exc:
            out.append(str(exc).split(": ", 1)[-1])
    return out


def _cell_size_problems(cfg: Config, dem_cell: float) -> list[str]:
    cell = cfg.mapping.cell_size
    if cell is None:
        return []
    ratio = cell / dem_cell
    if round(ratio) < 1 or abs(ratio - round(ratio)) > 1e-6 * max(1.0, ratio):
        return [f"[mapping] cell_size: {cell:g} m is not a whole multiple of the DEM cell size {dem_cell:g} m "
                f"({cfg.terrain.dem.name}); use {dem_cell:g}, {2 * dem_cell:g}, {3 * dem_cell:g}, ... or leave it out"]
    return []


def reach_length_problems(cfg: Config, lengths: Mapping[str, float]) -> list[str]:
    """Flow changes must lie within the reach they apply to (0 < chainage < reach length), and
    structures with both their faces on their reach."""
    out = _structure_chainage_problems(cfg, lengths)
    for ev in cfg.events:
        for i, ch in enumerate(ev.changes):
            for rid in ([ch.reach] if ch.reach is not None else list(lengths)):
                length = lengths.get(rid)
                if length is not None and ch.chainage >= length:
                    hint = "" if ch.reach is not None else "; add reach = \"<id>\" to say which reach it belongs to"
                    out.append(f"[[events]] {ev.name!r} changes[{i}]: chainage {ch.chainage:g} m is beyond the "
                               f"downstream end of reach {rid!r} ({length:.1f} m long); a flow change must lie "
                               f"within its reach{hint}")
    return out


def _structure_chainage_problems(cfg: Config, lengths: Mapping[str, float]) -> list[str]:
    out = []
    for s in cfg.structures:
        length = lengths.get(s.reach)
        up, down = s.faces
        if length is not None and (up < 0.0 or down > length):
            out.append(f"{s.where} chainage: {s.chainage:g} m puts its faces at {up:g}-{down:g} m, off reach "
                       f"{s.reach!r} (0-{length:.1f} m); a structure needs both faces on its reach (chainage from "
                       f"{s.half_gap:g} to {length - s.half_gap:.1f} m)")
    return out


def boundary_level_problems(cfg: Config, reach_id: str, end_ground: Mapping[str, tuple[float, float]],
                            discharge_at_end: Mapping[str, np.ndarray]) -> list[str]:
    """Stage and rating boundaries checked against the ground of the reach's end sections.

    ``end_ground``: {"downstream" | "upstream": (lowest ground, highest ground) m of the last /
    first section}; ``discharge_at_end``: the events' discharges there (m3/s). A level at or below
    the lowest ground, or more than ``ABOVE_GROUND_LIMIT`` m above the highest ground (another
    datum or unit is the usual cause), is a problem; so is an event discharge outside a rating.
    """
    out = []
    down, up = cfg.boundary.for_reach(reach_id)
    checks = [(which, spec, _where(cfg, reach_id, which), discharge_at_end.get(which))
              for which, spec in (("downstream", down), ("upstream", up))]
    if cfg.rating_curves is not None and cfg.rating_curves.downstream is not None:   # rating ranges: _rating_problems
        checks.append(("downstream", cfg.rating_curves.downstream, "[rating_curves] downstream",
                       np.asarray(cfg.rating_curves.discharges)))
    for which, spec, where, q_end in checks:
        if spec is None or spec.type not in ("stage", "rating") or which not in end_ground:
            continue
        low, high = end_ground[which]
        levels = _levels(spec, q_end)
        if spec.type == "rating" and not where.startswith("[rating_curves]"):
            q = np.asarray(q_end if q_end is not None else [], dtype=float)
            bad = q[(q < spec.discharge[0]) | (q > spec.discharge[-1])]
            if bad.size:
                out.append(f"{where}: event discharge {bad[0]:g} m3/s at the {which} end of reach {reach_id!r} is "
                           f"outside the rating ({spec.discharge[0]:g}-{spec.discharge[-1]:g} m3/s); extend it")
        for w in levels:
            if w <= low:
                out.append(f"{where}: level {w:.3f} m is at or below the lowest ground {low:.3f} m of "
                           f"the {which} section of reach {reach_id!r}; raise it (or check its vertical datum)")
                break
            if w > high + ABOVE_GROUND_LIMIT:
                out.append(f"{where}: level {w:.3f} m is {w - high:.1f} m above the highest ground {high:.3f} m of "
                           f"the {which} section of reach {reach_id!r}; check the level, its vertical datum and units")
                break
    return out


#: a boundary level this far (m) above the highest ground of its section is refused as implausible
ABOVE_GROUND_LIMIT = 10.0


def _levels(spec: BoundarySpec, q) -> list[float]:
    if spec.type == "stage":
        return [float(spec.wse)]
    if q is None or len(q) == 0:
        return [float(spec.stage[0]), float(spec.stage[-1])]
    qq = np.clip(np.asarray(q, dtype=float), spec.discharge[0], spec.discharge[-1])
    return [float(w) for w in np.interp(qq, spec.discharge, spec.stage)]


def _where(cfg: Config, reach_id: str, which: str) -> str:
    over = cfg.boundary.reaches.get(reach_id, {})
    return f"[boundary.reaches.{reach_id}] {which}" if which in over else f"[boundary] {which}"


def discharge_at_ends(event: Event, reach_id: str, length: float) -> tuple[float, float]:
    """(upstream, downstream) discharge of ``event`` on a reach of ``length`` m (m3/s)."""
    q0 = event.upstream_discharge(reach_id)
    q0 = math.nan if q0 is None else float(q0)
    q1 = q0
    for ch in event.changes_for(reach_id):
        if ch.chainage <= length + 1e-6:
            q1 = ch.discharge
    return q0, q1


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
