"""Reference values of Manning's n: a typical-value table and Cowan's composite method.

Pure data and arithmetic; nothing here is applied automatically. The table helps users
fill ``[roughness.classes.<name>]`` (take ``normal``; ``minimum``/``maximum`` bracket a
sensitivity run). Values are s/m^(1/3) (the same number in SI and US customary units).
"""
from __future__ import annotations

import csv
import difflib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputDataError, RoughnessError

_CHOW = "Chow (1959) Open-Channel Hydraulics, Table 5-6"


@dataclass(frozen=True)
class ReferenceN:
    """One row of a typical-n table: cover description, minimum / normal / maximum n, source."""

    key: str
    description: str
    minimum: float
    normal: float
    maximum: float
    source: str


def _row(key, description, lo, mid, hi, note=""):
    return ReferenceN(key, description, lo, mid, hi, _CHOW + (f" ({note})" if note else ""))


CHOW_1959 = (
    # Natural minor streams (top width at flood stage < 100 ft), main channels.
    _row("stream_clean_straight", "minor stream: clean, straight, full stage, no rifts or deep pools", 0.025, 0.030, 0.033),
    _row("stream_straight_stones_weeds", "minor stream: as clean straight, more stones and weeds", 0.030, 0.035, 0.040),
    _row("stream_clean_winding", "minor stream: clean, winding, some pools and shoals", 0.033, 0.040, 0.045),
    _row("stream_winding_weeds_stones", "minor stream: winding, pools and shoals, some weeds and stones", 0.035, 0.045, 0.050),
    _row("stream_winding_lower_stages", "minor stream: winding with weeds and stones, lower stages", 0.040, 0.048, 0.055),
    _row("stream_winding_more_stones", "minor stream: winding with weeds, more stones", 0.045, 0.050, 0.060),
    _row("stream_sluggish_weedy", "minor stream: sluggish reaches, weedy, deep pools", 0.050, 0.070, 0.080),
    _row("stream_very_weedy", "minor stream: very weedy reaches or timbered floodways", 0.075, 0.100, 0.150),
    _row("mountain_gravel_cobbles", "mountain stream: gravel, cobbles, few boulders on bottom", 0.030, 0.040, 0.050),
    _row("mountain_cobbles_boulders", "mountain stream: cobbles with large boulders on bottom", 0.040, 0.050, 0.070),
    # Flood plains.
    _row("pasture_short_grass", "flood plain: pasture, no brush, short grass", 0.025, 0.030, 0.035),
    _row("pasture_high_grass", "flood plain: pasture, no brush, high grass", 0.030, 0.035, 0.050),
    _row("cultivated_no_crop", "flood plain: cultivated area, no crop", 0.020, 0.030, 0.040),
    _row("mature_row_crops", "flood plain: cultivated area, mature row crops", 0.025, 0.035, 0.045),
    _row("mature_field_crops", "flood plain: cultivated area, mature field crops", 0.030, 0.040, 0.050),
    _row("scattered_brush", "flood plain: scattered brush, heavy weeds", 0.035, 0.050, 0.070),
    _row("light_brush_winter", "flood plain: light brush and trees, in winter", 0.035, 0.050, 0.060),
    _row("light_brush_summer", "flood plain: light brush and trees, in summer", 0.040, 0.060, 0.080),
    _row("dense_brush_winter", "flood plain: medium to dense brush, in winter", 0.045, 0.070, 0.110),
    _row("dense_brush_summer", "flood plain: medium to dense brush, in summer", 0.070, 0.100, 0.160),
    _row("dense_willows", "flood plain: dense willows, summer, straight", 0.110, 0.150, 0.200),
    _row("cleared_stumps", "flood plain: cleared land with tree stumps, no sprouts", 0.030, 0.040, 0.050),
    _row("cleared_stumps_sprouts", "flood plain: cleared land with stumps, heavy growth of sprouts", 0.050, 0.060, 0.080),
    _row("timber_below_branches", "flood plain: heavy stand of timber, little undergrowth, flood below branches",
         0.080, 0.100, 0.120),
    _row("timber_reaching_branches", "flood plain: heavy stand of timber, flood stage reaching branches", 0.100, 0.120, 0.160),
    # Lined channels.
    _row("concrete_trowel", "lined channel: concrete, trowel finish", 0.011, 0.013, 0.015, "from memory"),
    _row("concrete_float", "lined channel: concrete, float finish", 0.013, 0.015, 0.016, "from memory"),
)


def reference_entry(key: str) -> ReferenceN:
    """Row of :data:`CHOW_1959` by key (case-insensitive, surrounding spaces ignored).

    For a config line ``reference = "<key>"`` in ``[roughness.classes.<name>]``. An unknown key
    raises :class:`RoughnessError` with the closest key (difflib) and the list of valid keys.
    """
    rows = {r.key: r for r in CHOW_1959}
    k = str(key).strip().lower()
    if k not in rows:
        hint = difflib.get_close_matches(k, list(rows), n=1, cutoff=0.6)
        extra = f" (did you mean {hint[0]!r}?)" if hint else ""
        raise RoughnessError(f"no reference n for {key!r}{extra}; known cover types: {', '.join(rows)}")
    return rows[k]


def cowan_n(n_b, n1=0.0, n2=0.0, n3=0.0, n4=0.0, m=1.0):
    """Composite Manning's n by Cowan's method: n = (n_b + n1 + n2 + n3 + n4)·m.

    n_b base value for the bed material; n1 surface irregularity; n2 variation of section
    shape; n3 obstructions; n4 vegetation; m meandering (1.00 minor, 1.15 appreciable,
    1.30 severe). Cowan (1956), Agricultural Engineering 37(7); as adopted by Arcement &
    Schneider (1989), USGS Water-Supply Paper 2339. Works element-wise on arrays.
    """
    parts = {"n_b": n_b, "n1": n1, "n2": n2, "n3": n3, "n4": n4}
    arrays = {k: np.asarray(v, dtype=np.float64) for k, v in parts.items()}
    for k, v in arrays.items():
        if np.any(~np.isfinite(v)) or np.any(v < 0):
            raise RoughnessError(f"Cowan n: {k} = {parts[k]!r} must be a non-negative number")
    if np.any(arrays["n_b"] <= 0):
        raise RoughnessError(f"Cowan n: base value n_b = {n_b!r} must be positive")
    mm = np.asarray(m, dtype=np.float64)
    if np.any(~np.isfinite(mm)) or np.any(mm < 1.0):
        raise RoughnessError(f"Cowan n: meander factor m = {m!r} must be >= 1 (1.00 minor to 1.30 severe)")
    total = (arrays["n_b"] + arrays["n1"] + arrays["n2"] + arrays["n3"] + arrays["n4"]) * mm
    return float(total) if total.ndim == 0 else total


N_RANGE = (0.005, 1.0)   # accepted Manning's n in a class table, s/m^(1/3)


def read_class_table(path) -> dict[str, dict]:
    """Read a roughness class table (CSV) -> ``{class: {"n": .., "n_low": .., "n_high": ..}}``.

    Columns: ``class``, ``n`` and optionally ``n_low``, ``n_high`` (header names are
    case-insensitive; empty optional cells are left out). Every n must lie in 0.005-1 and
    n_low <= n <= n_high. Each bad row raises one :class:`InputDataError` naming file and row.
    """
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise InputDataError(f"{path}: cannot read the roughness table ({exc.strerror or exc}); check the path") from None
    except UnicodeDecodeError:
        raise InputDataError(f"{path}: roughness table is not UTF-8 text; save it as CSV (UTF-8)") from None
    if not rows:
        raise InputDataError(f"{path}: roughness table is empty; give a header row class,n[,n_low,n_high]")
    header = [h.strip().lower() for h in rows[0]]
    _check_header(path, header)
    out: dict[str, dict] = {}
    for line_no, row in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in row):
            continue
        cells = dict(zip(header, (c.strip() for c in row)))
        name = cells.get("class", "")
        if not name:
            raise InputDataError(f"{path}: row {line_no} has no class name; fill the 'class' column")
        if name in out:
            raise InputDataError(f"{path}: row {line_no}: class {name!r} is listed twice; keep one row per class")
        out[name] = _class_row(path, line_no, name, cells)
    if not out:
        raise InputDataError(f"{path}: roughness table has a header but no rows; add one row per land-cover class")
    return out


def _check_header(path: Path, header: list[str]) -> None:
    known = ("class", "n", "n_low", "n_high")
    for col in ("class", "n"):
        if col not in header:
            raise InputDataError(f"{path}: column {col!r} not found in the header ({', '.join(header)}); "
                                 "the header must be class,n[,n_low,n_high]")
    for col in header:
        if col not in known:
            hint = difflib.get_close_matches(col, known, n=1)
            extra = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise InputDataError(f"{path}: unknown column {col!r}{extra}; columns are class,n[,n_low,n_high]")


def _class_row(path: Path, line_no: int, name: str, cells: dict) -> dict:
    entry = {}
    for col in ("n", "n_low", "n_high"):
        text = cells.get(col, "")
        if not text:
            if col == "n":
                raise InputDataError(f"{path}: row {line_no} (class {name!r}) has no n; give Manning's n")
            continue
        try:
            v = float(text)
        except ValueError:
            raise InputDataError(f"{path}: row {line_no} (class {name!r}): {col} = {text!r} is not a number") from None
        if not (N_RANGE[0] <= v <= N_RANGE[1]):
            raise InputDataError(f"{path}: row {line_no} (class {name!r}): {col} = {v:g} is outside "
                                 f"{N_RANGE[0]}-{N_RANGE[1]}; check the value (s/m^(1/3))")
        entry[col] = v
    if not entry.get("n_low", entry["n"]) <= entry["n"] <= entry.get("n_high", entry["n"]):
        raise InputDataError(f"{path}: row {line_no} (class {name!r}): need n_low <= n <= n_high, got "
                             f"{entry.get('n_low')} / {entry['n']} / {entry.get('n_high')}")
    return entry
