"""Readers for each TOML table: every problem is recorded with its TOML path, none raised.

Used by :func:`geoflow.config.load_config`, which reports all problems together.
"""
from __future__ import annotations

import difflib
import math
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from ..constants import MAX_NAME_LENGTH
from ..errors import GeoflowError
from ..roughness.tables import N_RANGE, read_class_table, reference_entry
from .model import (
    BOUNDARY_TYPES,
    FRICTION_SLOPE_METHODS,
    MAPPING_OUTPUTS,
    REGIMES,
    SAFE_NAME,
    VERTICAL_UNITS,
    BoundaryConfig,
    BoundarySpec,
    Event,
    FlowChange,
    HydraulicsConfig,
    MappingConfig,
    ReachesConfig,
    RoughnessClass,
    RoughnessConfig,
    RunConfig,
    SectionsConfig,
    TerrainConfig,
)
from .read_analysis import read_cases

# ----------------------------------------------------------------------------------------------
# Reading helpers: each records a problem (with its TOML path) instead of raising at once.


class _Reader:
    def __init__(self, base: Path, source: str):
        self.base = base
        self.source = source
        self.problems: list[str] = []

    def problem(self, where: str, message: str) -> None:
        self.problems.append(f"{where}: {message}")

    def table(self, parent: Mapping, key: str, where: str, required: bool = True) -> dict | None:
        value = parent.get(key)
        if value is None:
            if required:
                self.problem(where, "missing table; add it to the config")
            return None
        if not isinstance(value, dict):
            self.problem(where, f"must be a table, got {type(value).__name__}")
            return None
        return value

    def known(self, tbl: Mapping, allowed: tuple[str, ...], where: str) -> None:
        for key in tbl:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else f"; allowed keys: {', '.join(allowed)}"
                self.problem(f"{where} {key}", f"unknown key{hint}")

    def value(self, tbl: Mapping, key: str, where: str, kind: str, required: bool = False, default: Any = None):
        at = f"{where} {key}"
        if key not in tbl:
            if required:
                words = {"string": "text value", "number": "number", "number positive": "number greater than 0",
                         "number non-negative": "number (0 or more)"}[kind]
                self.problem(at, f"missing; give a {words}")
            return default
        v = tbl[key]
        if kind == "string":
            if not isinstance(v, str) or not v.strip():
                self.problem(at, f"must be a non-empty string, got {v!r}")
                return default
            return v
        if kind.startswith("number"):
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                self.problem(at, f"must be a number, got {v!r}")
                return default
            v = float(v)
            if "positive" in kind and v <= 0:
                self.problem(at, f"must be greater than 0, got {v:g}")
                return default
            if "non-negative" in kind and v < 0:
                self.problem(at, f"must be 0 or more, got {v:g}")
                return default
            return v
        raise AssertionError(kind)

    def flag(self, tbl: Mapping, key: str, where: str, default: bool) -> bool:
        v = tbl.get(key, default)
        if not isinstance(v, bool):
            self.problem(f"{where} {key}", f"must be true or false, got {v!r}")
            return default
        return v

    def path(self, tbl: Mapping, key: str, where: str, required: bool = True) -> Path | None:
        text = self.value(tbl, key, where, "string", required=required)
        if text is None:
            return None
        p = Path(text)
        p = p if p.is_absolute() else (self.base / p)
        return p.resolve()

    def existing(self, tbl: Mapping, key: str, where: str) -> Path | None:
        p = self.path(tbl, key, where)
        if p is not None and not p.exists():
            self.problem(f"{where} {key}", f"file not found: {p}; check the path (relative to {self.source})")
        return p

    def choice(self, tbl: Mapping, key: str, where: str, choices: tuple[str, ...], default: str | None):
        v = self.value(tbl, key, where, "string", required=default is None, default=default)
        if v is not None and v not in choices:
            close = difflib.get_close_matches(str(v), choices, n=1)
            hint = f"did you mean {close[0]!r}?" if close else f"use one of {', '.join(choices)}"
            self.problem(f"{where} {key}", f"{v!r} is not allowed; {hint}")
            return default
        return v


def _read_run(r: _Reader, doc: dict) -> RunConfig | None:
    t = r.table(doc, "run", "[run]")
    if t is None:
        return None
    r.known(t, ("name", "output_dir"), "[run]")
    name = r.value(t, "name", "[run]", "string", required=True)
    if name is not None and not SAFE_NAME.match(name):
        r.problem("[run] name", f"{name!r} must be letters, digits, '_', '-' or '.'")
    elif name is not None and len(name) > MAX_NAME_LENGTH:
        r.problem("[run] name", f"is {len(name)} characters long; keep it to {MAX_NAME_LENGTH}")
    out = r.path(t, "output_dir", "[run]")
    if out is not None and out.exists() and not out.is_dir():
        r.problem("[run] output_dir", f"{out} exists and is not a folder; choose a folder name")
    return RunConfig(name=name, output_dir=out) if name and out else None


def _read_terrain(r: _Reader, doc: dict) -> TerrainConfig | None:
    t = r.table(doc, "terrain", "[terrain]")
    if t is None:
        return None
    r.known(t, ("dem", "vertical_unit"), "[terrain]")
    dem = r.existing(t, "dem", "[terrain]")
    unit = r.choice(t, "vertical_unit", "[terrain]", VERTICAL_UNITS, "m")
    return TerrainConfig(dem=dem, vertical_unit=unit) if dem else None


def _read_reaches(r: _Reader, doc: dict) -> ReachesConfig | None:
    t = r.table(doc, "reaches", "[reaches]")
    if t is None:
        return None
    r.known(t, ("centrelines", "layer", "id_field", "check_direction"), "[reaches]")
    path = r.existing(t, "centrelines", "[reaches]")
    layer = r.value(t, "layer", "[reaches]", "string")
    id_field = r.value(t, "id_field", "[reaches]", "string", default="reach_id")
    check = r.flag(t, "check_direction", "[reaches]", True)
    return ReachesConfig(centrelines=path, layer=layer, id_field=id_field, check_direction=check) if path else None


def _read_sections(r: _Reader, doc: dict) -> SectionsConfig | None:
    t = r.table(doc, "sections", "[sections]")
    if t is None:
        return None
    r.known(t, ("spacing", "width", "sample_step", "rise", "lines", "lines_layer", "storage_areas",
                "storage_areas_layer", "detect_storage", "reaches"), "[sections]")
    base = _read_section_keys(r, t, "[sections]", None)
    lines = r.existing(t, "lines", "[sections]") if "lines" in t else None
    lines_layer = r.value(t, "lines_layer", "[sections]", "string")
    storage = r.existing(t, "storage_areas", "[sections]") if "storage_areas" in t else None
    storage_layer = r.value(t, "storage_areas_layer", "[sections]", "string")
    detect = r.flag(t, "detect_storage", "[sections]", True)
    overrides = {}
    for rid, sub in (r.table(t, "reaches", "[sections.reaches]", required=False) or {}).items():
        where = f"[sections.reaches.{rid}]"
        if not isinstance(sub, dict):
            r.problem(where, "must be a table with spacing, width and/or sample_step")
            continue
        r.known(sub, ("spacing", "width", "sample_step", "rise"), where)
        if base is not None and (o := _read_section_keys(r, sub, where, base)) is not None:
            overrides[str(rid)] = o
    if base is None:
        return None
    return SectionsConfig(base.spacing, base.width, base.sample_step, rise=base.rise, lines=lines,
                          lines_layer=lines_layer, storage_areas=storage, storage_areas_layer=storage_layer,
                          detect_storage=detect, reaches=MappingProxyType(overrides))


def _read_section_keys(r: _Reader, t: dict, where: str, base: SectionsConfig | None) -> SectionsConfig | None:
    need = base is None
    spacing = r.value(t, "spacing", where, "number positive", required=need, default=base and base.spacing)
    width = r.value(t, "width", where, "number positive", required=need, default=base and base.width)
    step = r.value(t, "sample_step", where, "number positive", default=base and base.sample_step)
    rise = r.value(t, "rise", where, "number positive", default=base and base.rise)
    if width is not None and step is not None and step >= width / 4:
        r.problem(f"{where} sample_step", f"{step:g} m is too coarse for a {width:g} m wide section; use at most width/4")
    if spacing is None or width is None:
        return None
    return SectionsConfig(spacing=spacing, width=width, sample_step=step, rise=rise)


def _read_class(r: _Reader, name: str, t: Any) -> RoughnessClass | None:
    where = f"[roughness.classes.{name}]"
    if not isinstance(t, dict):
        r.problem(where, f"must be a table with n = ..., got {t!r}")
        return None
    r.known(t, ("n", "n_low", "n_high", "n_by_depth", "n_by_discharge", "reference"), where)
    ref = _reference(r, t, where)
    vals = {k: r.value(t, k, where, "number positive", required=(k == "n" and ref is None), default=ref and ref[k])
            for k in ("n", "n_low", "n_high")}
    for k, v in vals.items():
        if v is not None and not N_RANGE[0] <= v <= N_RANGE[1]:
            r.problem(f"{where} {k}", f"Manning's n = {v:g} is outside {N_RANGE[0]}-{N_RANGE[1]}; check the units "
                                      "(s/m^(1/3))")
            return None
    n, lo, hi = vals["n"], vals["n_low"], vals["n_high"]
    if n is None:
        return None
    if (lo is not None and lo > n) or (hi is not None and hi < n):
        r.problem(where, f"need n_low <= n <= n_high, got {lo}, {n}, {hi}")
    laws = {k: _read_n_law(r, t[k], f"{where} {k}") for k in ("n_by_depth", "n_by_discharge") if k in t}
    if len(laws) == 2:
        r.problem(where, "give n_by_depth or n_by_discharge, not both")
    return RoughnessClass(n=n, n_low=lo, n_high=hi, **{k: v for k, v in laws.items() if v})


def _reference(r: _Reader, t: dict, where: str) -> dict | None:
    """n, n_low, n_high from the built-in table of typical values (``reference = "<key>"``)."""
    key = r.value(t, "reference", where, "string")
    if key is None:
        return None
    try:
        row = reference_entry(key)
    except GeoflowError as exc:
        r.problem(f"{where} reference", str(exc))
        return None
    return {"n": row.normal, "n_low": row.minimum, "n_high": row.maximum}


def _read_n_law(r: _Reader, v: Any, where: str) -> tuple[tuple[float, float], ...]:
    """[[x, n], ...] with x >= 0 strictly increasing and n in 0.005-1.0."""
    ok = isinstance(v, list) and len(v) >= 1 and all(
        isinstance(p, list) and len(p) == 2 and all(isinstance(x, (int, float)) and not isinstance(x, bool)
                                                     for x in p) for p in v)
    if not ok:
        r.problem(where, "must be a list of [value, n] pairs, e.g. [[0.5, 0.06], [2.0, 0.035]]")
        return ()
    xs, ns = [float(p[0]) for p in v], [float(p[1]) for p in v]
    if xs[0] < 0 or any(b <= a for a, b in zip(xs, xs[1:])):
        r.problem(where, "the first values (depth in m or discharge in m3/s) must be >= 0 and strictly increasing")
        return ()
    if any(not N_RANGE[0] <= x <= N_RANGE[1] for x in ns):
        r.problem(where, f"Manning's n values must lie in {N_RANGE[0]}-{N_RANGE[1]}")
        return ()
    return tuple(zip(xs, ns))


def _read_roughness(r: _Reader, doc: dict) -> RoughnessConfig | None:
    t = r.table(doc, "roughness", "[roughness]")
    if t is None:
        return None
    keys = ("landcover", "layer", "class_field", "channel_class", "default_n", "classes", "table", "cases")
    r.known(t, keys, "[roughness]")
    path = r.existing(t, "landcover", "[roughness]")
    layer = r.value(t, "layer", "[roughness]", "string")
    field_ = r.value(t, "class_field", "[roughness]", "string", required=True)
    channel = r.value(t, "channel_class", "[roughness]", "string", required=True)
    default_n = r.value(t, "default_n", "[roughness]", "number positive")
    table = r.existing(t, "table", "[roughness]") if "table" in t else None
    classes = _read_csv_classes(r, table) if table is not None and table.exists() else {}
    raw = r.table(t, "classes", "[roughness.classes]", required=table is None) or {}
    classes.update({str(k): c for k, v in raw.items() if (c := _read_class(r, str(k), v)) is not None})
    if classes and channel is not None and channel not in classes and default_n is None:
        r.problem("[roughness] channel_class", f"{channel!r} has no [roughness.classes.{channel}] table; add one")
    cases = read_cases(r, t)
    if not (path and field_ and channel):
        return None
    return RoughnessConfig(landcover=path, layer=layer, class_field=field_, channel_class=channel,
                           classes=MappingProxyType(classes), default_n=default_n, table=table, cases=cases)


def _read_csv_classes(r: _Reader, path: Path) -> dict[str, RoughnessClass]:
    try:
        rows = read_class_table(path)
    except GeoflowError as exc:
        r.problem("[roughness] table", str(exc))
        return {}
    return {k: RoughnessClass(n=v["n"], n_low=v.get("n_low"), n_high=v.get("n_high")) for k, v in rows.items()}


def _read_discharge(r: _Reader, v: Any, where: str) -> float | Mapping[str, float] | None:
    if isinstance(v, dict):
        out = {}
        for reach in v:
            qv = r.value(v, reach, where, "number positive")
            if qv is not None:
                out[str(reach)] = qv
        return MappingProxyType(out) if out else None
    return r.value({"discharge": v}, "discharge", where.rsplit(" ", 1)[0], "number positive", required=True)


def _read_changes(r: _Reader, raw: Any, where: str) -> tuple[FlowChange, ...]:
    if not isinstance(raw, list):
        r.problem(f"{where} changes", "must be a list of {chainage = ..., discharge = ...} tables")
        return ()
    out = []
    for i, c in enumerate(raw):
        at = f"{where} changes[{i}]"
        if not isinstance(c, dict):
            r.problem(at, f"must be a table, got {c!r}")
            continue
        r.known(c, ("chainage", "discharge", "reach"), at)
        ch = r.value(c, "chainage", at, "number non-negative", required=True)
        q = r.value(c, "discharge", at, "number positive", required=True)
        reach = r.value(c, "reach", at, "string")
        if ch is not None and q is not None:
            out.append(FlowChange(chainage=ch, discharge=q, reach=reach))
    return tuple(out)


def _read_events(r: _Reader, doc: dict) -> tuple[Event, ...]:
    raw = doc.get("events")
    if raw is None:
        r.problem("[[events]]", "missing; add at least one [[events]] with name and discharge")
        return ()
    if not isinstance(raw, list) or not raw:
        r.problem("[[events]]", "must be an array of tables ([[events]]) with name and discharge")
        return ()
    events, seen = [], set()
    for i, t in enumerate(raw):
        where = f"[[events]][{i}]"
        if not isinstance(t, dict):
            r.problem(where, "must be a table")
            continue
        r.known(t, ("name", "discharge", "changes"), where)
        name = r.value(t, "name", where, "string", required=True)
        if name is not None:
            where = f"[[events]] {name!r}"
            if len(name) > MAX_NAME_LENGTH:
                where = f"[[events]][{i}]"
                r.problem(f"{where} name", f"is {len(name)} characters long; event names become file names, "
                                           f"keep them to {MAX_NAME_LENGTH}")
            elif not SAFE_NAME.match(name):
                r.problem(f"{where} name", "use letters, digits, '_', '-' or '.' (it becomes a file name)")
            if name in seen:
                r.problem(f"{where} name", "duplicate event name; names must be unique")
            seen.add(name)
        q = _read_discharge(r, t.get("discharge"), f"{where} discharge") if "discharge" in t else None
        if "discharge" not in t:
            r.problem(f"{where} discharge", "missing; give the discharge in m3/s (> 0)")
        changes = _read_changes(r, t.get("changes", []), where)
        if name is not None and q is not None:
            events.append(Event(name=name, discharge=q, changes=changes))
    return tuple(events)


def _read_bspec(r: _Reader, v: Any, where: str) -> BoundarySpec | None:
    if not isinstance(v, dict):
        r.problem(where, "must be a table such as { type = \"normal_depth\", slope = 0.001 }")
        return None
    btype = r.choice(v, "type", where, BOUNDARY_TYPES, None)
    if btype is None:
        return None
    needs = {"normal_depth": ("slope",), "stage": ("wse",), "critical": (), "rating": ("discharge", "stage"),
             "junction": ("reach",)}[btype]
    r.known(v, ("type",) + needs, where)
    if btype == "normal_depth":
        s = r.value(v, "slope", where, "number positive", required=True)
        return BoundarySpec(type=btype, slope=s) if s is not None else None
    if btype == "stage":
        w = r.value(v, "wse", where, "number", required=True)
        return BoundarySpec(type=btype, wse=w) if w is not None else None
    if btype == "critical":
        return BoundarySpec(type=btype)
    if btype == "junction":
        if where.endswith("upstream"):
            r.problem(where, "a junction can only be a downstream boundary")
            return None
        reach = r.value(v, "reach", where, "string", required=True)
        return BoundarySpec(type=btype, reach=str(reach)) if reach else None
    q, h = v.get("discharge"), v.get("stage")
    ok = all(isinstance(a, list) and len(a) >= 2 and all(isinstance(x, (int, float)) and not isinstance(x, bool)
                                                           for x in a) for a in (q, h))
    if not ok or len(q) != len(h):
        r.problem(where, "rating needs discharge = [...] and stage = [...] lists of numbers of equal length (>= 2)")
        return None
    if any(b <= a for a, b in zip(q, q[1:])) or q[0] < 0:
        r.problem(f"{where} discharge", "rating discharges must be >= 0 and strictly increasing")
        return None
    if any(b <= a for a, b in zip(h, h[1:])):
        r.problem(f"{where} stage", "rating stages must rise with discharge (strictly increasing); a level that "
                                    "falls as the flow grows is not a rating - check the order of the two lists")
        return None
    return BoundarySpec(type=btype, discharge=tuple(map(float, q)), stage=tuple(map(float, h)))


def _read_boundary(r: _Reader, doc: dict) -> BoundaryConfig | None:
    t = r.table(doc, "boundary", "[boundary]")
    if t is None:
        return None
    r.known(t, ("regime", "downstream", "upstream", "reaches"), "[boundary]")
    regime = r.choice(t, "regime", "[boundary]", REGIMES, "subcritical")
    down = _read_bspec(r, t["downstream"], "[boundary] downstream") if "downstream" in t else None
    if "downstream" not in t:
        r.problem("[boundary] downstream", "missing; e.g. downstream = { type = \"normal_depth\", slope = 0.001 }")
    up = _read_bspec(r, t["upstream"], "[boundary] upstream") if "upstream" in t else None
    if regime in ("supercritical", "mixed") and "upstream" not in t:
        r.problem("[boundary] upstream", f"regime {regime!r} needs an upstream boundary, e.g. {{ type = \"critical\" }}")
    per_reach = {}
    for rid, sub in (r.table(t, "reaches", "[boundary.reaches]", required=False) or {}).items():
        where = f"[boundary.reaches.{rid}]"
        if not isinstance(sub, dict):
            r.problem(where, "must be a table with downstream and/or upstream")
            continue
        r.known(sub, ("downstream", "upstream"), where)
        specs = {k: _read_bspec(r, sub[k], f"{where} {k}") for k in ("downstream", "upstream") if k in sub}
        per_reach[str(rid)] = MappingProxyType({k: s for k, s in specs.items() if s is not None})
    if down is None:
        return None
    return BoundaryConfig(downstream=down, regime=regime, upstream=up, reaches=MappingProxyType(per_reach))


def _read_hydraulics(r: _Reader, doc: dict) -> HydraulicsConfig:
    t = r.table(doc, "hydraulics", "[hydraulics]", required=False) or {}
    r.known(t, ("friction_slope", "contraction", "expansion", "gravity"), "[hydraulics]")
    d = HydraulicsConfig()
    fs = r.choice(t, "friction_slope", "[hydraulics]", FRICTION_SLOPE_METHODS, d.friction_slope)
    cc = r.value(t, "contraction", "[hydraulics]", "number non-negative", default=d.contraction)
    ce = r.value(t, "expansion", "[hydraulics]", "number non-negative", default=d.expansion)
    g = r.value(t, "gravity", "[hydraulics]", "number positive", default=d.gravity)
    for key, v in (("contraction", cc), ("expansion", ce)):
        if v is not None and v > 1.0:
            r.problem(f"[hydraulics] {key}", f"{v:g} is above 1; loss coefficients are usually 0-1")
    return HydraulicsConfig(friction_slope=fs, contraction=cc, expansion=ce, gravity=g)


def _read_mapping(r: _Reader, doc: dict) -> MappingConfig:
    t = r.table(doc, "mapping", "[mapping]", required=False) or {}
    r.known(t, ("cell_size", "outputs"), "[mapping]")
    cell = r.value(t, "cell_size", "[mapping]", "number positive")
    outs = t.get("outputs", list(MAPPING_OUTPUTS))
    if not isinstance(outs, list) or not all(isinstance(o, str) for o in outs):
        r.problem("[mapping] outputs", f"must be a list of names from {', '.join(MAPPING_OUTPUTS)}")
        outs = list(MAPPING_OUTPUTS)
    for o in outs:
        if o not in MAPPING_OUTPUTS:
            close = difflib.get_close_matches(o, MAPPING_OUTPUTS, n=1)
            hint = f"did you mean {close[0]!r}?" if close else f"use {', '.join(MAPPING_OUTPUTS)}"
            r.problem("[mapping] outputs", f"{o!r} is not an output; {hint}")
    return MappingConfig(cell_size=cell, outputs=tuple(o for o in outs if o in MAPPING_OUTPUTS))
