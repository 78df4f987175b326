"""Where a joining reach stops mapping (geoflow.mapping.receiving_side), and the strip slope that makes
the velocity raster carry each section's discharge (geoflow.mapping.strips).

References: shapely's exact point-line distance (an independent computation of "nearer which
line"); the closed-form strip integral of a trapezoid, (1/n) (b h^(5/3) + 2 m h^(8/3) / (8/3)),
from integrating Manning's equation for a wide strip (Chow 1959, Open-Channel Hydraulics, ch. 5-6).
"""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString

from geoflow.mapping import receiving_side
from geoflow.mapping.strips import strip_conveyance, strip_slope
from geoflow.records import Section


def test_receiving_side_is_where_the_receiving_centreline_is_nearer():
    river = LineString([(0, 100), (150, 120), (300, 100)])
    brook = LineString([(160, -50), (150, 40), (150, 119.0)])          # ends on the river
    step = 1.0
    region = receiving_side(brook, river, (0, -60, 300, 200), step)
    rng = np.random.default_rng(7)
    pts = shapely.points(rng.uniform([0, -60], [300, 200], (4000, 2)))
    d_river, d_brook = shapely.distance(pts, river), shapely.distance(pts, brook)
    inside = shapely.contains_xy(region, *shapely.get_coordinates(pts).T)
    clear = np.abs(d_river - d_brook) > step                              # off the bisector by > step
    assert clear.sum() > 3500
    np.testing.assert_array_equal(inside[clear], (d_river < d_brook)[clear])


def test_receiving_side_is_empty_far_from_the_receiving_reach():
    far = LineString([(0, 5000), (100, 5000)])
    assert receiving_side(LineString([(0, 0), (0, 100)]), far, (-50, -10, 50, 110), 2.0).is_empty


def trapezoid(b=20.0, m=2.0, top=3.0):
    st = np.array([0.0, m * top, m * top + b, 2 * m * top + b])
    z = np.array([top, 0.0, 0.0, top])
    return st, z


def test_strip_conveyance_matches_the_closed_form_of_a_trapezoid():
    b, m, h, n = 20.0, 2.0, 1.3, 0.035
    st, z = trapezoid(b, m)
    closed = (b * h ** (5 / 3) + 2 * m * h ** (8 / 3) / (8 / 3)) / n       # Chow (1959) ch. 5-6, integrated
    assert abs(strip_conveyance(st, z, np.full(3, n), h) / closed - 1) < 1e-12
    assert strip_conveyance(st, z, np.full(3, n), -0.5) == 0.0             # dry


def test_strips_carry_the_section_discharge():
    """With S_s the strip integral of v d = (1/n) d^(5/3) S_s^(1/2) equals Q (scipy-free: a fine
    midpoint sum over the wet width, within 0.1 %)."""
    st, z = trapezoid()
    n = np.array([0.05, 0.035, 0.05])
    sec = Section(reach_id="t", section_id=0, chainage=0.0, line=LineString([(0, 0), (1, 0)]), station=st,
                  elevation=z, n=n)
    q, h = 42.0, 1.7
    (slope,) = strip_slope([sec], np.array([h]), np.array([q]))
    x = np.linspace(st[0], st[-1], 200_001)
    mid = 0.5 * (x[1:] + x[:-1])
    d = np.clip(h - np.interp(mid, st, z), 0, None)
    n_mid = n[np.clip(np.searchsorted(st, mid) - 1, 0, 2)]
    q_strips = np.sum(d ** (5 / 3) * np.sqrt(slope) / n_mid) * (x[1] - x[0])
    assert abs(q_strips / q - 1) < 1e-3
