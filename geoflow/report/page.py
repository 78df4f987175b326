"""One self-contained HTML page per reach, written for a reviewer.

Needs: the reach geometry, its profile table for all events (profile.csv columns), the events in
order and, from the run, a :class:`ReachContext` (run facts, boundaries and n per class, reach-map
layers, markers for the long profile). Provides: an HTML file with every figure embedded.

Page, top to bottom: title and links; the engineering caution; the reach's key facts; summary by
event; map (hillshade, depth per event, outlines, numbered sections, flagged ones in red);
long profile (confluences, flow changes, structures and flagged sections marked); every flagged
section plotted, zoomed to its wet part; the flag words with what to do; all sections as a
compact grid; the run facts (boundaries per event, n per class, options, DEM, version, config
hash); the profile table with events side by side.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..constants import CAUTION
from ..outputs import atomic_path
from . import facts as facts_mod
from .figures import long_profile_figure, section_figure, section_grid_figure
from .mapview import MapLayers, map_figure
from .markup import colour_key, esc, facts_table, figure, page, table
from .tables import event_summary, flag_words, glossary, id_ranges, side_by_side


@dataclass(frozen=True, eq=False)
class ReachContext:
    """What the run knows about a reach beyond its geometry and profile.

    ``run_facts``: (item, value) pairs (:func:`geoflow.report.facts.run_facts`); ``section_facts``
    likewise for the reach's sections; ``events_table`` / ``roughness_table``: frames of
    :mod:`geoflow.report.facts`; ``layers``: reach-map layers or None (no map); ``markers``:
    (chainage m, label) on the long profile: confluences, flow changes and, when the reach has
    them, structures; ``index``: link to the run page (relative), or None.
    """

    run_facts: list = field(default_factory=list)
    section_facts: list = field(default_factory=list)
    events_table: pd.DataFrame | None = None
    roughness_table: pd.DataFrame | None = None
    layers: MapLayers | None = None
    markers: tuple = ()
    index: str | None = None


#: sections to review drawn as full figures (ticks, n strip); any beyond, and every section with
#: notes only (how geoflow built it, nothing to judge), are drawn together as larger tiles in one
#: image: a full figure costs about as much to draw as the whole tile image
MAX_FLAGGED_FIGURES = 24


def _why(words: dict) -> str:
    return "; ".join(f"{w} ({', '.join(evs)})" if evs else w for w, evs in words.items())


def _flag_caption(sid: int, section, words: dict, cls: str) -> str:
    return (f'<b>Section {sid}</b>, chainage {section.chainage:.1f} m: <span class="{cls}">{esc(_why(words))}'
            "</span>. Station from the left end looking downstream (m) against elevation (m), zoomed to the wet "
            "part; dashed: channel edges; thick black: section end; hatched: storage (holds water, carries no "
            "flow); grey strip: Manning's n.")


def _flagged_figures(geom, df, events, flagged: dict, cls: str, budget: int, fig) -> tuple[list[str], object]:
    """Full figures for the first ``budget`` sections of ``flagged``, the rest as one image of tiles."""
    by_id = {s.section_id: s for s in geom.sections}
    ids, parts = list(flagged), []
    for sid in ids[:max(budget, 0)]:
        s, words = by_id[sid], flagged[sid]
        fig = section_figure(s, df[df["section_id"] == sid], events, reuse=fig)     # one Axes for all
        parts.append(figure(fig, f"cross-section {sid} (flagged: {', '.join(words)})",
                            _flag_caption(sid, s, words, cls), ident=f"section-{sid}", cls="flagged-section"))
    rest = ids[max(budget, 0):]
    if rest:
        tiles = section_grid_figure([by_id[i] for i in rest], df, events, set(rest) if cls == "flagged" else (),
                                    columns=3, noted=set(rest) if cls != "flagged" else ())
        cap = ("More flagged sections" if cls == "flagged" else "Sections with notes only") + (
            ", each zoomed to its wet part (ground brown, water per event, dark bar along the bottom: storage, which holds water but carries no flow): ") + "; ".join(
            f"<b>{sid}</b> ({by_id[sid].chainage:.0f} m): {esc(_why(flagged[sid]))}" for sid in rest)
        parts.append(figure(tiles, "cross-sections " + ", ".join(map(str, rest)), cap,
                            ident=f"sections-{cls}-more"))
    return parts, fig


def _flagged_part(geom, df, events, review: dict, notes: dict) -> list[str]:
    parts = ['<h2 id="flagged">Flagged sections</h2>']
    if not review and not notes:
        return parts + ["<p>No section carries a flag.</p>"]
    parts.append(f"<p>{len(review) + len(notes)} section(s) carry a flag; each is plotted here. "
                 f"<span class=\"flagged\">{len(review)} to review</span> (a flag of the flow or of the inputs "
                 "that an engineer must judge; red on the map and the long profile) and "
                 f"<span class=\"noted\">{len(notes)} with notes only</span> (how geoflow built the section or "
                 "what it is; purple). Sections to review get a figure each"
                 f"{f' (the first {MAX_FLAGGED_FIGURES}; the rest as tiles)' if len(review) > MAX_FLAGGED_FIGURES else ''}"
                 "; sections with notes only are drawn together as tiles. The flag words are explained below.</p>")
    parts.append('<h3 id="to-review">Sections to review</h3>')
    more, fig = _flagged_figures(geom, df, events, review, "flagged", MAX_FLAGGED_FIGURES, None)
    parts += more or ["<p>None.</p>"]
    parts.append('<h3 id="with-notes">Sections with notes only</h3>')
    more, _ = _flagged_figures(geom, df, events, notes, "noted", 0, fig)
    return parts + (more or ["<p>None.</p>"])


def _glossary_part(flagged) -> list[str]:
    words = list(dict.fromkeys(w for ws in flagged.values() for w in ws))
    if not words:
        return []
    return ['<h2 id="flags">Flag words: what they mean and what to do</h2>',
            table(glossary(words), cls="glossary")]


def _facts_part(ctx: ReachContext) -> list[str]:
    parts = ['<h2 id="facts">Run facts</h2>', facts_table(ctx.run_facts + ctx.section_facts)]
    if ctx.events_table is not None:
        parts += ["<h3>Events and boundaries</h3>", table(ctx.events_table, cls="facts")]
    if ctx.roughness_table is not None:
        parts += ["<h3>Manning's n per land-cover class</h3>", table(ctx.roughness_table, cls="facts")]
    return parts


def _map_part(geom, ctx: ReachContext, events, review, notes) -> list[str]:
    if ctx.layers is None:
        return []
    fig = map_figure(geom, ctx.layers, events, review, notes)
    cap = ("North up, coordinates in the DEM CRS (m). Hillshade of the DEM; blue: depth per event; coloured line: "
           "the event's flood outline; dark blue: this reach's centreline; dashed: other reaches; section lines "
           "numbered (every few, and all flagged ones: red to review, purple with notes only).")
    return ['<h2 id="map">Map</h2>', figure(fig, f"map of reach {geom.reach_id}", cap, ident="reach-map")]


def _warnings_part(warnings) -> str:
    """Geometry warnings as a list that opens on a click (a long valley can have dozens)."""
    items = "".join(f"<li>{esc(w)}</li>" for w in warnings)
    return (f'<details class="warnings"><summary><b>Geometry warnings ({len(warnings)})</b>: what geoflow '
            f"noticed while laying out the sections (click to show)</summary><ul>{items}</ul></details>")


def render_report(reach_id: str, geom, profile_df: pd.DataFrame, events, caution: str = CAUTION,
                  context: ReachContext | None = None) -> str:
    """The report page as an HTML string."""
    ctx = context or ReachContext()
    events = list(events)
    rid = esc(reach_id)
    df = profile_df.copy()
    df["flags"] = [";".join(flag_words(f)) for f in df["flags"]]
    flagged = facts_mod.flagged_sections(df, geom)
    review, notes = facts_mod.split_flagged(flagged)
    key = [("cross-sections", str(len(geom.sections))), ("chainage range (m)", facts_mod.chainage_range(df)),
           ("events", ", ".join(events)), ("sections to review", id_ranges(review) or "none"),
           ("sections with notes only", id_ranges(notes) or "none")]
    key += [(k, v) for k, v in ctx.run_facts if k in ("run name", "program", "config SHA-256")]
    links = [f'<a href="{esc(ctx.index)}">run index</a>'] if ctx.index else []
    links += [f'<a href="#{a}">{t}</a>' for a, t in (("map", "map"), ("long-profile", "long profile"),
                                                       ("flagged", "flagged sections"), ("flags", "flag words"),
                                                       ("all-sections", "all sections"), ("facts", "run facts"),
                                                       ("table", "profile table"))]
    parts = [f"<h1>Reach {rid}: steady water-surface profiles</h1>", f"<nav>{' '.join(links)}</nav>",
             f'<div class="caution">Caution: {esc(caution)}</div>', facts_table(key)]
    if geom.warnings:
        parts.append(_warnings_part(geom.warnings))
    parts += ["<h2 id=\"summary\">Summary by event</h2>", table(event_summary(df, events)), colour_key(events)]
    parts += _map_part(geom, ctx, events, review, notes)
    marks = ", ".join(f"{label} at {ch:.0f} m" for ch, label in ctx.markers) or "none"
    parts += ['<h2 id="long-profile">Long profile</h2>',
              figure(long_profile_figure(df, events, geom, ctx.markers, review, notes), "long profile",
                     "Per event: water surface (solid), energy grade line (dashed), water level at critical depth "
                     "(dotted); brown: bed (lowest ground) and ground at the left (dashed) and right (dotted) channel "
                     "edges. Red triangles and numbers: sections to review (numbers thinned where crowded); small purple "
                     f"marks: sections with notes only. Vertical lines: {esc(marks)}.",
                     ident="long-profile-figure")]
    parts += _flagged_part(geom, df, events, review, notes)
    parts += _glossary_part(flagged)
    parts += ['<h2 id="all-sections">All cross-sections</h2>',
              "<p>Each tile is one section, numbered, zoomed to its wet part (its own scales); dark bar along the bottom: storage; red frame and number: "
              "to review; purple: notes only. Chainages, levels and depths are in the table below.</p>",
              figure(section_grid_figure(geom.sections, df, events, set(review), columns=8 if len(geom.sections) > 48
                                         else 6, noted=set(notes)), "all cross-sections", "", dpi=90)]
    parts += _facts_part(ctx)
    parts += ['<h2 id="table">Profile table, events side by side</h2>',
              "<p>All columns, with full precision, are in profile.csv.</p>",
              f'<div class="wide">{table(side_by_side(df, events))}</div>']
    return page(f"Reach {reach_id}: water-surface profiles", parts)


def write_report(path, reach_id: str, geom, profile_df: pd.DataFrame, events, caution: str = CAUTION,
                 context: ReachContext | None = None) -> Path:
    """Write the reach report as one self-contained HTML file (atomic); return its path."""
    path = Path(path)
    text = render_report(reach_id, geom, profile_df, events, caution, context)
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
