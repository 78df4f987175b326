"""Every flag word a section can carry: what it means, what kind of thing it is, what to do.

One table, read by the README's flag glossary, the reports and the terminal summary (pure: no
imports). Profile flags come from sections and the solver; ``boundary_controlled`` and ``not_rising``
appear in rating_curves.csv only; structures.csv carries the structures' own flags (culverts, weirs,
bridges: ``geoflow.hydraulics.structures``) and the solver's flags at the structure. Kinds:

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
    Flag("not_contained", "hydraulic", "the water level is above an end of the section: water spills beyond it, "
         "but the computation counts no flow area past the section's ends; spills_left / spills_right say which "
         "end and profile.csv columns spill_left_m / spill_right_m by how much",
         "widen the section ([sections] width or rise) on that side, unless that end meets another reach's area "
         "(left_end_at_other_reach / right_end_at_other_reach), which maps that water, or the spill is meant to be "
         "ignored"),
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
    Flag("survey_above_dem", "input", "the lowest surveyed ground of this section's channel lies above the DEM's "
         "lowest channel ground (the water surface the DEM shows), which a survey of the bed cannot do",
         "check the survey's vertical datum (see the datum check in the warnings) and where it was placed"),
    Flag("channel_shape_clipped", "tool", "the channel shape of [channel] shape is wider than the channel part "
         "of this section at the flown water surface and was cut off at the channel edges",
         "check the shape's bottom width and side slope, and the channel land-cover polygon here"),
    Flag("boundary_controlled", "hydraulic", "rating_curves.csv: the section lies within one backwater length "
         "(0.7 y_n / S0) of the boundary that controls the profile, so its level at this discharge reflects the "
         "boundary assumption more than the section itself",
         "do not read the rating here as the section's own; move the boundary farther away (extend the reach) or "
         "give the boundary a measured rating"),
    Flag("not_rising", "hydraulic", "rating_curves.csv: the level at this discharge is not above the level at the "
         "next smaller discharge (a fixed boundary level, a change of regime or a control)",
         "look at the section and the boundary; a rating must rise with discharge"),
    Flag("landcover_gap", "input", "part of the section lies in no land-cover polygon; [roughness] default_n was "
         "used there", "fill the gap in the land-cover layer"),
    # -- structures ([[structures]]): the face sections and the solver at a structure
    Flag("structure_upstream_face", "info", "the section is the upstream face of a culvert, weir or bridge: its level "
         "is the structure's headwater (structures.csv)", "none; check the structure's row in structures.csv"),
    Flag("structure_downstream_face", "info", "the section is the downstream face of a culvert, weir or bridge: its "
         "level is the structure's tailwater; no energy step links it to the section upstream",
         "none; check the structure's row in structures.csv"),
    Flag("headwater_critical", "hydraulic", "critical depth at the structure's upstream face is above the headwater "
         "the structure needs, so the level there is critical depth: the structure does not control it (the "
         "flow may be supercritical upstream)", "run the mixed regime; check the structure's inverts or crest"),
    Flag("outlet_critical", "hydraulic", "supercritical regime: the structure's downstream face was started at "
         "critical depth (the outlet level of a structure passing supercritical flow is not computed; critical "
         "depth is the highest supercritical level)", "check the levels just below the structure against the "
         "structure's outlet (e.g. a culvert's barrel depth)"),
    Flag("headwater_above_supercritical", "hydraulic", "supercritical regime: the structure's headwater (with a free "
         "outfall) has more specific force than the supercritical flow arriving at its upstream face, so a "
         "hydraulic jump would form upstream of it, which this regime cannot represent",
         "run the mixed regime"),
    Flag("supercritical_approach", "hydraulic", "mixed regime: the flow reaches the structure's upstream face "
         "supercritical, with more specific force than the structure's headwater; the structure does not back "
         "it up and a jump is placed at the downstream face where the level there is subcritical",
         "check the structure and the jump with closer sections; expect scour at the outlet"),
    # -- flags of the structures themselves (structures.csv; geoflow.hydraulics.structures, docs/structures.md)
    Flag("outlet_low_head", "hydraulic", "culvert in outlet control with a headwater below 0.75 D, below the range "
         "where HDS-5 supports the full-barrel outlet-control equation",
         "check the level with a backwater profile through the barrel"),
    Flag("inlet_transition", "hydraulic", "culvert in inlet control on the transition between the unsubmerged and "
         "submerged forms (3.5 < X < 4.0), where HDS-5's charts are least certain",
         "accept HDS-5's about 10 % accuracy or check against its charts"),
    Flag("adverse_slope", "input", "culvert outlet invert above its inlet invert; HDS-5 assumes a falling barrel",
         "check invert_up and invert_down"),
    Flag("road_weir_submerged", "hydraulic", "the tailwater is above the road crest while the road overtops; "
         "Villemonte's reduction was applied (on the high side for levels)", "check the level if it matters"),
    Flag("road_weir_drowned", "hydraulic", "tailwater head over the road crest at least 0.9 of the headwater head: "
         "the road hardly controls the level", "check the level with a model of the flow across the road"),
    Flag("submerged", "hydraulic", "weir: the tailwater is above the crest; Villemonte's reduction was applied "
         "(derived on sharp crests, so on the high side for broad crests)", "check the level if it matters"),
    Flag("drowned", "hydraulic", "weir: tailwater head at least 0.9 of the headwater head; the weir hardly controls "
         "the level", "check the level with an energy-loss (expansion) computation"),
    Flag("approach_critical", "hydraulic", "the structure's upstream face cannot carry the flow subcritically at "
         "the energy the structure needs; the headwater is its critical level",
         "check the face section and the crest or chords"),
    Flag("coefficient_out_of_range", "input", "weir coefficient rule used outside its range (H/P > 1 for Rehbock "
         "and Kindsvater-Carter, H/breadth outside 0.08-0.5 for Bos)", "use a coefficient from a rating"),
    Flag("critical_in_opening", "hydraulic", "bridge: no subcritical solution inside the opening (it chokes); the "
         "level upstream is set by critical depth in the opening", "check the downstream regime (mixed) and a jump"),
    Flag("yarnell_out_of_range", "hydraulic", "bridge: Yarnell's pier formula governs outside its tested range "
         "(pier area ratio > 0.4 or Froude number > 0.8 downstream)", "prefer the energy or momentum result"),
    Flag("low_chord_reached", "hydraulic", "bridge: the low-flow energy reaches the low chord but the pressure-flow "
         "level is lower; the headwater is the low-flow level capped at the low chord",
         "check the sluice and orifice coefficients"),
    Flag("deck_weir_submerged", "hydraulic", "bridge: the tailwater is above the deck crest while the deck "
         "overtops; Villemonte's reduction was applied", "check the level if it matters"),
    Flag("tailwater_below_critical", "hydraulic", "bridge: the tailwater is below critical depth at the downstream "
         "face and cannot control the bridge; critical depth there was used instead",
         "check the regime of the profile downstream"),
    Flag("no_yarnell_coefficient", "info", "bridge: the highest-headwater rule left out Yarnell's method because the "
         "pier shape has no published Yarnell K", "give piers yarnell_k to include it"),
    Flag("no_drag_coefficient", "info", "bridge: the highest-headwater rule left out the momentum method because the "
         "pier shape has no drag coefficient", "give piers drag_coefficient to include it"),
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


#: earlier names of flag words, still read (results written before the rename, the solver until it
#: emits the new name): old word -> current word
RENAMED = {"critical_assumed": "critical_fallback"}   # the word before 0.2.0 (old part files, old manifests)


#: kinds a reviewer must judge; the other kinds describe how geoflow built the section
REVIEW_KINDS = ("hydraulic", "input")


def needs_review(word: str) -> bool:
    """True for a flag of a kind in :data:`REVIEW_KINDS` (an undocumented word counts as one)."""
    f = describe(word)
    return f.kind in REVIEW_KINDS or f.meaning == "(not documented)"


def describe(word: str) -> Flag:
    """The entry of a flag word (an earlier name is described under its current entry; an unknown
    word is described as such, never an error)."""
    word = RENAMED.get(word, word)
    return FLAGS.get(word, Flag(word, "info", "(not documented)", "report it: every flag should be documented"))
