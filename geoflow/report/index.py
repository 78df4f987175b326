"""The run's index page (report/index.html): every reach and event, status, flags, links.

Needs plain values from the run-level assembly (:class:`RunPage`); reads nothing itself.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import shapely
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..constants import CAUTION
from ..flags import needs_review
from ..outputs import atomic_path
from .markup import FLAG_COLOUR, colour_key, esc, event_colour, facts_table, figure, page, table
from .tables import flag_words, glossary, id_ranges


@dataclass(frozen=True, eq=False)
class RunPage:
    """What the index shows.

    ``reaches``: {reach id: manifest entry (status, error, sections, warnings)} in layer order;
    ``units``: {"reach/event": manifest unit entry}; ``profile``: profile.csv rows; ``outlines``:
    {(reach id, event): (Multi)Polygon}; ``centrelines``: {reach id: LineString};
    ``section_lines``: {(reach id, section id): LineString}; ``pages``: {reach id: relative link
    to its page}; ``files``: [(label, relative link)] of the run-level outputs.
    """

    run_facts: list
    events: list
    reaches: dict
    units: dict = field(default_factory=dict)
    profile: pd.DataFrame | None = None
    outlines: dict = field(default_factory=dict)
    centrelines: dict = field(default_factory=dict)
    section_lines: dict = field(default_factory=dict)
    pages: dict = field(default_factory=dict)
    files: list = field(default_factory=list)
    crossings: list = field(default_factory=list)


def _flags_of(profile: pd.DataFrame | None, rid: str) -> dict[str, set]:
    """{flag word: section ids} of one reach (all events)."""
    out: dict[str, set] = {}
    if profile is None or not len(profile):
        return out
    mine = profile[profile["reach_id"].astype(str) == rid]
    for sid, f in zip(mine["section_id"], mine["flags"]):
        for w in flag_words(f):
            out.setdefault(w, set()).add(int(sid))
    return out


def reach_rows(run: RunPage) -> pd.DataFrame:
    """One row per reach: status, sections, per event largest depth and flagged sections, link."""
    rows = []
    for rid, entry in run.reaches.items():
        link = run.pages.get(rid)
        row = {"reach": f'<a href="{esc(link)}">{esc(rid)}</a>' if link else esc(rid),
               "status": esc(entry.get("status", "failed")) if entry.get("status") == "complete"
               else f'<span class="failed">{esc(entry.get("status", "failed"))}</span>',
               "cross-sections": str(entry.get("sections", ""))}
        for ev in run.events:
            unit = run.units.get(f"{rid}/{ev}", {})
            depth = unit.get("max_depth_m")
            row[f"{esc(ev)}: largest depth (m)"] = "" if depth is None else f"{depth:.2f}"
            row[f"{esc(ev)}: flagged sections"] = "" if unit.get("status") != "complete" else \
                str(unit.get("flagged_sections", ""))
        flags = _flags_of(run.profile, rid)
        row["flags to review (sections)"] = esc("; ".join(f"{w}: {id_ranges(s)}" for w, s in sorted(flags.items())
                                                          if needs_review(w))) or "none"
        row["notes (sections)"] = esc("; ".join(f"{w}: {id_ranges(s)}" for w, s in sorted(flags.items())
                                                if not needs_review(w))) or "none"
        row["problem"] = esc(entry.get("error") or "")
        rows.append(row)
    return pd.DataFrame(rows)


def overview_figure(run: RunPage) -> Figure | None:
    """All reaches: centrelines, outlines per event, flagged section lines in red."""
    if not run.centrelines:
        return None
    b = shapely.bounds(np.array(list(run.centrelines.values()) + [g for g in run.outlines.values() if g is not None]))
    x0, y0, x1, y1 = np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3])
    aspect = (x1 - x0) / max(y1 - y0, 1e-9)
    fig = Figure(figsize=(11, float(np.clip(10.0 / aspect, 2.5, 9.0)) + 0.4))
    ax = fig.add_axes([0.07, 0.08, 0.9, 0.88])
    for i, ev in reversed(list(enumerate(run.events))):
        rings = [np.asarray(r.coords)[:, :2] for (rid, e), g in run.outlines.items() if e == ev and g is not None
                 for p in shapely.get_parts(g) for r in [p.exterior, *p.interiors]]
        if rings:
            ax.add_collection(LineCollection(rings, colors=event_colour(i), linewidths=0.9))
    flagged = {(rid, sid) for rid in run.centrelines for w, ids in _flags_of(run.profile, rid).items() for sid in ids
               if needs_review(w)}
    segs = [np.asarray(line.coords)[:, :2] for key, line in run.section_lines.items() if key in flagged]
    ax.add_collection(LineCollection(segs, colors=FLAG_COLOUR, linewidths=1.2))
    for rid, line in run.centrelines.items():
        c = np.asarray(line.coords)[:, :2]
        ax.plot(c[:, 0], c[:, 1], color="#0b3c8c", lw=1.4)
        mid = c[len(c) // 2]
        ax.text(mid[0], mid[1], f" {rid}", fontsize=9, fontweight="bold", color="#0b3c8c")
    pad = 0.03 * max(x1 - x0, y1 - y0)
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_aspect("equal")
    ax.xaxis.set_major_locator(MaxNLocator(8))
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(labelsize=7)
    return fig


def render_index(run: RunPage, caution: str = CAUTION) -> str:
    name = dict(run.run_facts).get("run name", "")
    parts = [f"<h1>Run {esc(name)}: reaches and events</h1>",
             f'<div class="caution">Caution: {esc(caution)}</div>', facts_table(run.run_facts),
             "<h2 id=\"reaches\">Reaches</h2>", table(reach_rows(run), escape=False, cls="reaches"), colour_key(run.events)]
    fig = overview_figure(run)
    if fig is not None:
        parts += ['<h2 id="map">Overview map</h2>',
                  figure(fig, "overview map of all reaches", "North up, DEM CRS (m). Flood outline per event "
                         "(colours as above), centrelines in dark blue, sections with a flag to review in red.", ident="overview")]
    words = sorted({w for rid in run.reaches for w in _flags_of(run.profile, rid)})
    if words:
        parts += ['<h2 id="flags">Flag words: what they mean and what to do</h2>', table(glossary(words),
                                                                                         cls="glossary")]
    if run.crossings:
        parts += ["<h2 id=\"crossings\">Sections of different reaches that cross</h2>",
                  f"<p>{len(run.crossings)} pair(s), listed in manifest.json; review them near confluences:</p>",
                  f'<p class="note">{esc("; ".join(run.crossings[:200]))}</p>']
    parts += ['<h2 id="files">Files of the run</h2>',
              "<ul>" + "".join(f'<li><a href="{esc(link)}">{esc(label)}</a></li>' for label, link in run.files)
              + "</ul>"]
    for rid in run.reaches:
        files = [f for unit, u in sorted(run.units.items()) if unit.split("/", 1)[0] == rid
                 for f in u.get("files", []) if f.startswith("rasters/")]
        if files:
            parts.append(f"<p>Rasters of {esc(rid)}: " + ", ".join(f'<a href="../{esc(f)}">{esc(f.rsplit("/", 1)[-1])}</a>'
                                                                    for f in files) + "</p>")
    return page(f"Run {name}: index", parts)


def write_index(path, run: RunPage, caution: str = CAUTION) -> Path:
    """Write report/index.html (atomic); return its path."""
    path = Path(path)
    text = render_index(run, caution)
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
