"""Report tables with readable headers and units: summary by event, events side by side, flag glossary."""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..flags import RENAMED, describe, needs_review

#: profile.csv column -> (readable header with unit, format). Friction slope keeps 4 significant
#: digits (0.001402, not 0.0014); levels keep mm.
SIDE_BY_SIDE = {
    "discharge_m3s": ("discharge (m³/s)", "{:.5g}"),
    "wse_m": ("water level (m)", "{:.3f}"),
    "depth_m": ("depth (m)", "{:.3f}"),
    "energy_m": ("energy level (m)", "{:.3f}"),
    "critical_depth_m": ("critical depth (m)", "{:.3f}"),
    "velocity_ms": ("mean velocity (m/s)", "{:.3f}"),
    "froude": ("Froude number", "{:.3f}"),
    "friction_slope": ("friction slope (m/m)", "{:#.4g}"),
    "top_width_m": ("top width (m)", "{:.1f}"),
    "flags": ("flags", "{}"),
}


def flag_words(value) -> list[str]:
    """Flag words of a flags cell (';'-joined string, sequence, None or NaN)."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return []
    if isinstance(value, str):
        return [w for w in value.split(";") if w]
    return [str(v) for v in value]


def flag_text(value) -> str:
    """Flags cell (';'-joined string, sequence or empty) as a readable string."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    if isinstance(value, str):
        return value.replace(";", ", ")
    return ", ".join(str(v) for v in value)


def id_ranges(ids) -> str:
    """Section ids as short runs: 3, 5-8, 12."""
    ids = sorted({int(i) for i in ids})
    runs: list[list[int]] = []
    for i in ids:
        if runs and i == runs[-1][1] + 1:
            runs[-1][1] = i
        else:
            runs.append([i, i])
    return ", ".join(str(a) if a == b else f"{a}-{b}" for a, b in runs)


def by_word(pairs) -> str:
    """'word: ids; word: ids' from (section id, [words]) pairs, words in first-seen order."""
    out: dict[str, list[int]] = {}
    for sid, words in pairs:
        for w in words:
            out.setdefault(w, []).append(int(sid))
    return "; ".join(f"{w}: {id_ranges(ids)}" for w, ids in out.items())


def event_summary(profile_df: pd.DataFrame, events) -> pd.DataFrame:
    """One row per event: largest depth, mean velocity, largest Froude, and the flagged sections by
    flag word, those to review (hydraulic or input flags) apart from those with notes only."""
    rows = []
    for event in events:
        ev = profile_df[profile_df["event"] == event]
        depth = (ev["wse_m"] - ev["bed_m"]).to_numpy(dtype=float)
        words = [(s, flag_words(f)) for s, f in zip(ev["section_id"], ev["flags"])]
        review = by_word((s, [w for w in ws if needs_review(w)]) for s, ws in words)
        notes = by_word((s, [w for w in ws if not needs_review(w)]) for s, ws in words)
        rows.append({
            "event": event,
            "upstream discharge (m³/s)": ev["discharge_m3s"].iloc[0] if len(ev) else np.nan,
            "largest depth (m)": np.nanmax(depth) if np.isfinite(depth).any() else np.nan,
            "mean velocity (m/s)": np.nanmean(ev["velocity_ms"]) if len(ev) else np.nan,
            "largest mean velocity (m/s)": np.nanmax(ev["velocity_ms"]) if len(ev) else np.nan,
            "largest Froude number": np.nanmax(ev["froude"]) if len(ev) else np.nan,
            "flags to review (sections)": review or "none",
            "notes (sections)": notes or "none",
        })
    return pd.DataFrame(rows)


def side_by_side(profile_df: pd.DataFrame, events) -> pd.DataFrame:
    """One row per section; for each event the quantities of ``SIDE_BY_SIDE`` (two header rows:
    event, then quantity with unit). Values are formatted text."""
    base = profile_df[profile_df["event"] == events[0]] if len(events) else profile_df
    base = base.sort_values("section_id")
    out = pd.DataFrame({("", "section"): base["section_id"].astype(int).to_numpy(),
                        ("", "chainage (m)"): [f"{v:.1f}" for v in base["chainage_m"].astype(float)],
                        ("", "bed level (m)"): [f"{v:.3f}" for v in base["bed_m"].astype(float)]})
    for event in events:
        ev = profile_df[profile_df["event"] == event].set_index("section_id").reindex(base["section_id"])
        for col, (header, fmt) in SIDE_BY_SIDE.items():
            if col not in ev.columns:
                continue
            vals = ev[col].to_numpy()
            out[(event, header)] = [flag_text(v) if col == "flags" else _fmt(fmt, v) for v in vals]
    out.columns = pd.MultiIndex.from_tuples(out.columns)
    return out


def _fmt(fmt: str, v) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return ""
    return fmt.format(f) if np.isfinite(f) else ""


def glossary(words) -> pd.DataFrame:
    """Meaning and what to do for each flag word (from geoflow.flags), in the order given."""
    rows = []
    for w in words:
        f = describe(w)
        rows.append({"flag": w, "kind": f.kind, "meaning": f.meaning, "what to do": f.action,
                     "current name": RENAMED.get(w, "")})
    df = pd.DataFrame(rows, columns=["flag", "kind", "meaning", "what to do", "current name"])
    return df if df["current name"].any() else df.drop(columns="current name")
