"""A channel shape cut below the DEM's channel ground: the part of the channel a LiDAR DEM cannot see.

A LiDAR DEM shows the water surface of the day it was flown, not the bed below it. Where the
engineer knows the channel's shape (bottom width b, side slope z H:V), geoflow cuts it into each
section below the flown water surface, taken as the lowest DEM ground of the channel part, so the
section's conveyance at low and moderate flows is no longer missing.

- The trapezoid is centred on the flown water strip (the run of channel-part ground within
  ``FLAT_TOLERANCE`` of its lowest point), its bottom ``depth`` m below the water surface and its
  sides rising at z to meet it; ground is only ever lowered (min of DEM and cut), only below the
  flown water surface and only between the channel edges. A trapezoid wider than the channel part is cut off at the edges (flag
  ``channel_shape_clipped``). z = 0 gives a rectangle (walls 1 mm wide).
- Depth from the flow on the flight day: with Q_L known, depth h solves Manning's equation
  Q_L = (1/n) A(h) R(h)^(2/3) S^(1/2) for the cut trapezoid full to the flown water level, at the
  water-surface slope S (Chow 1959, ch. 6; the burn-depth recipe of Corum, Ball & Hubbard 2015,
  who found synthetic beds burned this way within 1 ft of surveyed-bathymetry models at low flow).
  Solved with scipy's brentq.
- Shapes from bankfull geometry (top width W, mean depth D = A/W): the trapezoid of side slope z
  holding A = W D has depth h = [W - sqrt(W^2 - 4 z W D)] / (2 z) and bottom width b = W - 2 z h
  (the area of a trapezoid, solved for h).

Pure numpy/scipy: sections in, sections out.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..errors import GeometryError
from ..records import Section
from .stations import insert_stations

FLAT_TOLERANCE = 0.05     # m: channel ground this close to its lowest point counts as the flown water strip
WALL = 1e-3               # m: horizontal run of a vertical side (stations must increase strictly)
MAX_DEPTH = 30.0          # m: deepest channel the flow-at-survey solve looks for


def trapezoid_area(bottom_width, side_slope, depth):
    """Flow area (m2) of a trapezoid, A = (b + z h) h."""
    return (bottom_width + side_slope * depth) * depth


def trapezoid_perimeter(bottom_width, side_slope, depth):
    """Wetted perimeter (m) of a trapezoid, P = b + 2 h sqrt(1 + z^2)."""
    return bottom_width + 2.0 * depth * np.sqrt(1.0 + side_slope ** 2)


def manning_discharge(area, perimeter, n, slope):
    """Manning's equation (SI), Q = (1/n) A R^(2/3) S^(1/2) with R = A/P (Chow 1959, ch. 6)."""
    return area * (area / perimeter) ** (2.0 / 3.0) * math.sqrt(slope) / n


def depth_for_flow(discharge: float, bottom_width: float, side_slope: float, n: float, slope: float,
                   max_depth: float = MAX_DEPTH) -> float | None:
    """Depth h (m) at which the trapezoid (b, z) carries ``discharge`` in uniform flow (brentq).

    None when even ``max_depth`` m does not carry it (Q grows with h, so the root is unique).
    """
    def excess(h):
        return manning_discharge(trapezoid_area(bottom_width, side_slope, h),
                                 trapezoid_perimeter(bottom_width, side_slope, h), n, slope) - discharge
    if excess(max_depth) < 0:
        return None
    from scipy.optimize import brentq  # here: scipy.optimize costs 0.35 s to import, most runs never burn
    return float(brentq(excess, 1e-9, max_depth, xtol=1e-10, rtol=1e-12))


def trapezoid_from_bankfull(top_width: float, mean_depth: float, side_slope: float) -> tuple[float, float]:
    """(depth h, bottom width b) of the trapezoid of side slope z holding A = W D under top width W.

    h = [W - sqrt(W^2 - 4 z W D)] / (2 z), b = W - 2 z h; z = 0 is the rectangle h = D. Raises
    GeometryError when no trapezoid of that side slope holds the area (4 z D > W).
    """
    w, d, z = float(top_width), float(mean_depth), float(side_slope)
    if z == 0:
        return d, w
    disc = w * w - 4.0 * z * w * d
    if disc < 0:
        raise GeometryError(f"no trapezoid of side slope {z:g} holds a mean depth of {d:g} m under a top width of "
                            f"{w:g} m; use a steeper side slope")
    h = (w - math.sqrt(disc)) / (2.0 * z)
    return h, w - 2.0 * z * h


@dataclasses.dataclass(frozen=True)
class FlownWater:
    """The flown water surface of one section: level (m), centre station and width (m) of its strip."""

    level: float
    centre: float
    width: float


def flown_water(section: Section) -> FlownWater:
    """Lowest DEM ground of the channel part and the strip of ground within FLAT_TOLERANCE of it."""
    st, z = section.station, section.dem_ground
    left, right = section.channel_edges
    inside = np.flatnonzero((st >= left - 1e-9) & (st <= right + 1e-9))
    level = float(np.min(z[inside]))
    low = z[inside] <= level + FLAT_TOLERANCE
    i0 = int(np.argmin(z[inside]))
    first, last = i0 - _run(low[i0::-1]) + 1, i0 + _run(low[i0:]) - 1
    a, b = float(st[inside][first]), float(st[inside][last])
    return FlownWater(level=level, centre=0.5 * (a + b), width=b - a)


def _run(mask: np.ndarray) -> int:
    """Length of the leading run of True values."""
    return int(mask.size if mask.all() else np.argmin(mask))


def cut_trapezoid(section: Section, bottom_width: float, side_slope: float, depth: float) -> Section:
    """The section with the trapezoid cut ``depth`` m below its flown water surface (see module notes).

    Stations are added at the trapezoid's corners; ``dem_elevation`` keeps the DEM ground and
    ``bed_source`` becomes ``"shape"``.
    """
    water = flown_water(section)
    half = 0.5 * bottom_width
    z_eff = max(side_slope, WALL / depth)
    top_half = half + z_eff * depth
    left, right = section.channel_edges
    corners = water.centre + np.array([-top_half, -half, half, top_half])
    sec = insert_stations(section, corners[(corners > left) & (corners < right)])
    st, dem = sec.station, sec.dem_ground
    cut = water.level - depth + np.maximum(np.abs(st - water.centre) - half, 0.0) / z_eff
    below = (st >= left - 1e-9) & (st <= right + 1e-9) & (cut <= water.level + 1e-9)   # only below the water
    ground = np.where(below, np.minimum(dem, cut), dem)
    flags = sec.flags
    if water.centre - top_half < left - 1e-6 or water.centre + top_half > right + 1e-6:
        flags = tuple(dict.fromkeys(flags + ("channel_shape_clipped",)))
    return dataclasses.replace(sec, elevation=ground, dem_elevation=dem.copy(), bed_source="shape", flags=flags)
