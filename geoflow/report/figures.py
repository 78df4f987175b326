"""Figures of a reach page: long profile, cross-sections zoomed to the wet part, the section grid.

matplotlib ``Figure`` objects on the Agg canvas (no pyplot). Figures carry no legends or titles:
the event colours are keyed once in the page and captions are HTML, which keeps rendering fast.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection, PolyCollection
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from .markup import FLAG_COLOUR, NOTE_COLOUR, event_colour

GROUND = "#8c6d46"
WATER = "#cfe6f7"
STORAGE_COLOUR = "#555555"


def channel_edge_ground(section) -> tuple[float, float]:
    """Ground level (m) at the left and right channel edge of a section (bank tops)."""
    st, z = np.asarray(section.station, dtype=float), np.asarray(section.elevation, dtype=float)
    left, right = section.channel_edges
    return float(np.interp(left, st, z)), float(np.interp(right, st, z))


def long_profile_figure(profile: pd.DataFrame, events, geom, markers=(), flagged=None, noted=None) -> Figure:
    """Bed, bank tops, and per event water surface, energy grade line and critical-depth line.

    ``markers``: (chainage m, label) drawn as labelled vertical lines (confluences, flow
    changes, structures); ``flagged``: {section id: {word: [events]}} to review, marked in red on
    the water surface of the events concerned, with their numbers along the top (thinned where
    they would overlap); ``noted``: the same for sections with notes only (small purple marks).
    """
    fig = Figure(figsize=(11, 4.8))
    fig.subplots_adjust(left=0.065, right=0.99, bottom=0.11, top=0.90)
    ax = fig.add_subplot()
    ch_geom = np.array([s.chainage for s in geom.sections])
    bed = np.array([s.bed_elevation for s in geom.sections])
    tops = np.array([channel_edge_ground(s) for s in geom.sections])
    ax.fill_between(ch_geom, bed, np.nanmin(bed) - 0.5, color=GROUND, alpha=0.35, lw=0)
    ax.plot(ch_geom, bed, color=GROUND, lw=2)
    ax.plot(ch_geom, tops[:, 0], color=GROUND, lw=0.9, ls=(0, (4, 2)))
    ax.plot(ch_geom, tops[:, 1], color=GROUND, lw=0.9, ls=(0, (1, 1.5)))
    for i, event in enumerate(events):
        ev = profile[profile["event"] == event].sort_values("chainage_m")
        colour = event_colour(i)
        ax.plot(ev["chainage_m"], ev["wse_m"], color=colour, lw=2)
        ax.plot(ev["chainage_m"], ev["energy_m"], color=colour, lw=1.1, ls="--")
        ax.plot(ev["chainage_m"], ev["critical_wse_m"], color=colour, lw=0.9, ls=":")
        for marks, style in ((noted, dict(marker="|", ms=7, color=NOTE_COLOUR)),
                             (flagged, dict(marker="v", ms=6, color=FLAG_COLOUR))):
            if marks:
                hit = ev[ev["section_id"].isin([s for s, words in marks.items()
                                                if any(event in evs or not evs for evs in words.values())])]
                ax.plot(hit["chainage_m"], hit["wse_m"], ls="none", **style)
    ax.xaxis.set_major_locator(MaxNLocator(10))
    ax.yaxis.set_major_locator(MaxNLocator(7))
    ax.set_xlim(ch_geom.min(), ch_geom.max() + 1e-9)
    trans = ax.get_xaxis_transform()
    for ch, label in markers:
        ax.axvline(ch, color="#555", lw=1, ls="-.")
        ax.text(ch, 0.02, f" {label}", rotation=90, transform=trans, fontsize=7.5, va="bottom", ha="right")
    if flagged:
        ids = np.array(sorted(flagged))
        at = ch_geom[np.searchsorted([s.section_id for s in geom.sections], ids)]
        gap, last = 0.018 * (ch_geom.max() - ch_geom.min()), -np.inf      # about one label's width
        for c, sid in zip(at, ids):
            if c - last >= gap:
                ax.text(c, 1.01, str(sid), transform=trans, fontsize=7, color=FLAG_COLOUR, ha="center", va="bottom")
                last = c
    ax.set_xlabel("chainage from upstream end (m), flow left to right")
    ax.set_ylabel("elevation (m)")
    ax.grid(alpha=0.3)
    return fig


def wet_window(section, levels) -> tuple[float, float, float, float]:
    """(x0, x1, y0, y1) of a section plot zoomed to the wet part of the highest level, with a margin."""
    st, z = np.asarray(section.station, dtype=float), np.asarray(section.elevation, dtype=float)
    levels = np.asarray([v for v in levels if np.isfinite(v)], dtype=float)
    top = levels.max() if levels.size else float(np.min(z)) + 1.0
    wet = np.flatnonzero(z < top)
    if wet.size == 0:
        wet = np.array([int(np.argmin(z))])
    a, b = st[max(wet[0] - 1, 0)], st[min(wet[-1] + 1, st.size - 1)]
    margin = max(0.12 * (b - a), 3.0)
    x0 = a - margin if wet[0] == 0 else max(st[0], a - margin)     # a wet end stays in view, with room
    x1 = b + margin if wet[-1] == st.size - 1 else min(st[-1], b + margin)
    bed = float(np.min(z))
    h = max(top - bed, 0.5)
    return x0, x1, bed - 0.22 * h, top + 0.3 * h


def _n_runs(section):
    """(start station, end station, n) for runs of equal n along the section."""
    if section.n is None:
        return []
    n = np.asarray(section.n, dtype=float)
    cut = np.flatnonzero(np.diff(n) != 0) + 1
    starts, ends = np.concatenate([[0], cut]), np.concatenate([cut, [n.size]])
    st = np.asarray(section.station, dtype=float)
    return [(st[a], st[b], n[a]) for a, b in zip(starts, ends)]


def _storage_runs(section, x0: float, x1: float) -> list[tuple[float, float]]:
    """(start, end) stations of runs of storage segments, clipped to [x0, x1]."""
    storage = getattr(section, "storage", None)
    if storage is None or not np.any(storage):
        return []
    st, mask = np.asarray(section.station, dtype=float), np.asarray(storage, dtype=bool)
    edges = np.flatnonzero(np.diff(np.concatenate(([False], mask, [False])).astype(np.int8)))
    runs = [(max(st[a], x0), min(st[b], x1)) for a, b in zip(edges[::2], edges[1::2])]
    return [(a, b) for a, b in runs if b > a]


def _storage_hatch(ax, section, fine, zf, level: dict) -> None:
    """Hatch the water over storage segments (they hold water but carry no flow)."""
    storage = getattr(section, "storage", None)
    if storage is None or not np.any(storage) or not level:
        return
    st = np.asarray(section.station, dtype=float)
    seg = np.clip(np.searchsorted(st, fine, side="right") - 1, 0, len(st) - 2)
    top = max(level.values())
    where = np.asarray(storage, dtype=bool)[seg] & (zf < top)
    ax.fill_between(fine, zf, top, where=where, facecolor="none", edgecolor="#555555", hatch="///", lw=0)


def section_figure(section, rows: pd.DataFrame, events, reuse: Figure | None = None) -> Figure:
    """One cross-section zoomed to its wet part: ground, water per event, channel edges, n strip.

    Section ends inside the view are drawn as thick black lines (water against them spills).
    ``reuse``: a figure this function returned before (already rendered): its Axes is emptied and
    drawn again, which skips building a new Axes and its ticks (a third of the cost per section).
    """
    if reuse is not None:
        fig = reuse
        ax = fig.axes[0]
        for artist in [*ax.lines, *ax.collections, *ax.texts, *ax.patches]:
            artist.remove()
    else:
        fig = Figure(figsize=(11, 2.9))
        fig.subplots_adjust(left=0.05, right=0.995, bottom=0.09, top=0.97)
        ax = fig.add_subplot()
    st, z = np.asarray(section.station, dtype=float), np.asarray(section.elevation, dtype=float)
    level = {e: rows.loc[rows["event"] == e, "wse_m"].to_numpy(dtype=float) for e in events}
    level = {e: float(v[0]) for e, v in level.items() if v.size and np.isfinite(v[0])}
    x0, x1, y0, y1 = wet_window(section, list(level.values()))
    fine = np.union1d(st, np.linspace(max(x0, st[0]), min(x1, st[-1]), 250))
    zf = np.interp(fine, st, z)
    for i, event in sorted(enumerate(events), key=lambda t: -level.get(t[1], -np.inf)):
        if event not in level:
            continue
        wet = zf < level[event]
        ax.fill_between(fine, zf, level[event], where=wet, color=WATER, alpha=0.8, lw=0)
        ax.plot(fine, np.where(wet, level[event], np.nan), color=event_colour(i), lw=1.8)
    _storage_hatch(ax, section, fine, zf, level)
    ax.fill_between(st, z, y0, color=GROUND, alpha=0.35, lw=0)
    ax.plot(st, z, color=GROUND, lw=1.6)
    for s in section.channel_edges:
        ax.axvline(s, color="k", ls="--", lw=0.9)
    for end in (st[0], st[-1]):
        if x0 <= end <= x1:
            ax.axvline(end, color="k", lw=3)
    span = y1 - y0
    for k, (a, b, n) in enumerate(_n_runs(section)):
        a, b = max(a, x0), min(b, x1)
        if b <= a:
            continue
        ax.fill_between([a, b], y0, y0 + 0.07 * span, color=("#e8e8e8", "#cfcfcf")[k % 2], lw=0)
        if b - a > 0.05 * (x1 - x0):
            ax.text((a + b) / 2, y0 + 0.035 * span, f"n={n:.3f}", ha="center", va="center", fontsize=7)
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    ax.xaxis.set_major_locator(MaxNLocator(8))          # few tick labels: text is most of the drawing time
    ax.yaxis.set_major_locator(MaxNLocator(4))
    ax.tick_params(labelsize=8)
    ax.grid(alpha=0.3)
    return fig


def section_grid_figure(sections, profile: pd.DataFrame, events, flagged=(), columns: int = 6,
                        noted=()) -> Figure:
    """Every section as a small tile zoomed to its wet part, in one Axes (fast to draw).

    Each tile has its own scales (ground brown, water per event, a dark bar along the bottom under
    storage; tiles to review framed red, with notes only purple) and carries the section number
    (chainages and depths are in the page's table).
    """
    secs = list(sections)
    rows_n = int(np.ceil(len(secs) / columns))
    fig = Figure(figsize=(11, min(1.8, 5.7 / columns) * rows_n + 0.1))
    fig.subplots_adjust(left=0.005, right=0.995, bottom=0.005, top=0.995)
    ax = fig.add_subplot()
    ax.set_axis_off()
    levels = profile.pivot_table(index="section_id", columns="event", values="wse_m", aggfunc="first")
    levels = levels.reindex(index=[s.section_id for s in secs], columns=list(events)).to_numpy(dtype=float)
    ground, frames, flag_frames, note_frames, water_polys, storage_bars = [], [], [], [], [], []
    lines = {i: [] for i in range(len(events))}
    for k, s in enumerate(secs):
        col, row = k % columns, rows_n - 1 - k // columns
        level = list(levels[k])
        x0, x1, y0, y1 = wet_window(s, level)
        st, z = np.asarray(s.station, dtype=float), np.asarray(s.elevation, dtype=float)
        fine = np.union1d(st[(st >= x0) & (st <= x1)], np.linspace(x0, x1, 80))
        zf = np.interp(fine, st, z)

        def tx(x, y, col=col, row=row, x0=x0, x1=x1, y0=y0, y1=y1):
            return col + 0.04 + 0.92 * (x - x0) / (x1 - x0), row + 0.04 + 0.70 * (y - y0) / (y1 - y0)

        ground.append(np.column_stack(tx(fine, np.clip(zf, y0, y1))))      # ground above the view stays in its tile
        storage_bars += [[tx(a, y0), tx(b, y0)] for a, b in _storage_runs(s, x0, x1)]
        top = max([v for v in level if np.isfinite(v)], default=np.nan)
        if np.isfinite(top):
            under = np.minimum(zf, top)
            water_polys.append(np.column_stack(tx(np.r_[fine, fine[::-1]], np.r_[np.full(fine.size, top),
                                                                                   under[::-1]])))
        for i, v in enumerate(level):
            if np.isfinite(v):
                w = np.where(zf < v, v, np.nan)
                lines[i].append(np.column_stack(tx(fine, w)))
        box = [(col + 0.01, row + 0.01), (col + 0.99, row + 0.01), (col + 0.99, row + 0.99), (col + 0.01, row + 0.99),
               (col + 0.01, row + 0.01)]
        flag = s.section_id in flagged
        note = not flag and s.section_id in noted
        (flag_frames if flag else note_frames if note else frames).append(box)
        ax.text(col + 0.04, row + 0.95, str(s.section_id), fontsize=8, fontweight="bold", va="top",
                color=FLAG_COLOUR if flag else NOTE_COLOUR if note else "#222")   # short: text dominates drawing
    ax.add_collection(PolyCollection(water_polys, facecolors=WATER, edgecolors="none"))
    ax.add_collection(LineCollection(ground, colors=GROUND, linewidths=1.0))
    for i, segs in lines.items():
        ax.add_collection(LineCollection(segs, colors=event_colour(i), linewidths=1.0))
    ax.add_collection(LineCollection(storage_bars, colors=STORAGE_COLOUR, linewidths=3.0))
    ax.add_collection(LineCollection(frames, colors="#bbbbbb", linewidths=0.6))
    ax.add_collection(LineCollection(note_frames, colors=NOTE_COLOUR, linewidths=1.2))
    ax.add_collection(LineCollection(flag_frames, colors=FLAG_COLOUR, linewidths=1.6))
    ax.set_xlim(0, columns)
    ax.set_ylim(0, rows_n)
    return fig
