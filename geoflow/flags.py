"""Every flag word a section can carry: what it means, what kind of thing it is, what to do.

One table, read by the README's flag glossary, the reports and the terminal summary (pure: no
imports). Kinds:

- ``hydraulic``: a fact of the computed flow the reviewer must judge (it may be real);
- ``tool``: an artefact of how geoflow built the section (width cap, confluence shortening, ...);
- ``input``: something in the inputs that needed repair or a fallback;
- ``info``: describes the section, no action needed.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Flag:
    word: str
    kind: str          # "hydraulic" | "tool" | "input" | "info"
    meaning: str
    action: str


FLAGS: dict[str, Flag] = {f.word: f for f in (
    Flag("boundary", "info", "the water level here was set by the boundary condition (downstream end for a "
         "subcritical run, upstream end for a supercritical one)",
         "check the boundary; levels within about one backwater length of it depend on it"),
    Flag("critical_fallback", "hydraulic", "the energy equation has no solution in the running flow regime here "
         "(or the boundary level was on the wrong side of critical), so the water level was set to critical depth",
         "look at the section: a real control (a weir-like crest, a constriction, a steep drop) is a hydraulic "
         "fact; a section cut along a road or across an odd bit of terrain is not - move or redraw it, or run "
         "the mixed regime"),
    Flag("no_convergence", "hydraulic", "the energy balance could not be closed within the tolerance; the level "
         "fell back to critical depth (critical_fallback is set too)",
         "check the section geometry and spacing; add sections where the channel changes quickly"),
    Flag("not_contained", "hydraulic", "the water level is above an end of the section: water spills beyond it "
         "(vertical walls were added there for the computation); spills_left / spills_right say which end and "
         "profile.csv columns spill_left_m / spill_right_m by how much",
         "widen the section ([sections] width or rise) on that side, unless that end meets another reach's area "
         "(left_end_at_other_reach / right_end_at_other_reach), which maps that water"),
    Flag("spills_left", "hydraulic", "the water level stands above the left end of the section (looking downstream) "
         "by spill_left_m (profile.csv)", "widen the section on its left, unless left_end_at_other_reach is set"),
    Flag("spills_right", "hydraulic", "the water level stands above the right end of the section (looking "
         "downstream) by spill_right_m (profile.csv)",
         "widen the section on its right, unless right_end_at_other_reach is set"),
    Flag("jump_upstream", "hydraulic", "a hydraulic jump lies between this section and the next one upstream "
         "(mixed regime)", "check the jump location with closer sections; expect local scour and turbulence"),
    Flag("several_critical_depths", "info", "specific energy has more than one local minimum (compound section); "
         "the lowest is reported as critical", "none"),
    Flag("width_capped", "tool", "adaptive width: a side reached [sections] width / 2 before the ground rose by "
         "[sections] rise", "widen the sections if the flood reaches the section end"),
    Flag("shortened", "tool", "the section crossed a neighbour of the same reach (tight bend) and was shortened",
         "check the floodplain beyond the shortened end is not needed; reduce spacing or smooth the centreline"),
    Flag("shortened_at_confluence", "tool", "a side crossed another reach's centreline and was shortened to stop "
         "short of it (straight sections cut with others= through the Python API)",
         "none if the other reach carries that water; otherwise review the confluence"),
    Flag("left_end_at_other_reach", "tool", "the left side stops where another reach's part of the valley floor "
         "begins (its channel and banks, a tributary's mouth area, or ground nearer its centreline; README, "
         "reaches that meet); water beyond that end is mapped by that reach",
         "none; a spill over this end is expected where both reaches are in flood"),
    Flag("right_end_at_other_reach", "tool", "the right side stops where another reach's part of the valley floor "
         "begins (see left_end_at_other_reach)", "none; a spill over this end is expected where both reaches are in "
         "flood"),
    Flag("moved_off_confluence", "tool", "the section was moved along the centreline (by at most half a spacing) "
         "because its channel leg would have reached into another reach's channel",
         "none; check the confluence in sections.gpkg if the other reach's channel is drawn unusually"),
    Flag("moved_off_strip", "tool", "the section ran along a narrow raised strip (a road, embankment or levee "
         "crest, from the land cover or a ridge in the DEM) and was moved to, or split into two at, the strip's "
         "faces (by at most half a spacing)", "none; check the faces see the strip's opening in sections.gpkg"),
    Flag("along_strip", "tool", "more than a quarter of a floodplain leg runs along a narrow raised strip and no "
         "position within half a spacing avoids it",
         "draw that section yourself ([sections] lines) across the strip, or change [sections] spacing"),
    Flag("at_embankment_face", "info", "the section sits at a face of a road or embankment that crosses the valley; "
         "its floodplain beyond the opening is storage (no conveyance)",
         "none; look at the opening in sections.gpkg (storage_m) and at the levels either side"),
    Flag("storage", "tool", "part of the floodplain holds water but carries no flow (behind an embankment beyond "
         "its opening, a side valley or pit that neighbouring sections meet as a wall, or a [sections] "
         "storage_areas polygon): its area counts, its conveyance is zero", "check storage_m in sections.gpkg; "
         "draw storage_areas to add more, or set [sections] detect_storage = false to keep only yours"),
    Flag("at_confluence", "tool", "the section is centred on another reach's centreline (the junction itself) and "
         "could not be shortened", "end the tributary's centreline at the receiving channel's edge"),
    Flag("crosses_section", "tool", "the section crosses another section of the same reach",
         "redraw the user section lines (or let geoflow cut them) so they do not cross"),
    Flag("ground_gap_filled", "input", "a few DEM nodata samples along the section were interpolated",
         "check the DEM there (water bodies, voids)"),
    Flag("no_channel_cover", "input", "no land-cover polygon of the channel class crosses the section; the channel "
         "edges were taken from breaks in the ground slope", "add the channel to the land-cover layer there"),
    Flag("landcover_gap", "input", "part of the section lies in no land-cover polygon; [roughness] default_n was "
         "used there", "fill the gap in the land-cover layer"),
)}


KIND_MEANING = {
    "hydraulic": "a fact of the computed flow; judge it (it may be real)",
    "tool": "how geoflow built the section",
    "input": "something in the inputs needed a repair or a fallback",
    "info": "describes the section; no action needed",
}


def markdown_table() -> str:
    """The README's flag table, generated from :data:`FLAGS` (a test keeps the README in step)."""
    rows = ["| flag | kind | meaning | what to do |", "|---|---|---|---|"]
    for f in FLAGS.values():
        rows.append(f"| `{f.word}` | {f.kind} | {f.meaning} | {f.action} |")
    return "\n".join(rows) + "\n"


#: Older names still emitted until the solver kernel lands (the lead renames them there).
ALIASES = {"critical_assumed": "critical_fallback"}


def describe(word: str) -> Flag:
    """The entry of a flag word (an unknown word is described as such, never an error)."""
    word = ALIASES.get(word, word)
    return FLAGS.get(word, Flag(word, "info", "(not documented)", "report it: every flag should be documented"))
