"""The strip slope that makes the velocity raster carry each section's discharge (geoflow.mapping.strips).

Reference: the closed-form strip integral of a trapezoid, (1/n) (b h^(5/3) + 2 m h^(8/3) / (8/3)),
from integrating Manning's equation for a wide strip (Chow 1959, Open-Channel Hydraulics, ch. 5-6).
"""
from __future__ import annotations

import numpy as np
from shapely.geometry import LineString

from geoflow.mapping.strips import strip_conveyance, strip_slope
from geoflow.records import Section


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
