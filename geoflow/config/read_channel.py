"""Reader of the [channel] table: surveyed ground points and/or a shape cut below the DEM surface.

Problems are recorded with their TOML path (see :mod:`geoflow.config.read`), none raised.
"""
from __future__ import annotations

from types import MappingProxyType
from typing import Any

from .model import ChannelConfig, ChannelReach, ChannelShape
from .read import _Reader

SHAPE_KEYS = ("bottom_width", "side_slope", "depth", "flow_at_survey", "slope")
DEPTH_KEYS = ("depth", "flow_at_survey")


def _read_channel(r: _Reader, doc: dict) -> ChannelConfig | None:
    """[channel]: surveyed ground points and/or a shape cut below the DEM's channel ground."""
    t = r.table(doc, "channel", "[channel]", required=False)
    if t is None:
        return None
    r.known(t, ("survey", "survey_layer", "shape", "reaches"), "[channel]")
    survey = r.existing(t, "survey", "[channel]") if "survey" in t else None
    layer = r.value(t, "survey_layer", "[channel]", "string")
    raw_shape = t.get("shape")
    shape = _read_shape(r, raw_shape, "[channel] shape") if "shape" in t else None
    reaches = {}
    for rid, sub in (r.table(t, "reaches", "[channel.reaches]", required=False) or {}).items():
        where = f"[channel.reaches.{rid}]"
        if not isinstance(sub, dict):
            r.problem(where, "must be a table with shape and/or use_survey")
            continue
        r.known(sub, ("shape", "use_survey"), where)
        own = None
        if "shape" in sub:
            merged = _merged_shape(raw_shape, sub["shape"])
            own = _read_shape(r, merged, f"{where} shape") if merged is not None else None
            if merged is None:
                r.problem(f"{where} shape", "must be a table such as { bottom_width = 8.0, side_slope = 2.0, "
                                            "depth = 1.5 }")
        reaches[str(rid)] = ChannelReach(shape=own, use_survey=r.flag(sub, "use_survey", where, True))
    if survey is None and shape is None and not any(c.shape for c in reaches.values()):
        r.problem("[channel]", "gives neither survey nor shape; give survey = \"<points file>\" and/or "
                               "shape = { bottom_width = ..., side_slope = ..., depth = ... }, or remove the table")
    if survey is None and layer is not None:
        r.problem("[channel] survey_layer", "is given without [channel] survey; name the survey file too")
    return ChannelConfig(survey=survey, survey_layer=layer, shape=shape, reaches=MappingProxyType(reaches))


def _merged_shape(default: Any, own: Any) -> dict | None:
    """A per-reach shape table over the default one: its keys win; its depth or flow replaces both."""
    if not isinstance(own, dict):
        return None
    base = dict(default) if isinstance(default, dict) else {}
    if any(k in own for k in DEPTH_KEYS):
        for k in DEPTH_KEYS:
            base.pop(k, None)
    base.update(own)
    return base


def _read_shape(r: _Reader, v: Any, where: str) -> ChannelShape | None:
    """{ bottom_width, side_slope, depth | flow_at_survey [, slope] } with positive sizes."""
    if not isinstance(v, dict):
        r.problem(where, "must be a table such as { bottom_width = 8.0, side_slope = 2.0, depth = 1.5 }")
        return None
    r.known(v, SHAPE_KEYS, where)
    width = r.value(v, "bottom_width", where, "number positive", required=True)
    side = r.value(v, "side_slope", where, "number non-negative", required=True)
    depth = r.value(v, "depth", where, "number positive")
    flow = r.value(v, "flow_at_survey", where, "number positive")
    slope = r.value(v, "slope", where, "number positive")
    given = [k for k in DEPTH_KEYS if k in v]
    if len(given) != 1:
        r.problem(where, "give either depth (m below the DEM's channel ground) or flow_at_survey (m3/s on the "
                         "day the DEM was flown), not " + ("both" if given else "neither"))
        return None
    if slope is not None and "flow_at_survey" not in v:
        r.problem(f"{where} slope", "is only used with flow_at_survey; remove it or give flow_at_survey")
    if side is not None and side > 20.0:
        r.problem(f"{where} side_slope", f"{side:g} (H:V) is flatter than 20:1; check the units (horizontal "
                                         "metres per vertical metre)")
    if width is None or side is None or (depth is None and flow is None):
        return None
    return ChannelShape(bottom_width=width, side_slope=side, depth=depth, flow_at_survey=flow, slope=slope)
