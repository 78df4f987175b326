"""Every flag word a section can carry: what it means, what kind of thing it is, what to do.

One table, read by the README's flag glossary, the reports and the terminal summary (pure: no
imports). Profile flags come from sections and the solver; ``boundary_controlled`` and ``not_rising``
appear in rating_curves.csv only. Kinds:

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
         "but the computation counts no flow area past the section's ends",
         "widen the section ([sections] width or rise) unless the spill is meant to be ignored"),
    Flag("jump_upstream", "hydraulic", "a hydraulic jump lies between this section and the next one upstream "
         "(mixed regime)", "check the jump location with closer sections; expect local scour and turbulence"),
    Flag("several_critical_depths", "info", "specific energy has more than one local minimum (compound section); "
         "the lowest is reported as critical", "none"),
    Flag("width_capped", "tool", "adaptive width: a side reached [sections] width / 2 before the ground rose by "
         "[sections] rise", "widen the sections if the flood reaches the section end"),
    Flag("shortened", "tool", "the section crossed a neighbour of the same reach (tight bend) and was shortened",
         "check the floodplain beyond the shortened end is not needed; reduce spacing or smooth the centreline"),
    Flag("shortened_at_confluence", "tool", "a side crossed another reach's centreline and was shortened to stop "
         "short of it", "none if the other reach carries that water; otherwise review the confluence"),
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
)}


#: earlier names of flag words, still read (results written before the rename, the solver until it
#: emits the new name): old word -> current word
RENAMED = {"critical_assumed": "critical_fallback"}   # the word before 0.2.0 (old part files, old manifests)


def describe(word: str) -> Flag:
    """The entry of a flag word (an earlier name is described under its current entry; an unknown
    word is described as such, never an error)."""
    word = RENAMED.get(word, word)
    return FLAGS.get(word, Flag(word, "info", "(not documented)", "report it: every flag should be documented"))
