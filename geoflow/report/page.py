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
from .tables import event_summary, flag_words, glossary, side_by_side


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


#: flagged sections drawn as full figures; any beyond are drawn together as larger tiles (one image)
MAX_FLAGGED_FIGURES = 40


def _why(words: dict) -> str:
    return "; ".join(f"{w} ({', '.join(evs)})" if evs else w for w, evs in words.items())


def _flag_caption(sid: int, section, words: dict) -> str:
    return (f'<b>Section {sid}</b>, chainage {section.chainage:.1f} m: <span class="flagged">{esc(_why(words))}'
            "</span>. Station from the left end looking downstream (m) against elevation (m), zoomed to the wet "
            "part; dashed: channel edges; thick black: section end; grey strip: Manning's n.")


def _flagged_part(geom, df, events, flagged) -> list[str]:
    parts = ['<h2 id="flagged">Flagged sections</h2>']
    if not flagged:
        return parts + ["<p>No section carries a flag.</p>"]
    parts.append(f"<p>{len(flagged)} section(s) carry a flag; each is plotted here and shown in red on the map "
                 "and the long profile. The flag words are explained below.</p>")
    by_id = {s.section_id: s for s in geom.sections}
    ids = list(flagged)
    fig = None
    for sid in ids[:MAX_FLAGGED_FIGURES]:
        s, words = by_id[sid], flagged[sid]
        fig = section_figure(s, df[df["section_id"] == sid], events, reuse=fig)     # one Axes for all
        parts.append(figure(fig, f"cross-section {sid} (flagged: {', '.join(words)})", _flag_caption(sid, s, words),
                            ident=f"section-{sid}", cls="flagged-section"))
    rest = ids[MAX_FLAGGED_FIGURES:]
    if rest:
        fig = section_grid_figure([by_id[i] for i in rest], df, events, set(rest), columns=3)
        cap = "More flagged sections, each zoomed to its wet part: " + "; ".join(
            f"<b>{sid}</b> ({by_id[sid].chainage:.0f} m): {esc(_why(flagged[sid]))}" for sid in rest)
        parts.append(figure(fig, "cross-sections " + ", ".join(map(str, rest)), cap, ident="sections-flagged-more"))
    return parts


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


def _map_part(geom, ctx: ReachContext, events, flagged) -> list[str]:
    if ctx.layers is None:
        return []
    fig = map_figure(geom, ctx.layers, events, flagged)
    cap = ("North up, coordinates in the DEM CRS (m). Hillshade of the DEM; blue: depth per event; coloured line: "
           "the event's flood outline; dark blue: this reach's centreline; dashed: other reaches; section lines "
           "numbered (every few, and all flagged ones, in red).")
    return ['<h2 id="map">Map</h2>', figure(fig, f"map of reach {geom.reach_id}", cap, ident="reach-map")]


def render_report(reach_id: str, geom, profile_df: pd.DataFrame, events, caution: str = CAUTION,
                  context: ReachContext | None = None) -> str:
    """The report page as an HTML string."""
    ctx = context or ReachContext()
    events = list(events)
    rid = esc(reach_id)
    df = profile_df.copy()
    df["flags"] = [";".join(flag_words(f)) for f in df["flags"]]
    flagged = facts_mod.flagged_sections(df, geom)
    key = [("cross-sections", str(len(geom.sections))), ("chainage range (m)", facts_mod.chainage_range(df)),
           ("events", ", ".join(events)), ("flagged sections", ", ".join(map(str, flagged)) or "none")]
    key += [(k, v) for k, v in ctx.run_facts if k in ("run name", "program", "config SHA-256")]
    links = [f'<a href="{esc(ctx.index)}">run index</a>'] if ctx.index else []
    links += [f'<a href="#{a}">{t}</a>' for a, t in (("map", "map"), ("long-profile", "long profile"),
                                                       ("flagged", "flagged sections"), ("flags", "flag words"),
                                                       ("all-sections", "all sections"), ("facts", "run facts"),
                                                       ("table", "profile table"))]
    parts = [f"<h1>Reach {rid}: steady water-surface profiles</h1>", f"<nav>{' '.join(links)}</nav>",
             f'<div class="caution">Caution: {esc(caution)}</div>', facts_table(key)]
    if geom.warnings:
        parts.append("<p><b>Geometry warnings:</b> " + esc("; ".join(geom.warnings)) + "</p>")
    parts += ["<h2 id=\"summary\">Summary by event</h2>", table(event_summary(df, events)), colour_key(events)]
    parts += _map_part(geom, ctx, events, flagged)
    marks = ", ".join(f"{label} at {ch:.0f} m" for ch, label in ctx.markers) or "none"
    parts += ['<h2 id="long-profile">Long profile</h2>',
              figure(long_profile_figure(df, events, geom, ctx.markers, flagged), "long profile",
                     "Per event: water surface (solid), energy grade line (dashed), water level at critical depth "
                     "(dotted); brown: bed (lowest ground) and ground at the left (dashed) and right (dotted) channel "
                     f"edges. Red triangles and numbers: flagged sections. Vertical lines: {esc(marks)}.",
                     ident="long-profile-figure")]
    parts += _flagged_part(geom, df, events, flagged)
    parts += _glossary_part(flagged)
    parts += ['<h2 id="all-sections">All cross-sections</h2>',
              "<p>Each tile is one section, numbered, zoomed to its wet part (its own scales); red frame and number: "
              "flagged. Chainages, levels and depths are in the table below.</p>",
              figure(section_grid_figure(geom.sections, df, events, set(flagged), columns=8 if len(geom.sections) > 48
                                         else 6), "all cross-sections", "", dpi=90)]
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
