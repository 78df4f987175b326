"""Where two reaches' maps meet (geoflow.sections.territory.Territory.claim, the area each reach's map
is cut to), and the strip slope that makes the velocity raster carry each section's discharge
(geoflow.mapping.strips).

References: shapely's exact point-polygon distances and containment (an independent computation of
which cells a reach may map); the closed-form strip integral of a trapezoid, (1/n) (b h^(5/3) + 2 m
h^(8/3) / (8/3)), from integrating Manning's equation for a wide strip (Chow 1959, Open-Channel
Hydraulics, ch. 5-6).
"""
from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString, Polygon

from geoflow.mapping.strips import strip_conveyance, strip_slope
from geoflow.records import Section
from geoflow.sections import make_territory


def test_map_areas_leave_the_other_reachs_channel_and_mouth_area_alone():
    """A brook joins a river at a right angle, its sections drawn into the river's channel. The
    brook's map area is its sections' footprint less the river's channel and its bank strip (the
    channel widened by the bank margin); the river's map area is its footprint less the brook's
    footprint, except inside the river's own channel. Checked on random points against distances
    and containment computed by shapely, away from the boundaries (0.5 m)."""
    river = LineString([(0, 0), (1000, 0)])
    brook = LineString([(500, -300), (500, 0)])
    river_ch = river.buffer(10, cap_style="flat")
    brook_ch = LineString([(500, -300), (500, -10)]).buffer(5, cap_style="flat")   # ends at the river's edge
    margin = {"river": 6.0, "brook": 3.0}
    t = make_territory([("river", river), ("brook", brook)], {"river": 200, "brook": 60}, [river_ch, brook_ch],
                       {"brook": "river"}, {"river": 10, "brook": 5}, margin)
    brook_lines = [LineString([(440, y), (560, y)]) for y in (-280, -200, -120, -40, -4)]
    t = t.with_footprint(1, brook_lines)
    river_lines = [LineString([(x, 200), (x, -200)]) for x in range(300, 701, 50)]
    brook_map, river_map = t.claim(1, brook_lines), t.claim(0, river_lines)
    brook_foot = Polygon([(440, -280), (560, -280), (560, -4), (440, -4)])
    river_foot = Polygon([(300, 200), (700, 200), (700, -200), (300, -200)])
    pts = shapely.points(np.random.default_rng(3).uniform([300, -300], [700, 200], (8000, 2)))
    xy = shapely.get_coordinates(pts).T
    in_brook, in_river = shapely.contains_xy(brook_map, *xy), shapely.contains_xy(river_map, *xy)
    d_river_ch = shapely.distance(pts, river_ch)
    in_foot = shapely.contains(brook_foot, pts)
    assert not (in_brook & (d_river_ch == 0)).any()                     # never over the river's channel
    far = d_river_ch > margin["river"] + 1.5                            # beyond the bank strip (+ the zone's 10 %)
    np.testing.assert_array_equal(in_brook[far], in_foot[far])
    bank = (d_river_ch < margin["river"] - 0.5) & (shapely.distance(pts, brook_ch) > 0.5)
    assert bank.sum() > 20 and not in_brook[bank].any()                 # the river's bank, outside the brook's channel
    clear = shapely.distance(pts, shapely.union_all([brook_foot.boundary, river_ch.boundary,
                                                     brook_ch.buffer(margin["brook"] + 1.5).boundary])) > 0.5
    want_river = shapely.contains(river_foot, pts) & ~(in_foot & (d_river_ch > 0))
    near_brook_ch = shapely.distance(pts, brook_ch) < margin["brook"] + 1.5     # the brook's channel and banks
    check = clear & ~near_brook_ch
    np.testing.assert_array_equal(in_river[check], want_river[check])
    assert not (in_river & in_brook).any()                              # no cell in both maps


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
