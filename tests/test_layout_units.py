"""Units of the dog-leg layout: valley axis, side paths, territories, storage, on analytic geometry."""
import numpy as np
import pytest
import shapely
from shapely.geometry import LineString, box
from valleys import sine_generated

from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN, ReachGeometry, Section
from geoflow.sections import cut_sections, make_territory, mark_storage, valley_of
from geoflow.sections.stations import chainages
from geoflow.sections.valley import extremes_with_hysteresis, smooth_line


class SurfaceDem:
    """An analytic ground z(x, y) seen through the DEM interface the sections use."""

    cell_size, bounds, transform = 1.0, (-5000.0, -5000.0, 5000.0, 5000.0), None

    def __init__(self, z=None):
        self.z = z or (lambda x, y: np.zeros(np.shape(x)))

    def sample(self, x, y):
        return self.z(np.asarray(x, float), np.asarray(y, float))


@pytest.mark.parametrize("wavelength, omega", [(600.0, 0.9), (400.0, 0.5)])
def test_valley_axis_of_a_sine_generated_meander(wavelength, omega):
    # The heading extremes of theta = omega sin(2 pi s / M) are M / 2 apart (Langbein & Leopold 1966);
    # the meander's mean direction is +x, so the smoothed axis runs along x.
    s, x, y, _ = sine_generated(3 * wavelength, wavelength, omega, step=1.0)
    v = valley_of(LineString(np.column_stack((x, y))), width=400.0)
    assert v.half_wavelength == pytest.approx(wavelength / 2, rel=0.02)
    c = shapely.get_coordinates(v.axis)
    d = np.diff(c, axis=0)
    assert np.degrees(np.max(np.abs(np.arctan2(d[:, 1], d[:, 0])))) < 1.0
    assert v.belt_half_width == pytest.approx(0.5 * (y.max() - y.min()), rel=0.05)


@pytest.mark.parametrize("wavelength, omega, width", [(400.0, 0.5, 400.0), (1000.0, 0.6, 560.0)])
def test_valley_axis_of_a_reach_one_meander_long(wavelength, omega, width):
    # One wavelength from apex to apex has two heading extremes, M / 2 apart (Langbein & Leopold 1966):
    # that one half-wavelength sets the smoothing, so the axis stays within 5 deg of the mean direction
    # +x (with no half-wavelength measured it swung by 8.1-8.6 deg here and the end legs left the DEM
    # of the LiDAR-like demo).
    s, x, y, _ = sine_generated(wavelength, wavelength, omega, step=1.0)
    v = valley_of(LineString(np.column_stack((x, y))), width=width)
    assert v.half_wavelength == pytest.approx(wavelength / 2, rel=0.02)
    d = np.diff(shapely.get_coordinates(v.axis), axis=0)
    assert np.degrees(np.max(np.abs(np.arctan2(d[:, 1], d[:, 0])))) < 5.0


def test_hysteresis_ignores_wiggles_and_smoothing_keeps_a_line():
    t = np.linspace(0, 4 * np.pi, 2001)
    sig = np.sin(t) + 0.05 * np.sin(40 * t)
    ext = extremes_with_hysteresis(sig, 0.3)
    np.testing.assert_allclose(t[ext], (np.arange(4) + 0.5) * np.pi, atol=0.1)      # sin: extremes pi/2 apart
    line = np.column_stack((np.linspace(0, 100, 101), 3 + 0.5 * np.linspace(0, 100, 101)))
    np.testing.assert_allclose(smooth_line(line, 20.0), line, atol=1e-9)   # a straight line stays put


def test_straight_channel_in_a_straight_valley_keeps_straight_sections():
    geom = cut_sections("s", LineString([(0, 0), (500, 0)]), SurfaceDem(), 50, 200, layout="valley")
    assert all(len(sec.line.coords) == 2 for sec in geom.sections)
    for sec in geom.sections:
        (x0, y0), (x1, y1) = sec.line.coords
        assert x0 == pytest.approx(x1, abs=1e-6) and y0 == pytest.approx(100) and y1 == pytest.approx(-100)
    np.testing.assert_allclose(geom.lengths, 50.0)


def test_dog_legs_on_a_skewed_channel_reach_the_valley_normal():
    # A channel crossing a straight valley obliquely (a zig-zag at +-30 deg about +x, 400 m legs):
    # its smoothed axis runs along x, so away from the channel every section leg runs along y.
    pts = [(0, 0), (400, 231), (800, 0), (1200, 231), (1600, 0)]
    geom = cut_sections("z", LineString(pts), SurfaceDem(), 40, 600, layout="valley")
    legs = []
    for sec in geom.sections[3:-3]:
        c = np.asarray(sec.line.coords)
        legs += [c[1] - c[0], c[-1] - c[-2]]
    ang = np.degrees(np.abs(np.arctan2(np.array(legs)[:, 0], np.array(legs)[:, 1])))
    ang = np.minimum(ang, 180 - ang)
    assert ang.max() < 3.0
    lines = np.array([s.line for s in geom.sections])
    hit = shapely.intersects(lines[:, None], lines[None, :])
    np.fill_diagonal(hit, False)
    assert not hit.any()


def test_last_gap_is_shared_evenly():
    # 0, 50, ..., 450, then 460 would leave a 10 m gap: the last two gaps become 30 m each.
    np.testing.assert_allclose(chainages("r", 460.0, 50.0, even_end=True)[-3:], [400.0, 430.0, 460.0])
    assert chainages("r", 460.0, 50.0)[-2] == 450.0


def test_territory_rule_by_hand():
    # Two parallel centrelines 100 m apart with equal half-widths split the ground halfway (rule 4);
    # with half-widths 150 and 50 the split lies where d1 / 150 = d2 / 50, 75 m from the first.
    a, b = LineString([(0, 0), (1000, 0)]), LineString([(0, 100), (1000, 100)])
    even = make_territory([("a", a), ("b", b)], {"a": 100, "b": 100})
    ys = np.array([10, 49, 51, 90])
    assert even.owner(np.column_stack((np.full(4, 500.0), ys))).tolist() == [0, 0, 1, 1]
    skew = make_territory([("a", a), ("b", b)], {"a": 150, "b": 50})
    assert skew.owner([[500, 74], [500, 76]]).tolist() == [0, 1]
    # a receiving channel beats a tributary's (rule 1), the tributary's footprint beats the river's
    # floodplain (rule 3)
    trib = LineString([(500, -300), (500, 0)])
    chan = [a.buffer(10, cap_style="flat"), trib.buffer(5, cap_style="flat")]
    t = make_territory([("a", a), ("t", trib)], {"a": 200, "t": 60}, chan, {"t": "a"}, {"a": 10, "t": 5})
    assert t.owner([[500, -5], [500, -20]]).tolist() == [0, 1]
    assert t.owner([[560, -60]]).tolist() == [0]
    feet = t.with_footprint(1, [LineString([(440, y), (560, y)]) for y in (-250, -150, -50)])
    assert feet.owner([[555, -60]]).tolist() == [1]


def flat_section(k, station, z, part, line):
    return Section("r", k, 50.0 * k, line, np.asarray(station, float), np.asarray(z, float),
                   n=np.full(len(station) - 1, 0.04), landcover=np.full(len(station) - 1, "g"),
                   part=np.asarray(part, dtype=np.int8))


def test_storage_behind_an_embankment_and_in_a_user_polygon():
    # Three sections across a valley running +x, 50 m apart; between sections 1 and 2 an embankment
    # 1.2 m high crosses the valley at x = 75 except for an opening |y| < 20. Floodplain segments of
    # sections 1 and 2 whose down- (up-) valley path crosses the embankment are storage; those facing
    # the opening are not (ridge test against BLOCK_M = 0.5 m, geometry by hand).
    def ground(x, y):
        bump = np.where((np.abs(x - 75) < 4) & (np.abs(y) > 20), 1.2, 0.0)
        return bump + np.zeros(np.shape(x))

    st = np.linspace(0, 200, 101)
    part = np.where(st[:-1] < 95, LEFT_FLOODPLAIN, np.where(st[:-1] < 105, CHANNEL, RIGHT_FLOODPLAIN))
    secs = tuple(flat_section(k, st, np.zeros(st.size), part, LineString([(50 * k, 100), (50 * k, -100)]))
                 for k in range(3))
    geom = ReachGeometry("r", LineString([(0, 0), (100, 0)]), secs, np.full((2, 3), 50.0))
    out = mark_storage(geom, SurfaceDem(ground), detect=True, step=1.0)
    mid_y = 100 - 0.5 * (st[:-1] + st[1:])
    assert out.sections[0].storage is None
    for sec in out.sections[1:]:
        assert "storage" in sec.flags
        np.testing.assert_array_equal(sec.storage, (np.abs(mid_y) > 20) & (part != CHANNEL))
    user = mark_storage(geom, None, areas=[box(-10, 60, 10, 120)], detect=False)
    np.testing.assert_array_equal(user.sections[0].storage, mid_y > 60)
    assert user.sections[1].storage is None


def test_territory_owner_near_a_reach_equals_measuring_every_reach():
    # Reference: the rule evaluated with every centreline measured (owner without a hint); the
    # pruned evaluation (hint: the reach being cut, only reaches that could beat it measured) must
    # give the same owner for every point, drafting included, on a random network of meandering
    # reaches, tributaries, channels and footprints.
    rng = np.random.default_rng(3)
    reaches, scales, chan, flows, half = [], {}, [], {}, {}
    t = np.linspace(0.0, 1.0, 200)
    for k in range(12):
        x0, y0 = rng.uniform(0, 4000, 2)
        ang = rng.uniform(0, np.pi)
        ln = LineString(np.column_stack((x0 + 2000 * t * np.cos(ang) + 80 * np.sin(20 * t),
                                         y0 + 2000 * t * np.sin(ang) + 80 * np.cos(17 * t))))
        rid = f"r{k}"
        reaches.append((rid, ln))
        scales[rid] = float(rng.choice([40.0, 150.0, 400.0]))
        half[rid] = float(rng.uniform(3, 15))
        chan.append(ln.buffer(half[rid], cap_style="flat"))
        if k % 3 == 2:
            flows[rid] = f"r{k - 1}"
    terr = make_territory(reaches, scales, chan, flows, half)
    terr = terr.with_footprint(2, [LineString([(x - 60, y), (x + 60, y)])
                                   for x, y in shapely.get_coordinates(reaches[2][1])[::40]])
    for who in range(12):
        line = reaches[who][1]
        xy = shapely.get_coordinates(line)[::5] + rng.normal(scale=scales[reaches[who][0]], size=(40, 2))
        xy = np.vstack([xy, rng.uniform(-500, 6500, size=(400, 2))])
        for drafting in (None, who):
            np.testing.assert_array_equal(terr.owner(xy, drafting, hint=who), terr.owner(xy, drafting))


def test_first_crossing_of_flow_paths_equals_shapely_intersection():
    # Reference: shapely.intersection (GEOS) of each flow path with its neighbour section, then
    # shapely.distance from the path's start to the intersection; random paths and random
    # polylines of 2-5 vertices, some through the path's start (distance 0). Paths lying exactly
    # along a target piece are left out: there the answer depends on rounding in both.
    import shapely

    from geoflow.sections.storage import first_crossing
    rng = np.random.default_rng(11)
    k = 4000
    xy = rng.uniform(-50.0, 50.0, (k, 2)) + [4e5, 6.1e6]
    t = rng.normal(size=(k, 2))
    ray = t / np.hypot(t[:, 0], t[:, 1])[:, None] * rng.uniform(10.0, 120.0, (k, 1))
    targets = []
    for i in range(k):
        c = np.cumsum(rng.normal(size=(int(rng.integers(2, 6)), 2)) * 30.0, axis=0) + [4e5, 6.1e6]
        if i % 37 == 0:
            c = np.array([xy[i], xy[i] + [3.0, -4.0]])
        targets.append(shapely.LineString(c))
    targets = np.array(targets, dtype=object)
    ok, dist = first_crossing(xy, ray, targets)
    hits = shapely.intersection(shapely.linestrings(np.stack((xy, xy + ray), axis=1)), targets)
    ref_ok = ~shapely.is_empty(hits)
    ref = np.where(ref_ok, shapely.distance(shapely.points(xy), hits), 0.0)
    assert ref_ok.sum() > 300
    np.testing.assert_array_equal(ok, ref_ok)
    np.testing.assert_allclose(dist, ref, rtol=0, atol=1e-8)      # GEOS rounds its crossing points at ~1e-9 m here
