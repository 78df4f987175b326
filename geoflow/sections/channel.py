"""The channel below the DEM surface of one reach: surveyed sections first, a cut shape elsewhere.

A LiDAR DEM shows the flown water surface as a flat strip, not the bed. After the land cover has
set each section's channel edges (:func:`geoflow.roughness.assign_roughness`), this stage

1. merges surveyed ground points into the sections they describe (:mod:`geoflow.sections.survey`);
2. cuts the configured shape below the flown water surface of every other section
   (:mod:`geoflow.sections.burn`), with its depth given or solved from the flow on the flight day.

Each changed section keeps the DEM ground in ``dem_elevation`` and says in ``bed_source`` what
replaced it ("survey" or "shape"); the reach's ``channel`` record holds what was done (points
used, datum check, depth found) as plain values for the manifest, run.log and report.

Pure numpy/scipy/shapely: records in, records out.
"""
from __future__ import annotations

import dataclasses
from collections import Counter

import numpy as np

from ..config.model import ChannelShape
from ..errors import GeometryError
from ..records import ReachGeometry, SurveyPoints
from .burn import MAX_DEPTH, cut_trapezoid, depth_for_flow, flown_water
from .survey import datum_summary, merge_profiles, surveyed_sections


def fit_channel(geom: ReachGeometry, shape: ChannelShape | None, survey: SurveyPoints | None, spacing: float,
                n_channel, where: str = "[channel] shape") -> ReachGeometry:
    """The reach with its channel ground from the survey and/or the shape (see the module notes).

    ``spacing``: the reach's section spacing (m, groups survey points); ``n_channel``: composite
    Manning's n of each section's channel part (for the flow-at-survey depth); ``where``: the
    TOML key of the shape, for messages.
    """
    rid = geom.reach_id
    sections, warnings, summary = list(geom.sections), list(geom.warnings), {}
    if survey is not None and len(survey):
        surveyed, dry, notes, flags = surveyed_sections(geom, survey, spacing)
        sections = [dataclasses.replace(s, flags=tuple(dict.fromkeys(s.flags + tuple(flags[s.section_id]))))
                    if s.section_id in flags else s for s in merge_profiles(sections, surveyed)]
        datum, datum_notes = datum_summary(dry, survey.source, rid)
        warnings += notes + datum_notes
        summary["survey"] = {"points": len(survey), "dem_minus_survey": datum,
                             "sections": [{"chainage_m": round(s.chainage, 2), "section_id": s.section_id,
                                           "channel_points": s.points} for s in surveyed]}
    if shape is not None and any(s.bed_source == "dem" for s in sections):     # not when the survey covers all
        depth, info = shape_depth(rid, sections, shape, n_channel, where)
        sections = [cut_trapezoid(s, shape.bottom_width, shape.side_slope, depth) if s.bed_source == "dem" else s
                    for s in sections]
        clipped = [s.section_id for s in sections if "channel_shape_clipped" in s.flags]
        if clipped:
            warnings.append(f"reach {rid}: the cut channel ({info['top_width_m']:.1f} m wide at the flown water "
                            f"surface) is wider than the channel part of {len(clipped)} section(s) (first: section "
                            f"{clipped[0]}) and was cut off at its edges; check {where} and the channel land cover")
        summary["shape"] = info
    summary["bed_source"] = dict(Counter(s.bed_source for s in sections))
    return dataclasses.replace(geom, sections=tuple(sections), warnings=tuple(warnings), channel=summary)


def shape_depth(rid: str, sections, shape: ChannelShape, n_channel, where: str) -> tuple[float, dict]:
    """Depth (m) of the cut below the flown water surface, and what it came from.

    Given (``depth``), or solved from ``flow_at_survey``: the depth at which the trapezoid full to
    the flown water level carries that flow in uniform flow (Manning, brentq), at the configured
    ``slope`` or the slope of a straight line fitted (least squares) to the flown water level of
    the sections against chainage, with the median composite channel n of the reach.
    """
    info = {"bottom_width_m": shape.bottom_width, "side_slope": shape.side_slope}
    if shape.depth is not None:
        info.update(depth_m=shape.depth, depth_from="config",
                    top_width_m=shape.bottom_width + 2 * shape.side_slope * shape.depth)
        return shape.depth, info
    q = shape.flow_at_survey
    slope, slope_from = water_slope(rid, sections, shape, where)
    n_values = np.asarray(n_channel, dtype=np.float64)
    n = float(np.median(n_values[np.isfinite(n_values)]))
    depth = depth_for_flow(q, shape.bottom_width, shape.side_slope, n, slope)
    if depth is None:
        raise GeometryError(f"reach {rid}: {where} flow_at_survey = {q:g} m3/s is more than a {shape.bottom_width:g} m "
                            f"wide channel of side slope {shape.side_slope:g} carries even {MAX_DEPTH:g} m deep (n "
                            f"{n:.3f}, slope {slope:.5f}); check flow_at_survey (m3/s) and the shape")
    top = shape.bottom_width + 2 * shape.side_slope * depth
    width = float(np.median([s.channel_edges[1] - s.channel_edges[0] for s in sections]))
    if top > width:
        raise GeometryError(f"reach {rid}: {where} flow_at_survey = {q:g} m3/s needs a channel {depth:.2f} m deep and "
                            f"{top:.1f} m wide at the flown water surface, wider than the channel between its edges "
                            f"({width:.1f} m, median); check flow_at_survey, bottom_width and side_slope")
    info.update(depth_m=round(depth, 4), depth_from="flow_at_survey", flow_at_survey_m3s=q, slope=slope,
                slope_from=slope_from, n=n, top_width_m=round(top, 3))
    return depth, info


def water_slope(rid: str, sections, shape: ChannelShape, where: str) -> tuple[float, str]:
    """Water-surface slope on the flight day: the configured one or the fall of the flown water level."""
    if shape.slope is not None:
        return shape.slope, "config"
    chain = np.array([s.chainage for s in sections])
    level = np.array([flown_water(s).level for s in sections])
    if chain.size < 2 or np.ptp(chain) <= 0:
        raise GeometryError(f"reach {rid}: one section is too few to fit the flown water slope; give slope = ... in "
                            f"{where}")
    slope = -float(np.polyfit(chain, level, 1)[0])
    if not slope > 1e-6:
        raise GeometryError(f"reach {rid}: the DEM's lowest channel ground does not fall along the reach (fitted "
                            f"slope {slope:.2e}); give the water-surface slope of the flight day as slope = ... in "
                            f"{where}")
    return slope, "dem"


def describe_channel(rid: str, summary: dict | None) -> str | None:
    """One line for run.log and `geoflow check`: where the channel ground came from, the depth found."""
    if not summary:
        return None
    counts = summary.get("bed_source", {})
    words = [f"{counts[k]} section(s) {k}" for k in ("survey", "shape", "dem") if counts.get(k)]
    line = f"reach {rid}: channel bed from " + ", ".join(words)
    survey = summary.get("survey")
    if survey:
        datum = survey["dem_minus_survey"]
        line += f"; {len(survey['sections'])} surveyed section(s) from {survey['points']} point(s)"
        if datum.get("points"):
            line += f", DEM minus survey on {datum['points']} dry point(s): median {datum['median_m']:+.2f} m"
    shape = summary.get("shape")
    if shape:
        line += (f"; shape {shape['bottom_width_m']:g} m bottom width, side slope {shape['side_slope']:g}, cut "
                 f"{shape['depth_m']:.3f} m below the flown water surface")
        if shape["depth_from"] == "flow_at_survey":
            line += (f" (found for flow_at_survey {shape['flow_at_survey_m3s']:g} m3/s at slope {shape['slope']:.5f}"
                     f" ({shape['slope_from']}), n {shape['n']:.3f})")
    return line
