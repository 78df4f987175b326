"""One self-contained HTML page per reach: caution, plots and tables.

Needs: the reach geometry (sections with ground, n per segment, channel edges), the profile
table of that reach for all events (profile.csv columns) and the event names in order.
Provides: an HTML file with every figure embedded as a base64 PNG (no side files). Figures
are drawn with matplotlib's Agg canvas on ``Figure`` objects (no pyplot global state).

Page, top to bottom: title; the engineering caution in a framed box; key facts; a summary table
with one row per event (largest depth, mean velocity, largest Froude number, flagged sections and
why); the long profile (bed, water surface, energy grade line and critical level per event
against chainage); cross-sections at the upstream end, the middle and the downstream end
(ground, water surface per event, channel edges, Manning's n per ground segment); the full
profile table.
"""
from __future__ import annotations

import base64
import datetime as _dt
import html
import io
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..constants import CAUTION
from ..outputs import PROFILE_COLUMNS, atomic_path

_GROUND = "#8c6d46"
_WATER = "#cfe6f7"
_CSS = """
body{font-family:system-ui,Segoe UI,Helvetica,Arial,sans-serif;margin:1.5em auto;max-width:1100px;color:#222}
h1{margin-bottom:.2em} h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.6em}
.caution{border:3px solid #b3541e;background:#fff4e5;padding:.8em 1em;font-weight:600;margin:1em 0}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}
th,td{border:1px solid #ccc;padding:.2em .5em;text-align:right} th{background:#f0f0f0}
td.text{text-align:left} .facts td{text-align:left} img{max-width:100%;display:block;margin:.6em 0}
.wide{overflow-x:auto}
"""


def _flag_text(value) -> str:
    """Flags cell (';'-joined string, sequence or empty) as a readable string."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    if isinstance(value, str):
        return value.replace(";", ", ")
    return ", ".join(str(v) for v in value)


def event_summary(profile_df: pd.DataFrame, events) -> pd.DataFrame:
    """One row per event: largest depth, mean velocity, largest Froude, flagged sections."""
    rows = []
    for event in events:
        ev = profile_df[profile_df["event"] == event]
        depth = (ev["wse_m"] - ev["bed_m"]).to_numpy(dtype=float)
        flagged = [f"{int(s)} ({_flag_text(f)})" for s, f in zip(ev["section_id"], ev["flags"]) if _flag_text(f)]
        rows.append({
            "event": event,
            "upstream discharge (m³/s)": ev["discharge_m3s"].iloc[0] if len(ev) else np.nan,
            "largest depth (m)": np.nanmax(depth) if np.isfinite(depth).any() else np.nan,
            "mean velocity (m/s)": np.nanmean(ev["velocity_ms"]) if len(ev) else np.nan,
            "largest Froude number": np.nanmax(ev["froude"]) if len(ev) else np.nan,
            "flagged sections": "; ".join(flagged) if flagged else "none",
        })
    return pd.DataFrame(rows)


def figure_png(fig: Figure, dpi: int = 100) -> bytes:
    """Render a matplotlib Figure to PNG bytes with the Agg canvas."""
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def long_profile_figure(profile_df: pd.DataFrame, events, reach_id: str) -> Figure:
    """Bed, and per event: water surface, energy grade line and critical level vs chainage."""
    fig = Figure(figsize=(10, 4.6))
    fig.subplots_adjust(left=0.07, right=0.98, bottom=0.11, top=0.93)   # fixed margins: fast to render
    ax = fig.add_subplot()
    colours = [f"C{i % 10}" for i in range(len(events))]
    first = profile_df[profile_df["event"] == events[0]] if len(events) else profile_df
    first = first.sort_values("chainage_m")
    bed = first["bed_m"].to_numpy(dtype=float)
    if np.isfinite(bed).any():
        ax.fill_between(first["chainage_m"], bed, np.nanmin(bed) - 0.5, color=_GROUND, alpha=0.35, lw=0)
    ax.plot(first["chainage_m"], bed, color=_GROUND, lw=2, label="bed (lowest ground)")
    for colour, event in zip(colours, events):
        ev = profile_df[profile_df["event"] == event].sort_values("chainage_m")
        ch = ev["chainage_m"]
        ax.plot(ch, ev["wse_m"], color=colour, lw=2, marker="o", ms=3, label=f"{event}: water surface")
        ax.plot(ch, ev["energy_m"], color=colour, lw=1.2, ls="--", label=f"{event}: energy grade line")
        ax.plot(ch, ev["critical_wse_m"], color=colour, lw=1, ls=":", label=f"{event}: critical level")
    ax.set_xlabel("chainage from upstream end (m)")
    ax.set_ylabel("elevation (m)")
    ax.set_title(f"Reach {reach_id}: long profile (flow left to right)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, ncol=max(1, len(events)), loc="upper right")
    return fig


def _n_runs(section):
    """(start station, end station, n) for runs of equal n along the section."""
    if section.n is None:
        return []
    n = np.asarray(section.n, dtype=float)
    cut = np.flatnonzero(np.diff(n) != 0) + 1
    starts = np.concatenate([[0], cut])
    ends = np.concatenate([cut, [n.size]])
    st = np.asarray(section.station, dtype=float)
    return [(st[a], st[b], n[a]) for a, b in zip(starts, ends)]


def section_figure(section, rows: pd.DataFrame, events, label: str) -> Figure:
    """Ground, water surface per event, channel edges and Manning's n runs of one section."""
    fig = Figure(figsize=(11, 3.8))
    fig.subplots_adjust(left=0.07, right=0.80, bottom=0.13, top=0.91)   # room for the legend at the right
    ax = fig.add_subplot()
    st = np.asarray(section.station, dtype=float)
    z = np.asarray(section.elevation, dtype=float)
    zmin, zmax = np.nanmin(z), np.nanmax(z)
    levels = rows["wse_m"].to_numpy(dtype=float)
    top = max(zmax, np.nanmax(levels) if np.isfinite(levels).any() else zmax)
    span = max(top - zmin, 0.5)
    base = zmin - 0.25 * span
    fine = np.union1d(st, np.linspace(st[0], st[-1], 500))     # to draw the waterline to the bank
    zf = np.interp(fine, st, z)
    for i, event in enumerate(events):
        level = rows.loc[rows["event"] == event, "wse_m"].to_numpy(dtype=float)
        if level.size == 0 or not np.isfinite(level[0]):
            continue
        wet = zf < level[0]
        ax.fill_between(fine, zf, level[0], where=wet, color=_WATER, alpha=0.7, lw=0)
        ax.plot(fine, np.where(wet, level[0], np.nan), color=f"C{i % 10}", lw=1.8,
                label=f"{event}: water surface {level[0]:.2f} m")
    ax.fill_between(st, z, base, color=_GROUND, alpha=0.35, lw=0)
    ax.plot(st, z, color=_GROUND, lw=1.8, label="ground")
    for s, name, side in zip(section.channel_edges, ("left bank", "right bank"), ("right", "left")):
        ax.axvline(s, color="k", ls="--", lw=1)          # labels lean away from each other: never overlap
        ax.text(s, top + 0.05 * span, f" {name} " if side == "left" else f"{name} ", ha=side, va="bottom",
                fontsize=8)
    runs = _n_runs(section)
    shades = ["#e8e8e8", "#d0d0d0"]
    for k, (a, b, n) in enumerate(runs):           # n strip along the bottom of the plot
        ax.fill_between([a, b], base, base + 0.08 * span, color=shades[k % 2], lw=0)
        if b - a > 0.06 * (st[-1] - st[0]):
            ax.text((a + b) / 2, base + 0.04 * span, f"n={n:.3f}", ha="center", va="center", fontsize=7)
    ax.set_ylim(base, top + 0.2 * span)
    ax.set_xlim(st[0], st[-1])
    ax.set_xlabel("station from left end, looking downstream (m)")
    ax.set_ylabel("elevation (m)")
    ax.set_title(f"{label}: section {section.section_id}, chainage {section.chainage:.1f} m "
                 "(grey strip: Manning's n)")
    ax.grid(alpha=0.3)
    fig.legend(fontsize=7, loc="upper right")
    return fig


def _pick_sections(geom):
    """Upstream, middle and downstream sections (fewer when the reach is short)."""
    n = len(geom.sections)
    picks = dict.fromkeys([0, n // 2, n - 1])
    names = {0: "Upstream end", n // 2: "Middle", n - 1: "Downstream end"}
    return [(geom.sections[i], names[i]) for i in picks if n]


def _img(fig: Figure, alt: str) -> str:
    data = base64.b64encode(figure_png(fig)).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def _table(df: pd.DataFrame, digits: int = 3, classes: str | None = None) -> str:
    return df.to_html(index=False, na_rep="", float_format=lambda v: f"{v:.{digits}f}", border=0,
                      classes=classes)


def render_report(reach_id: str, geom, profile_df: pd.DataFrame, events, caution: str = CAUTION) -> str:
    """The report page as an HTML string."""
    events = list(events)
    rid = html.escape(str(reach_id))
    df = profile_df.copy()
    df["flags"] = [_flag_text(f) for f in df["flags"]]
    ch = df["chainage_m"].to_numpy(dtype=float)
    facts = pd.DataFrame({"item": ["cross-sections", "chainage range (m)", "events", "written (UTC)"],
                          "value": [str(len(geom.sections)),
                                    f"{np.nanmin(ch):.1f} to {np.nanmax(ch):.1f}" if ch.size else "",
                                    ", ".join(map(str, events)),
                                    _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M")]})
    parts = [f"<h1>Reach {rid}: steady water-surface profiles</h1>",
             f'<div class="caution">Caution: {html.escape(caution)}</div>',
             _table(facts, classes="facts"),
             "<h2>Summary by event</h2>", _table(event_summary(df, events)),
             "<h2>Long profile</h2>", _img(long_profile_figure(df, events, str(reach_id)), "long profile")]
    if geom.warnings:
        parts.insert(2, "<p><b>Geometry warnings:</b> " + html.escape("; ".join(geom.warnings)) + "</p>")
    parts.append("<h2>Cross-sections</h2>")
    for section, label in _pick_sections(geom):
        rows = df[df["section_id"] == section.section_id]
        parts.append(_img(section_figure(section, rows, events, label), f"cross-section {section.section_id}"))
    cols = [c for c in PROFILE_COLUMNS if c in df.columns] + [c for c in df.columns if c not in PROFILE_COLUMNS]
    parts += ["<h2>Full profile table</h2>", f'<div class="wide">{_table(df[cols], 4)}</div>']
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>Reach {rid}: water-surface profiles</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(parts) + "\n</body></html>\n")


def write_report(path, reach_id: str, geom, profile_df: pd.DataFrame, events, caution: str = CAUTION) -> Path:
    """Write the reach report as one self-contained HTML file (atomic); return its path."""
    path = Path(path)
    text = render_report(reach_id, geom, profile_df, events, caution)
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
