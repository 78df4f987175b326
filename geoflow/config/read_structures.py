"""Reader of ``[[structures]]``: culverts, weirs and bridges on a reach.

Problems are recorded with their TOML path (see :mod:`geoflow.config.read`), none raised. The
parameters of each structure are checked by building its record of
:mod:`geoflow.hydraulics.structures` (whose one-line messages name the parameter); what needs
the reach (chainage within it, the face sections, a culvert wider than the valley, a bridge
opening) is checked later: :mod:`geoflow.config.crosscheck` and ``geoflow.batch.structures``.
"""
from __future__ import annotations

import difflib
from typing import Any

from ..constants import MAX_NAME_LENGTH
from ..errors import GeoflowError
from ..hydraulics.structures import INLETS, PIER_SHAPES, Bridge, Culvert, Piers, Weir
from ..hydraulics.structures.barrel import SHAPES
from ..hydraulics.structures.opening import LOW_FLOW_METHODS
from ..hydraulics.structures.weir import KINDS, RULES
from .model import SAFE_NAME, STRUCTURE_TYPES, StructureSpec
from .read import _Reader

COMMON = ("reach", "chainage", "type", "id")
KEYS = {
    "culvert": ("shape", "diameter", "span", "rise", "barrels", "length", "invert_up", "invert_down", "n", "inlet",
                "ke", "crest", "crest_length", "coefficient"),
    "weir": ("crest", "crest_length", "kind", "coefficient", "crest_height", "crest_breadth", "approach_velocity"),
    "bridge": ("low_chord", "high_chord", "length", "piers", "low_flow_method", "opening", "coefficient"),
}
PIER_KEYS = ("count", "width", "shape", "yarnell_k", "drag_coefficient")


def read_structures(r: _Reader, doc: dict) -> tuple[StructureSpec, ...]:
    """``[[structures]]``: a list of tables, each with reach, chainage, type (and id) and the
    parameters of its type; ids unique, no two structures of a reach overlapping."""
    raw = doc.get("structures")
    if raw is None:
        return ()
    if not isinstance(raw, list) or not all(isinstance(t, dict) for t in raw):
        r.problem("[[structures]]", "must be an array of tables ([[structures]]) with reach, chainage and type")
        return ()
    out: list[StructureSpec] = []
    seen: set[str] = set()
    for i, t in enumerate(raw):
        spec = _read_one(r, t, i)
        if spec is None:
            continue
        if spec.id in seen:
            r.problem(f"{spec.where} id", "is used by another structure; give each structure its own id")
            continue
        seen.add(spec.id)
        out.append(spec)
    _check_overlaps(r, out)
    return tuple(out)


def _read_one(r: _Reader, t: dict, i: int) -> StructureSpec | None:
    where = f"[[structures]][{i}]"
    given = t.get("type")
    sid = _read_id(r, t, where, f"{given if given in STRUCTURE_TYPES else 'structure'}_{i + 1}")
    where = f"[[structures]] {sid!r}" if sid is not None else where
    kind = r.choice(t, "type", where, STRUCTURE_TYPES, None)
    if kind is not None:          # the keys of an unknown type are not judged
        r.known(t, COMMON + KEYS[kind], where)
    reach = r.value(t, "reach", where, "string", required=True)
    chainage = r.value(t, "chainage", where, "number non-negative", required=True)
    if kind is None or sid is None or reach is None or chainage is None:
        return None
    try:
        built = {"culvert": _culvert, "weir": _weir, "bridge": _bridge}[kind](r, t, where, sid)
    except GeoflowError as exc:          # the structure's own check of its parameters
        r.problem(where, str(exc))
        return None
    if built is None:
        return None
    hydraulics, length, extra = built
    return StructureSpec(id=sid, reach=str(reach), chainage=chainage, type=kind, length=length,
                         hydraulics=hydraulics, **extra)


def _read_id(r: _Reader, t: dict, where: str, default: str) -> str | None:
    sid = r.value(t, "id", where, "string", default=default)
    if sid is None:
        return None
    if not SAFE_NAME.match(sid) or len(sid) > MAX_NAME_LENGTH:
        r.problem(f"{where} id", f"{sid!r}: use letters, digits, '_', '-' or '.' (at most {MAX_NAME_LENGTH}; it "
                                 "names the structure in structures.csv)")
        return None
    return sid


def _choice(r: _Reader, t: dict, key: str, where: str, allowed, default: str | None):
    return r.choice(t, key, where, tuple(allowed), default)


def _whole(r: _Reader, t: dict, key: str, where: str, default: int, minimum: int) -> int | None:
    v = t.get(key, default)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or v != int(v) or v < minimum:
        r.problem(f"{where} {key}", f"must be a whole number >= {minimum}, got {v!r}")
        return None
    return int(v)


def _culvert(r: _Reader, t: dict, where: str, sid: str):
    shape = _choice(r, t, "shape", where, SHAPES, None)
    inlet = _choice(r, t, "inlet", where, INLETS, None)
    sizes = {k: r.value(t, k, where, "number positive", required=(shape == "circular") == (k == "diameter"))
             for k in ("diameter", "span", "rise")} if shape else {}
    if shape == "circular" and ("span" in t or "rise" in t):
        r.problem(where, "a circular barrel takes diameter, not span / rise")
    if shape == "box" and "diameter" in t:
        r.problem(where, "a box barrel takes span and rise, not diameter")
    nums = {k: r.value(t, k, where, "number positive", required=True) for k in ("length", "n")}
    inverts = {k: r.value(t, k, where, "number", required=True) for k in ("invert_up", "invert_down")}
    road = {k: r.value(t, k, where, kind) for k, kind in (("crest", "number"), ("crest_length", "number positive"),
                                                           ("coefficient", "number positive"))}
    ke = r.value(t, "ke", where, "number non-negative")
    barrels = _whole(r, t, "barrels", where, 1, 1)
    if road["crest"] is not None and road["crest_length"] is None:
        r.problem(f"{where} crest_length", "missing; a road crest needs its length across the valley (m)")
        return None
    for key in ("crest_length", "coefficient"):
        if key in t and "crest" not in t:
            r.problem(f"{where} {key}", "describes the road over the culvert and needs crest (m); give crest or "
                                        f"remove {key}")
            return None
    if None in (shape, inlet, barrels) or None in nums.values() or None in inverts.values():
        return None
    kw = {k: v for k, v in sizes.items() if v is not None}
    if road["coefficient"] is not None:
        kw["crest_coefficient"] = road["coefficient"]
    culvert = Culvert(shape=shape, length=nums["length"], n=nums["n"], inlet=inlet, barrels=barrels, ke=ke,
                      crest=road["crest"], crest_length=road["crest_length"], name=sid, **inverts, **kw)
    return culvert, nums["length"], {}


def _weir(r: _Reader, t: dict, where: str, sid: str):
    kind = _choice(r, t, "kind", where, KINDS, "broad_crested")
    crest = r.value(t, "crest", where, "number", required=True)
    length = r.value(t, "crest_length", where, "number positive", required=True)
    height = r.value(t, "crest_height", where, "number positive")
    breadth = r.value(t, "crest_breadth", where, "number positive")
    approach = r.flag(t, "approach_velocity", where, False)
    coef = _weir_coefficient(r, t, where, kind)
    if kind is None or crest is None or length is None or coef is False:
        return None
    if approach and coef in ("rehbock", "kindsvater_carter"):
        r.problem(f"{where} approach_velocity", f"the {coef} coefficient already includes the approach velocity; "
                                                "remove approach_velocity")
        return None
    weir = Weir(crest=crest, crest_length=length, kind=kind, coefficient=coef, crest_height=height,
                crest_breadth=breadth, name=sid)
    return weir, breadth or 0.0, {"approach_velocity": approach}


def _weir_coefficient(r: _Reader, t: dict, where: str, kind: str | None):
    """None (the default of the kind), a positive number or a rule name; False when bad."""
    v: Any = t.get("coefficient")
    if v is None or kind is None:
        return v
    if isinstance(v, str):
        rules = RULES[kind]
        if v not in rules:
            close = difflib.get_close_matches(v, rules, n=1)
            hint = f"did you mean {close[0]!r}?" if close else f"use a number or one of {', '.join(rules)}"
            r.problem(f"{where} coefficient", f"{v!r} is not a coefficient rule of a {kind} weir; {hint}")
            return False
        return v
    c = r.value(t, "coefficient", where, "number positive")
    return False if c is None else c


def _bridge(r: _Reader, t: dict, where: str, sid: str):
    chords = {k: r.value(t, k, where, "number", required=True) for k in ("low_chord", "high_chord")}
    length = r.value(t, "length", where, "number positive", required=True)
    method = _choice(r, t, "low_flow_method", where, LOW_FLOW_METHODS, "highest")
    deck = r.value(t, "coefficient", where, "number positive")
    piers = _piers(r, t.get("piers"), f"{where} piers") if "piers" in t else Piers()
    opening = _opening(r, t.get("opening"), f"{where} opening") if "opening" in t else None
    if None in chords.values() or length is None or method is None or piers is None or opening is False:
        return None
    kw = {} if deck is None else {"deck_coefficient": deck}
    bridge = Bridge(low_chord=chords["low_chord"], high_chord=chords["high_chord"], length=length, piers=piers,
                    low_flow_method=method, name=sid, **kw)
    return bridge, length, {"opening": opening}


def _piers(r: _Reader, v: Any, where: str) -> Piers | None:
    if not isinstance(v, dict):
        r.problem(where, 'must be a table such as { count = 2, width = 1.0, shape = "semicircular" }')
        return None
    r.known(v, PIER_KEYS, where)
    count = _whole(r, v, "count", where, 0, 0)
    width = r.value(v, "width", where, "number positive", required=bool(count))
    shape = r.choice(v, "shape", where, tuple(PIER_SHAPES), "square")
    k = r.value(v, "yarnell_k", where, "number positive")
    cd = r.value(v, "drag_coefficient", where, "number positive")
    if count is None or shape is None or (count and width is None):
        return None
    return Piers(count=count, width=width or 0.0, shape=shape, yarnell_k=k, drag_coefficient=cd)


def _opening(r: _Reader, v: Any, where: str):
    """(left, right) distances (m) of the abutments from the centreline; False when bad."""
    if not isinstance(v, dict):
        r.problem(where, "must be a table such as { left = 28.0, right = 27.5 } (m from the centreline)")
        return False
    r.known(v, ("left", "right"), where)
    left = r.value(v, "left", where, "number positive", required=True)
    right = r.value(v, "right", where, "number positive", required=True)
    return False if left is None or right is None else (left, right)


def _check_overlaps(r: _Reader, specs: list[StructureSpec]) -> None:
    """Two structures of a reach whose faces overlap (or meet) are at the same place."""
    by_reach: dict[str, list[StructureSpec]] = {}
    for s in specs:
        by_reach.setdefault(s.reach, []).append(s)
    for rid, group in by_reach.items():
        group.sort(key=lambda s: s.chainage)
        for a, b in zip(group, group[1:]):
            if b.faces[0] <= a.faces[1]:
                r.problem(f"{b.where} chainage", f"{b.chainage:g} m puts it at the same place as structure "
                                                 f"{a.id!r} on reach {rid!r} (faces {a.faces[0]:g}-{a.faces[1]:g} m "
                                                 f"and {b.faces[0]:g}-{b.faces[1]:g} m overlap); move one or merge them")
