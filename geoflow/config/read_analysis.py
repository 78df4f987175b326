"""Readers for the analysis keys: roughness cases, calibration to observed levels, rating curves.

Same rules as :mod:`geoflow.config.read`: every problem is recorded with its TOML path, none raised.
"""
from __future__ import annotations

import difflib
import math
from typing import Any

from .model import ADJUST_WORDS, ROUGHNESS_CASES, CalibrationConfig, RatingCurvesConfig


def read_cases(r, t: dict) -> tuple[str, ...]:
    """``[roughness] cases``: a list of distinct words from ROUGHNESS_CASES (default none)."""
    raw = t.get("cases", [])
    where = "[roughness] cases"
    if not isinstance(raw, list) or not all(isinstance(c, str) for c in raw):
        r.problem(where, f"must be a list of case names from {', '.join(map(repr, ROUGHNESS_CASES))}, got {raw!r}")
        return ()
    out = []
    for c in raw:
        if c not in ROUGHNESS_CASES:
            close = difflib.get_close_matches(c, ROUGHNESS_CASES + ("normal",), n=1)
            hint = (" ('normal' is always computed; list only the others)" if c == "normal" else
                    f"; did you mean {close[0]!r}?" if close else f"; use {', '.join(map(repr, ROUGHNESS_CASES))}")
            r.problem(where, f"{c!r} is not a roughness case{hint}")
        elif c in out:
            r.problem(where, f"{c!r} is listed twice")
        else:
            out.append(c)
    return tuple(out)


def read_calibration(r, doc: dict) -> CalibrationConfig | None:
    """``[calibration]``: observations (points), layer, adjust, bounds, mark_accuracy."""
    t = r.table(doc, "calibration", "[calibration]", required=False)
    if t is None:
        return None
    where = "[calibration]"
    r.known(t, ("observations", "layer", "adjust", "bounds", "mark_accuracy"), where)
    path = r.existing(t, "observations", where)
    layer = r.value(t, "layer", where, "string")
    adjust = _read_adjust(r, t.get("adjust", list(ADJUST_WORDS)), f"{where} adjust")
    bounds = _read_bounds(r, t.get("bounds", [0.5, 2.0]), f"{where} bounds")
    accuracy = r.value(t, "mark_accuracy", where, "number positive", default=0.03)
    if path is None or adjust is None or bounds is None or accuracy is None:
        return None
    return CalibrationConfig(observations=path, layer=layer, adjust=adjust, bounds=bounds, mark_accuracy=accuracy)


def _read_adjust(r, raw: Any, where: str) -> tuple | None:
    """A non-empty list whose items are "channel", "floodplain" or lists of class names; no class twice."""
    if not isinstance(raw, list) or not raw:
        r.problem(where, 'must be a non-empty list such as ["channel", "floodplain"] or [["grass", "crops"]]')
        return None
    out: list = []
    listed: set = set()
    for i, item in enumerate(raw):
        if isinstance(item, str):
            if item not in ADJUST_WORDS:
                close = difflib.get_close_matches(item, ADJUST_WORDS, n=1)
                hint = f"did you mean {close[0]!r}?" if close else "write a list of class names for other groups"
                r.problem(f"{where}[{i}]", f"{item!r} is not a group; use 'channel', 'floodplain' or a list of "
                                          f"class names ({hint})")
                return None
            group: Any = item
        elif isinstance(item, list) and item and all(isinstance(c, str) and c.strip() for c in item):
            group = tuple(item)
            twice = sorted(set(group) & listed) or sorted({c for c in group if group.count(c) > 1})
            if twice:
                r.problem(f"{where}[{i}]", f"class(es) {', '.join(map(repr, twice))} are in more than one group; "
                                          "each class may share one multiplier only")
                return None
            listed.update(group)
        else:
            r.problem(f"{where}[{i}]", f"must be 'channel', 'floodplain' or a list of class names, got {item!r}")
            return None
        if group in out:
            r.problem(f"{where}[{i}]", f"{item!r} is listed twice")
            return None
        out.append(group)
    return tuple(out)


def _read_bounds(r, raw: Any, where: str) -> tuple[float, float] | None:
    ok = isinstance(raw, list) and len(raw) == 2 and all(
        isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in raw)
    if not ok or not (0 < raw[0] < 1 < raw[1]):
        r.problem(where, f"must be [lowest, highest] multiplier with 0 < lowest < 1 < highest, e.g. [0.5, 2.0]; "
                         f"got {raw!r}")
        return None
    return float(raw[0]), float(raw[1])


def read_rating_curves(r, doc: dict, read_bspec) -> RatingCurvesConfig | None:
    """``[rating_curves]``: discharges (m3/s, > 0, strictly increasing), optional downstream boundary."""
    t = r.table(doc, "rating_curves", "[rating_curves]", required=False)
    if t is None:
        return None
    where = "[rating_curves]"
    r.known(t, ("discharges", "downstream"), where)
    raw = t.get("discharges")
    ok = isinstance(raw, list) and len(raw) >= 2 and all(
        isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) and x > 0 for x in raw)
    if not ok:
        r.problem(f"{where} discharges", "must be a list of at least two discharges in m3/s (> 0), e.g. "
                                         "[5.0, 10.0, 20.0, 50.0]")
        return None
    if any(b <= a for a, b in zip(raw, raw[1:])):
        r.problem(f"{where} discharges", "must increase strictly (each discharge larger than the one before)")
        return None
    down = None
    if "downstream" in t:
        down = read_bspec(r, t["downstream"], f"{where} downstream")
        if down is not None and down.type == "junction":
            r.problem(f"{where} downstream", "a rating needs its own boundary; a junction gives levels only for "
                                             "the receiving reach's events - use normal_depth, stage, critical or "
                                             "rating")
            return None
    return RatingCurvesConfig(discharges=tuple(float(x) for x in raw), downstream=down)
