"""Bridge geometry: the parameters of a bridge, pier shapes and the opening tables built from
the face sections.

At each face (upstream, downstream) three section tables are built from the caller's face
section (a ``SectionTable`` of the ground just outside the bridge):
- ``full``: the face section itself (the flow just outside the bridge);
- ``open``: the face ground clipped to the abutments (``opening_left`` .. ``opening_right``),
  which become vertical walls: the opening without piers;
- ``net``: ``open`` with each pier as a vertical block from the ground to above the deck, so
  the pier area is removed from A and its wetted faces added to P (standard bridge practice).
Pier area below a level w is A_open(w) - A_net(w).

Pier coefficients (shape names are plain words of this project):
- Yarnell K (Yarnell 1934, Bridge Piers as Channel Obstructions, USDA Tech. Bull. 442):
  semicircular nose and tail 0.90; twin cylinders with connecting diaphragm 0.95; twin
  cylinders without diaphragm 1.05 (from memory); 90-degree triangular nose and tail 1.05;
  square nose and tail 1.25; ten-pile trestle bent 2.50.
- Drag coefficient C_D for the momentum method (from memory): circular 1.20;
  semicircular-ended 1.33; elliptical 2:1 0.60, 4:1 0.32, 8:1 0.29; square 2.00;
  triangular nose 30 degrees 1.00, 60 1.39, 90 1.60, 120 1.72.
A shape without a value leaves that method out unless the user gives the coefficient.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import SectionTable, build_table, properties
from geoflow.hydraulics.structures.common import choice, finite, positive

PIER_SHAPES = {  # name: (Yarnell K, drag coefficient C_D)
    "semicircular": (0.90, 1.33),
    "twin_cylinder_with_diaphragm": (0.95, None),
    "twin_cylinder": (1.05, None),
    "triangular_90": (1.05, 1.60),
    "square": (1.25, 2.00),
    "pile_trestle": (2.50, None),
    "circular": (None, 1.20),
    "elliptical_2_1": (None, 0.60),
    "elliptical_4_1": (None, 0.32),
    "elliptical_8_1": (None, 0.29),
    "triangular_30": (None, 1.00),
    "triangular_60": (None, 1.39),
    "triangular_120": (None, 1.72),
}
LOW_FLOW_METHODS = ("highest", "energy", "momentum", "yarnell")


@dataclass(frozen=True)
class Piers:
    """``count`` piers of ``width`` (m, normal to the flow) and ``shape`` (``PIER_SHAPES``);
    ``stations`` (m, in the face sections' frame) or None for equal spacing across the
    opening; ``yarnell_k`` / ``drag_coefficient`` override the shape's values."""

    count: int = 0
    width: float = 0.0
    shape: str = "square"
    stations: tuple | None = None
    yarnell_k: float | None = None
    drag_coefficient: float | None = None

    def coefficients(self) -> tuple:
        """(Yarnell K, C_D), each None where unknown."""
        k, cd = PIER_SHAPES[self.shape]
        return (k if self.yarnell_k is None else self.yarnell_k,
                cd if self.drag_coefficient is None else self.drag_coefficient)


@dataclass(frozen=True)
class Bridge:
    """A bridge between two face sections. ``low_chord`` / ``high_chord``: deck soffit and
    top (road) elevation, m; ``length``: distance between the faces, m; ``opening_left`` /
    ``opening_right``: abutment stations (m; None = the section ends). ``low_flow_method``:
    "highest" (default: the highest headwater of the methods computed), "energy",
    "momentum" or "yarnell". ``contraction`` / ``expansion``: energy-method loss
    coefficients (0.3 / 0.5, typical bridge values, USACE 1993 EM 1110-2-1416, from memory).
    ``sluice_coefficient`` (0.5) and ``orifice_coefficient`` (0.8): pressure flow (Bradley
    1978, HDS-1, from memory); ``deck_coefficient``: SI weir C over the deck and road (1.44 =
    2.6 in US units x 0.552, the low end of Bradley's 2.6-3.0)."""

    low_chord: float
    high_chord: float
    length: float
    piers: Piers = Piers()
    opening_left: float | None = None
    opening_right: float | None = None
    low_flow_method: str = "highest"
    contraction: float = 0.3
    expansion: float = 0.5
    sluice_coefficient: float = 0.5
    orifice_coefficient: float = 0.8
    deck_coefficient: float = 1.44
    submergence_exponent: float = 1.5
    name: str = "bridge"

    def __post_init__(self):
        what = f"bridge {self.name!r}"
        low = finite(what, "low_chord", self.low_chord)
        high = finite(what, "high_chord", self.high_chord)
        if high < low:
            raise HydraulicsError(f"{what}: high_chord ({high}) is below low_chord ({low}); "
                                  "high_chord is the top of the deck")
        positive(what, "length", self.length, allow_zero=True)
        choice(what, "low_flow_method", self.low_flow_method, LOW_FLOW_METHODS)
        for key in ("sluice_coefficient", "orifice_coefficient", "deck_coefficient",
                    "submergence_exponent"):
            positive(what, key, getattr(self, key))
        for key in ("contraction", "expansion"):
            if not 0 <= float(getattr(self, key)) <= 2:
                raise HydraulicsError(f"{what}: {key} must be in [0, 2] "
                                      f"(got {getattr(self, key)!r})")
        p = self.piers
        if not (isinstance(p.count, (int, np.integer)) and p.count >= 0):
            raise HydraulicsError(f"{what}: piers count must be a whole number >= 0 "
                                  f"(got {p.count!r})")
        if p.count:
            positive(what, "piers width", p.width)
            choice(what, "pier shape", p.shape, PIER_SHAPES)
            for key in ("yarnell_k", "drag_coefficient"):
                if getattr(p, key) is not None:
                    positive(what, f"piers {key}", getattr(p, key))


@dataclass(frozen=True, eq=False)
class Face:
    """The three tables of one face (module docstring) and the pier intervals (k, 2)."""

    full: SectionTable
    open: SectionTable
    net: SectionTable
    piers: np.ndarray

    def pier_area(self, wse):
        """Pier area below ``wse`` (m2)."""
        return properties(self.open, wse).area - properties(self.net, wse).area


def build_faces(bridge: Bridge, upstream: SectionTable, downstream: SectionTable):
    """(upstream Face, downstream Face) of ``bridge``; checks the opening and the piers."""
    return _face(bridge, upstream, "upstream"), _face(bridge, downstream, "downstream")


def _face(bridge: Bridge, table: SectionTable, which: str) -> Face:
    what = f"bridge {bridge.name!r} ({which} face)"
    x, z = table.station, table.elevation
    left = x[0] if bridge.opening_left is None else float(bridge.opening_left)
    right = x[-1] if bridge.opening_right is None else float(bridge.opening_right)
    if not (x[0] <= left < right <= x[-1]):
        raise HydraulicsError(f"{what}: opening_left/opening_right ({left}, {right}) must lie "
                              f"inside the face section ({x[0]}, {x[-1]}) with left < right")
    cx, cz, cn, cp = _clip(table, left, right)
    if not np.min(cz) < bridge.low_chord:
        raise HydraulicsError(f"{what}: low_chord ({bridge.low_chord}) is not above the ground "
                              "of the opening; check the chords and the face section")
    piers = _pier_intervals(bridge, left, right, what)
    top = max(bridge.high_chord, float(np.max(z))) + 1.0
    open_t = build_table(cx, cz, cn, cp, name=f"{table.name} opening")
    nx, nz, nn, npart = cx, cz, cn, cp
    for a, b in piers:
        nx, nz, nn, npart = _add_block(nx, nz, nn, npart, a, b, top)
    net_t = build_table(nx, nz, nn, npart, name=f"{table.name} net opening")
    return Face(table, open_t, net_t, piers)


def _pier_intervals(bridge: Bridge, left: float, right: float, what: str) -> np.ndarray:
    p = bridge.piers
    if p.count == 0:
        return np.zeros((0, 2))
    if p.stations is None:
        st = left + (right - left) * np.arange(1, p.count + 1) / (p.count + 1)
    else:
        st = np.sort(np.asarray(p.stations, dtype=float).ravel())
        if st.size != p.count:
            raise HydraulicsError(f"{what}: piers stations need {p.count} values (got {st.size})")
    iv = np.column_stack([st - p.width / 2, st + p.width / 2])
    if p.count * p.width >= right - left:
        raise HydraulicsError(f"{what}: the piers ({p.count} x {p.width} m) are as wide as the "
                              f"opening ({right - left:.2f} m); check piers count and width")
    if iv[0, 0] <= left or iv[-1, 1] >= right or np.any(iv[1:, 0] <= iv[:-1, 1]):
        raise HydraulicsError(f"{what}: piers must lie inside the opening without overlapping; "
                              "check piers stations and width")
    return iv


def _segment_attr(x, n, part, at):
    j = np.clip(np.searchsorted(x, at, side="right") - 1, 0, n.size - 1)
    return n[j], part[j]


def _ground_after(x, z, at: float) -> float:
    """Ground elevation at ``at`` seen from the right (the last point there, if any)."""
    j = int(np.clip(np.searchsorted(x, at, side="right") - 1, 0, x.size - 1))
    if x[j] == at or j == x.size - 1:
        return float(z[j])
    return float(z[j] + (z[j + 1] - z[j]) * (at - x[j]) / (x[j + 1] - x[j]))


def _ground_before(x, z, at: float) -> float:
    """Ground elevation at ``at`` seen from the left (the first point there, if any)."""
    j = int(np.clip(np.searchsorted(x, at, side="left"), 0, x.size - 1))
    if x[j] == at or j == 0:
        return float(z[j])
    return float(z[j - 1] + (z[j] - z[j - 1]) * (at - x[j - 1]) / (x[j] - x[j - 1]))


def _clip(table: SectionTable, left: float, right: float):
    """Ground points between ``left`` and ``right`` (ends on the ground inside) with n/part."""
    x, z = table.station, table.elevation
    inner = (x > left) & (x < right)
    nx = np.concatenate([[left], x[inner], [right]])
    nz = np.concatenate([[_ground_after(x, z, left)], z[inner], [_ground_before(x, z, right)]])
    mid = 0.5 * (nx[1:] + nx[:-1])
    nn, npart = _segment_attr(x, table.n, table.part, mid)
    return nx, nz, nn, npart


def _add_block(x, z, n, part, a, b, top):
    """Profile with a vertical block over [a, b] reaching ``top`` (ground points inside it go)."""
    za, zb = _ground_before(x, z, a), _ground_after(x, z, b)
    keep_l, keep_r = x < a, x > b
    nx = np.concatenate([x[keep_l], [a, a, b, b], x[keep_r]])
    nz = np.concatenate([z[keep_l], [za, top, top, zb], z[keep_r]])
    at = 0.5 * (nx[1:] + nx[:-1])
    nn, npart = _segment_attr(x, n, part, at)
    return nx, nz, nn, npart
