"""The facts of a run a reviewer needs beside the results: what was computed, from what, how.

Built from the validated config (:class:`geoflow.config.Config`), the DEM's metadata
(:class:`geoflow.terrain.Dem`) and the profile table; plain values only, nothing is read here.
"""
from __future__ import annotations

import datetime as _dt

import numpy as np
import pandas as pd
import shapely
from shapely.geometry import Point

from .. import __version__
from ..flags import needs_review


def run_facts(cfg, dem) -> list[tuple[str, str]]:
    """(item, value) pairs that hold for every reach of the run."""
    crs = dem.crs
    epsg = crs.to_epsg() if crs is not None else None
    name = crs.to_wkt().split('"')[1] if crs is not None and '"' in crs.to_wkt() else str(crs)
    h = cfg.hydraulics
    return [
        ("run name", cfg.run.name),
        ("program", f"geoflow {__version__}"),
        ("config file", str(cfg.path.name)),
        ("config SHA-256", cfg.sha256),
        ("written (UTC)", _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M")),
        ("DEM", str(cfg.terrain.dem.name)),
        ("CRS", f"EPSG:{epsg} ({name})" if epsg else name),
        ("DEM cell size (m)", f"{dem.cell_size:g}"),
        ("DEM size (cells)", f"{dem.width} x {dem.height}"),
        ("DEM vertical unit", f"{cfg.terrain.vertical_unit} (converted to m at read)" if cfg.terrain.vertical_unit != "m"
         else "m"),
        ("output cell size (m)", f"{cfg.mapping.cell_size or dem.cell_size:g}"),
        ("flow regime", cfg.boundary.regime),
        ("friction slope between sections", h.friction_slope.replace("_", " ")),
        ("contraction / expansion coefficients", f"{h.contraction:g} / {h.expansion:g}"),
        ("gravity (m/s²)", f"{h.gravity:g}"),
        ("land cover", f"{cfg.roughness.landcover.name}, class field {cfg.roughness.class_field!r}, "
                       f"channel class {cfg.roughness.channel_class!r}"),
        ("n where land cover has a gap", "none (an error)" if cfg.roughness.default_n is None
         else f"{cfg.roughness.default_n:g}"),
    ]


def section_facts(cfg, reach_id: str, n_sections: int) -> list[tuple[str, str]]:
    sc = cfg.sections.for_reach(reach_id)
    items = [("cross-sections", str(n_sections)), ("section spacing (m)", f"{sc.spacing:g}"),
             ("section width (m)", f"{sc.width:g}"),
             ("ground sample step (m)", "DEM cell size" if sc.sample_step is None else f"{sc.sample_step:g}")]
    if sc.rise is not None:
        items.append(("adaptive width: rise (m)", f"{sc.rise:g}"))
    if cfg.sections.lines is not None:
        items.append(("user section lines", cfg.sections.lines.name))
    return items


def roughness_table(cfg) -> pd.DataFrame:
    """One row per land-cover class: n with its low / high range and any law."""
    rows = []
    for name, c in cfg.roughness.classes.items():
        law = ""
        if c.n_by_depth:
            law = "by depth: " + ", ".join(f"{d:g} m → {n:g}" for d, n in c.n_by_depth)
        elif c.n_by_discharge:
            law = "by discharge: " + ", ".join(f"{q:g} m³/s → {n:g}" for q, n in c.n_by_discharge)
        rows.append({"land-cover class": name + (" (the channel class)" if name == cfg.roughness.channel_class else ""),
                     "n (s/m^1/3)": f"{c.n:.3f}", "n_low": "" if c.n_low is None else f"{c.n_low:.3f}",
                     "n_high": "" if c.n_high is None else f"{c.n_high:.3f}", "law": law})
    return pd.DataFrame(rows, columns=["land-cover class", "n (s/m^1/3)", "n_low", "n_high", "law"])


def boundary_text(spec) -> str:
    """A boundary spec in words."""
    if spec is None:
        return "none"
    if spec.type == "normal_depth":
        return f"normal depth, slope {spec.slope:g}"
    if spec.type == "stage":
        return f"water level {spec.wse:.3f} m"
    if spec.type == "critical":
        return "critical depth"
    if spec.type == "rating":
        return f"rating curve, {len(spec.discharge)} points, {min(spec.discharge):g}-{max(spec.discharge):g} m³/s"
    return f"level of reach {spec.reach} where this reach joins it"


def events_table(cfg, reach_id: str, profile: pd.DataFrame, events) -> pd.DataFrame:
    """Per event: discharge, flow changes, boundaries and the level they gave at the end sections."""
    down, up = cfg.boundary.for_reach(reach_id)
    rows = []
    by_name = {e.name: e for e in cfg.events}
    for ev in events:
        e = by_name[ev]
        rows_ev = profile[profile["event"] == ev].sort_values("chainage_m")
        wse = rows_ev["wse_m"].to_numpy(dtype=float)
        changes = "; ".join(f"{c.discharge:g} m³/s from {c.chainage:g} m" for c in e.changes_for(reach_id))
        row = {"event": ev, "discharge at upstream end (m³/s)": f"{e.upstream_discharge(reach_id):g}",
               "flow changes": changes or "none", "downstream boundary": boundary_text(down),
               "level at downstream end (m)": f"{wse[-1]:.3f}" if wse.size else ""}
        if up is not None:
            row["upstream boundary"] = boundary_text(up)
            row["level at upstream end (m)"] = f"{wse[0]:.3f}" if wse.size else ""
        rows.append(row)
    return pd.DataFrame(rows)


def markers(cfg, reach_id: str, centrelines: dict) -> list[tuple[float, str]]:
    """(chainage m, label) of the confluences and flow changes on this reach, by chainage.

    Confluences come from junction boundaries: where this reach ends in another, and where a
    reach whose junction is this one ends on its centreline (its last vertex projected).
    """
    line = centrelines.get(reach_id)
    out = []
    down, _ = cfg.boundary.for_reach(reach_id)
    if down.type == "junction" and line is not None:
        out.append((float(line.length), f"joins {down.reach}"))
    for rid, other in centrelines.items():
        if rid == reach_id or line is None:
            continue
        d, _ = cfg.boundary.for_reach(rid)
        if d.type == "junction" and d.reach == reach_id:
            end = Point(shapely.get_coordinates(other)[-1])
            out.append((float(line.project(end)), f"{rid} joins"))
    seen = set()
    for ev in cfg.events:
        for c in ev.changes_for(reach_id):
            key = round(c.chainage, 3)
            if key not in seen:
                seen.add(key)
                out.append((float(c.chainage), "flow change"))
    merged: dict[float, list[str]] = {}
    for ch, label in sorted(out, key=lambda t: t[0]):   # one line and label per place (within 1 m)
        near = next((k for k in merged if abs(k - ch) <= 1.0), None)
        merged.setdefault(ch if near is None else near, []).append(label)
    return [(ch, "; ".join(labels)) for ch, labels in merged.items()]


def flagged_sections(profile: pd.DataFrame, geom) -> dict[int, dict[str, list[str]]]:
    """{section id: {flag word: [events]}} for every section that carries a flag (geometry flags
    count for every event)."""
    out: dict[int, dict[str, list[str]]] = {}
    for s in geom.sections:
        for word in s.flags:
            out.setdefault(int(s.section_id), {}).setdefault(word, [])
    for sid, ev, flags in zip(profile["section_id"], profile["event"], profile["flags"]):
        for word in [w for w in str(flags or "").split(";") if w]:
            lst = out.setdefault(int(sid), {}).setdefault(word, [])
            if ev not in lst:
                lst.append(ev)
    return dict(sorted(out.items()))


def split_flagged(flagged: dict) -> tuple[dict, dict]:
    """(to review, with notes): sections with at least one flag a reviewer must judge (hydraulic or
    input kind, :func:`geoflow.flags.needs_review`), and sections whose flags only describe how the
    section was built or what it is (tool and info kinds)."""
    review = {sid: words for sid, words in flagged.items() if any(needs_review(w) for w in words)}
    return review, {sid: words for sid, words in flagged.items() if sid not in review}


def chainage_range(profile: pd.DataFrame) -> str:
    ch = profile["chainage_m"].to_numpy(dtype=float)
    return f"{np.nanmin(ch):.1f} to {np.nanmax(ch):.1f}" if ch.size else ""
