"""Surveyed ground points merged into a reach's DEM sections (the channel a LiDAR DEM cannot see).

Method (the channel-fitted interpolation of Merwade, Maidment & Goff 2006 and the survey-merging
practice reviewed by Merwade, Cook & Coonrod 2008; details from memory):

1. Each point is given to the reach whose centreline is nearest, if it lies within half that
   reach's section width of it; others are reported by feature number (:func:`assign_points`).
2. Along the reach the points are grouped into surveyed sections by chainage (a new group starts
   where consecutive chainages are more than half the section spacing apart). A group belongs to
   the DEM section nearest to it in chainage. Each point's signed offset from the centreline (its
   distance from its foot point on the centreline, positive to the right looking downstream) is
   laid out from where the centreline crosses that section, giving a station s, and the normalised
   station n* = (s - s_left) / (s_right - s_left) between the section's channel edges (0 at the
   left edge, 1 at the right edge): the channel-fitted frame, which in a bend keeps the points in
   place across the channel (a projection onto a section line some metres away would shift them).
   Points with 0 <= n* <= 1 describe the channel; the others are "dry overlap" points for the datum
   check.
3. Every DEM section between two surveyed sections takes, inside its own channel edges, the ground
   interpolated linearly by chainage between the two surveyed profiles at equal n* (so a thalweg
   that moves across the channel moves with it rather than being smeared). The surveyed range is
   the n* range both profiles cover; outside it, and outside the channel, the DEM stays. The DEM
   sections onto which the first and last surveyed sections were projected take those profiles.
4. Datum: the median and the median absolute deviation of DEM minus survey on the dry overlap
   points are reported; a median beyond DATUM_TOLERANCE suggests another vertical datum. A surveyed
   channel whose lowest point lies above the DEM's lowest channel ground (the flown water surface)
   is reported too (flag ``survey_above_dem``).

Pure numpy/shapely: records in, records out.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import shapely

from ..records import ReachGeometry, Section, SurveyPoints
from .stations import STATION_TOLERANCE, insert_stations

GAP_FRACTION = 0.5          # new surveyed section where the chainage gap exceeds this x section spacing
MIN_CHANNEL_POINTS = 3      # points inside the channel edges a surveyed section needs
DATUM_TOLERANCE = 0.15      # m: |median DEM - survey| above this suggests another datum (common LiDAR accuracy, from memory)
ABOVE_TOLERANCE = 0.05      # m: surveyed bed this far above the DEM's channel ground is reported
MAX_LISTED = 5


@dataclass(frozen=True)
class SurveyedSection:
    """One surveyed cross-section: its chainage (m), the DEM section it was projected onto, and the
    surveyed channel profile as normalised station n* (increasing, 0..1) and elevation z (m)."""

    chainage: float
    section_id: int
    nstar: np.ndarray
    z: np.ndarray
    points: int


def assign_points(points: SurveyPoints, reaches, half_widths: dict) -> tuple[dict, np.ndarray]:
    """({reach id: indices of its points}, indices of points near no reach).

    ``reaches``: [(reach id, centreline)]; ``half_widths``: {reach id: half the section width, m}.
    """
    if len(points) == 0 or not reaches:
        return {}, np.arange(len(points))
    lines = np.array([line for _, line in reaches], dtype=object)
    (pi, li), dist = shapely.STRtree(lines).query_nearest(shapely.points(points.x, points.y), return_distance=True,
                                                          all_matches=False)
    limit = np.array([half_widths[rid] for rid, _ in reaches])[li]
    near = dist <= limit
    out = {}
    for k, (rid, _) in enumerate(reaches):
        idx = pi[near & (li == k)]
        if idx.size:
            out[rid] = np.sort(idx)
    return out, np.setdiff1d(np.arange(len(points)), pi[near])


def describe_points(points: SurveyPoints, idx) -> str:
    """'feature 3 (x, y), feature 9 (x, y) and 4 more' for messages."""
    idx = np.asarray(idx)
    shown = ", ".join(f"feature {int(points.fid[i])} ({points.x[i]:.1f}, {points.y[i]:.1f})" for i in idx[:MAX_LISTED])
    return shown + (f" and {idx.size - MAX_LISTED} more" if idx.size > MAX_LISTED else "")


def surveyed_sections(geom: ReachGeometry, points: SurveyPoints, spacing: float):
    """Group a reach's points into surveyed sections (module notes, step 2).

    Returns (surveyed sections in chainage order, DEM - survey on the dry overlap points (m),
    warnings, {section id: extra flags}).
    """
    rid, secs = geom.reach_id, geom.sections
    chain, offset = centreline_frame(geom.centreline, points.x, points.y)
    section_chain = np.array([s.chainage for s in secs])
    order = np.argsort(chain, kind="stable")
    groups = np.split(order, np.flatnonzero(np.diff(chain[order]) > GAP_FRACTION * spacing) + 1)
    out, dry, warnings, flags = [], [], [], {}
    for g in groups:
        c = float(np.median(chain[g]))
        k = int(np.argmin(np.abs(section_chain - c)))
        sec = secs[k]
        if np.ptp(chain[g]) > spacing:
            warnings.append(f"reach {rid}: survey points {describe_points(points, g)} spread over {np.ptp(chain[g]):.0f} m "
                            "of chainage, not across the channel; they were not used (survey cross-sections, or "
                            "reduce [sections] spacing)")
            continue
        nstar = normalised_station(sec, centre_station(geom.centreline, sec) + offset[g])
        inside = (nstar >= -1e-9) & (nstar <= 1 + 1e-9)
        ok_dem = ~inside & np.isfinite(points.dem_z[g])
        dry.append(points.dem_z[g][ok_dem] - points.z[g][ok_dem])
        if inside.sum() < MIN_CHANNEL_POINTS:
            warnings.append(f"reach {rid}: the survey points near chainage {c:.0f} m ({describe_points(points, g)}) hold "
                            f"{int(inside.sum())} point(s) between the channel edges of section {k}; at least "
                            f"{MIN_CHANNEL_POINTS} are needed, so they were not used for the bed")
            continue
        n_u, z_u = _unique_profile(nstar[inside], points.z[g][inside])
        out.append(SurveyedSection(chainage=c, section_id=k, nstar=n_u, z=z_u, points=int(inside.sum())))
        _check_above(sec, out[-1], rid, warnings, flags)
    return out, np.concatenate(dry) if dry else np.zeros(0), warnings, flags


def centreline_frame(centreline, x, y) -> tuple[np.ndarray, np.ndarray]:
    """(chainage, signed offset) of points: m along the centreline to the foot point, and m from it,
    positive to the right looking downstream."""
    pts = shapely.points(x, y)
    chain = shapely.line_locate_point(centreline, pts)
    foot = shapely.get_coordinates(shapely.line_interpolate_point(centreline, chain))
    ahead = shapely.get_coordinates(shapely.line_interpolate_point(centreline, chain + 0.5))
    behind = shapely.get_coordinates(shapely.line_interpolate_point(centreline, chain - 0.5))
    tangent = ahead - behind
    rel = np.column_stack([x, y]) - foot
    left = tangent[:, 0] * rel[:, 1] - tangent[:, 1] * rel[:, 0] > 0
    return chain, np.where(left, -1.0, 1.0) * np.hypot(rel[:, 0], rel[:, 1])


def centre_station(centreline, section: Section) -> float:
    """Station (m from the left end) where the centreline crosses the section."""
    point = shapely.line_interpolate_point(centreline, section.chainage)
    return float(shapely.line_locate_point(section.line, point) * section.station[-1] / section.line.length)


def normalised_station(section: Section, station) -> np.ndarray:
    """n* = (s - s_left) / (s_right - s_left): 0 at the left channel edge, 1 at the right one."""
    left, right = section.channel_edges
    return (np.asarray(station, dtype=np.float64) - left) / (right - left)


def _unique_profile(nstar: np.ndarray, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Profile sorted by n*, points at the same n* averaged."""
    u, inv = np.unique(np.round(nstar, 9), return_inverse=True)
    return u, np.bincount(inv, weights=z) / np.bincount(inv)


def _check_above(sec: Section, surveyed: SurveyedSection, rid: str, warnings: list, flags: dict) -> None:
    """Report a surveyed bed above the DEM's lowest channel ground (the flown water surface)."""
    left, right = sec.channel_edges
    inside = (sec.station >= left - 1e-9) & (sec.station <= right + 1e-9)
    flown = float(np.min(sec.elevation[inside]))
    low = float(np.min(surveyed.z))
    if low > flown + ABOVE_TOLERANCE:
        warnings.append(f"reach {rid}: the surveyed bed near chainage {surveyed.chainage:.0f} m (lowest {low:.2f} m) lies "
                        f"{low - flown:.2f} m above the DEM's lowest channel ground ({flown:.2f} m) at section "
                        f"{sec.section_id}; check the survey's vertical datum and position")
        flags.setdefault(sec.section_id, []).append("survey_above_dem")


def datum_summary(dem_minus_survey: np.ndarray, source: str, rid: str) -> tuple[dict, list[str]]:
    """Median and MAD of DEM - survey on the dry overlap points, and a warning when the median is large."""
    d = np.asarray(dem_minus_survey, dtype=np.float64)
    if d.size == 0:
        return {"points": 0}, []
    med = float(np.median(d))
    mad = float(np.median(np.abs(d - med)))
    info = {"points": int(d.size), "median_m": round(med, 4), "mad_m": round(mad, 4)}
    if d.size >= 3 and abs(med) > DATUM_TOLERANCE:
        return info, [f"reach {rid}: DEM minus survey on {d.size} dry points outside the channel: median {med:+.2f} m, "
                      f"MAD {mad:.2f} m; {source} may be on another vertical datum than the DEM - convert z_m to the "
                      "DEM's datum"]
    return info, []


def merge_profiles(sections, surveyed: list[SurveyedSection]) -> list[Section]:
    """Sections with their channel ground replaced by the interpolated surveyed profile (module notes, step 3)."""
    if not surveyed:
        return list(sections)
    chs = np.array([s.chainage for s in surveyed])
    out = []
    for sec in sections:
        pair = _bracket(sec, surveyed, chs)
        out.append(sec if pair is None else _apply(sec, *pair))
    return out


def _bracket(sec: Section, surveyed: list[SurveyedSection], chs: np.ndarray):
    """(profile a, profile b, weight of b) for a section, or None outside the surveyed stretch."""
    first, last = surveyed[0], surveyed[-1]
    if sec.chainage < chs[0] - 1e-9:
        return (first, first, 0.0) if sec.section_id == first.section_id else None
    if sec.chainage > chs[-1] + 1e-9:
        return (last, last, 0.0) if sec.section_id == last.section_id else None
    k = min(int(np.searchsorted(chs, sec.chainage, side="right")) - 1, len(surveyed) - 1)
    a, b = surveyed[k], surveyed[min(k + 1, len(surveyed) - 1)]
    t = 0.0 if b.chainage <= a.chainage else (sec.chainage - a.chainage) / (b.chainage - a.chainage)
    return a, b, float(np.clip(t, 0.0, 1.0))


def _apply(sec: Section, a: SurveyedSection, b: SurveyedSection, t: float) -> Section:
    lo, hi = max(a.nstar[0], b.nstar[0]), min(a.nstar[-1], b.nstar[-1])
    if hi <= lo:
        return sec
    left, right = sec.channel_edges
    ns = np.union1d(a.nstar, b.nstar)
    ns = ns[(ns >= lo) & (ns <= hi)]
    sec = insert_stations(sec, left + ns * (right - left))
    nst = normalised_station(sec, sec.station)
    eps = 2.0 * STATION_TOLERANCE / (right - left)       # a corner may have snapped to a station this near
    sel = (nst >= lo - eps) & (nst <= hi + eps)
    z = (1.0 - t) * np.interp(nst, a.nstar, a.z) + t * np.interp(nst, b.nstar, b.z)
    dem = sec.dem_ground.copy()
    return dataclasses.replace(sec, elevation=np.where(sel, z, sec.elevation), dem_elevation=dem, bed_source="survey")
