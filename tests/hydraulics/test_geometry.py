"""Section geometry, conveyance and alpha against closed forms and shapely as a reference."""
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from geoflow.errors import GeometryError
from geoflow.hydraulics.geometry import build_table, properties, specific_force


def trapezoid(b, z, h, n=0.03, parts=(1, 1, 1)):
    x = [0.0, z * h, z * h + b, 2 * z * h + b]
    return build_table(x, [h, 0.0, 0.0, h], [n] * 3, list(parts))


def test_trapezoid_properties_closed_form():
    # A = (b + z y) y, P = b + 2 y sqrt(1 + z^2), T = b + 2 z y (Chow 1959, Table 2-1, from memory)
    b, z = 6.0, 1.5
    t = trapezoid(b, z, h=5.0)
    y = np.array([0.3, 1.0, 2.7, 4.99])
    p = properties(t, y)
    np.testing.assert_allclose(p.area, (b + z * y) * y, rtol=1e-12)
    np.testing.assert_allclose(p.wetted_perimeter, b + 2 * y * np.sqrt(1 + z * z), rtol=1e-12)
    np.testing.assert_allclose(p.top_width, b + 2 * z * y, rtol=1e-12)
    r = (b + z * y) * y / (b + 2 * y * np.sqrt(1 + z * z))
    np.testing.assert_allclose(p.conveyance, (b + z * y) * y * r ** (2 / 3) / 0.03, rtol=1e-12)
    np.testing.assert_allclose(p.alpha, 1.0)
    # centroid depth of a trapezoid: ybar = y (3b + 2zy) / (6 (b + zy)) (Chow 1959, ch. 3, from memory)
    np.testing.assert_allclose(p.first_moment, y * y * (3 * b + 2 * z * y) / 6, rtol=1e-12)


def test_compound_alpha_beta_with_walls():
    # Chow (1959, ch. 2) formulas, example computed with them: alpha = 2.5922, beta = 1.4163 with 1 m outer walls in P.
    # Vertical channel banks are segments with equal stations; walls are added above the ends.
    x = [0, 50, 50, 60, 60, 110]
    z = [2, 2, 0, 0, 2, 2]
    t = build_table(x, z, [0.06, 0.03, 0.03, 0.03, 0.06], [0, 1, 1, 1, 2])
    p = properties(t, 3.0)
    np.testing.assert_allclose(p.sub_area[0], [50, 30, 50])
    np.testing.assert_allclose(p.sub_perimeter[0], [51, 14, 51])
    np.testing.assert_allclose(p.sub_conveyance[0], [822.404, 1662.119, 822.404], atol=1e-3)
    assert p.alpha[0] == pytest.approx(2.5922, abs=1e-4)
    assert p.beta[0] == pytest.approx(1.4163, abs=1e-4)
    assert p.not_contained[0] and not properties(t, 1.9).not_contained[0]


def test_floodplain_split_at_n_change_and_horton_channel_n():
    # Horton/Einstein composite n (Chow 1959, ch. 6, from memory)
    x = [0, 10, 20, 20, 25, 30, 30, 40, 50]
    z = [3, 3, 3, 0, 0, 0, 3, 3, 3]
    n = [0.05, 0.08, 0.03, 0.02, 0.04, 0.03, 0.06, 0.06]
    part = [0, 0, 1, 1, 1, 1, 2, 2]
    t = build_table(x, z, n, part)
    assert t.subdivision_part.tolist() == [0, 0, 1, 2]
    p = properties(t, 2.0)
    per = np.array([2.0, 5.0, 5.0, 2.0])
    nn = np.array([0.03, 0.02, 0.04, 0.03])
    n_c = (np.sum(per * nn ** 1.5) / per.sum()) ** (2 / 3)
    assert p.sub_n[0, 2] == pytest.approx(n_c, rel=1e-12)
    assert p.sub_area[0].sum() == pytest.approx(20.0)


def test_depth_dependent_n_interpolates_local_depth():
    # n(depth) law: linear between (0.5 m, 0.05) and (2 m, 0.03), clamped (definition of the feature)
    x = [0, 0, 10, 10]
    t = build_table(x, [5, 0, 0, 5], [0.04] * 3, [1] * 3,
                    n_depth=([0.5, 2.0], np.array([[0.05] * 3, [0.03] * 3])))
    p = properties(t, [0.2, 1.0, 3.0])
    np.testing.assert_allclose(p.sub_n[:, 0], [0.05, 0.05 - 0.02 * 0.5 / 1.5, 0.03], rtol=1e-12)


def test_specific_force_rectangle():
    # M = Q^2/(g b y) + b y^2 / 2 for a rectangle (Chow 1959, ch. 3, from memory)
    t = build_table([0, 0, 4, 4], [5, 0, 0, 5], [0.03] * 3, [1] * 3)
    y = np.array([0.5, 1.5])
    m = specific_force(properties(t, y), 12.0, 9.81)
    np.testing.assert_allclose(m, 144 / (9.81 * 4 * y) + 4 * y * y / 2, rtol=1e-12)


def test_bad_input_names_section():
    with pytest.raises(GeometryError, match="'xs7'.*decrease"):
        build_table([0, 2, 1], [1, 0, 1], [0.03, 0.03], [1, 1], name="xs7")
    with pytest.raises(GeometryError, match="n must be"):
        build_table([0, 1, 2], [1, 0, 1], [0.03, 0.0], [1, 1])
    with pytest.raises(GeometryError, match="part codes"):
        build_table([0, 1, 2], [1, 0, 1], [0.03, 0.03], [1, 5])


ground = st.lists(st.floats(0.0, 10.0), min_size=3, max_size=12)


@settings(max_examples=60, deadline=None)
@given(z=ground, steps=st.lists(st.floats(0.05, 20.0), min_size=11, max_size=11),
       frac=st.floats(0.02, 1.2), ns=st.lists(st.floats(0.015, 0.15), min_size=11, max_size=11))
def test_random_sections_against_shapely(z, steps, frac, ns):
    """Area, top width and wetted perimeter vs shapely polygon clipping (reference library);
    alpha >= beta >= 1 (Cauchy-Schwarz; Chow 1959, ch. 2)."""
    m = len(z)
    x = np.concatenate([[0.0], np.cumsum(steps[: m - 1])])
    z = np.array(z)
    nseg = m - 1
    part = np.ones(nseg, dtype=int)
    part[: nseg // 3] = 0
    part[nseg - nseg // 3:] = 2
    t = build_table(x, z, ns[:nseg], part)
    zmin, zmax = z.min(), z.max()
    w = zmin + frac * max(zmax - zmin, 0.1)
    p = properties(t, w)
    big = zmax + 100.0
    above_ground = shapely.Polygon(np.vstack([np.c_[x, z], [[x[-1], big], [x[0], big]]]))
    water = above_ground.intersection(shapely.box(x[0], zmin - 1.0, x[-1], w))
    assert p.area[0] == pytest.approx(water.area, rel=1e-9, abs=1e-9)
    surface = shapely.LineString([(x[0], w), (x[-1], w)])
    ground_line = shapely.LineString(np.c_[x, z])
    wet_ground = ground_line.intersection(shapely.box(x[0] - 1, zmin - 1, x[-1] + 1, w))
    walls = max(w - z[0], 0.0) + max(w - z[-1], 0.0)
    assert p.wetted_perimeter[0] == pytest.approx(wet_ground.length + walls, rel=1e-9, abs=1e-9)
    top = surface.intersection(water.buffer(1e-9)).length if water.area > 0 else 0.0
    assert p.top_width[0] == pytest.approx(top, abs=1e-6)
    if p.conveyance[0] > 0:
        assert p.alpha[0] >= p.beta[0] - 1e-12 and p.beta[0] >= 1 - 1e-12


def test_storage_strip_has_area_and_width_but_no_conveyance():
    # Compound rectangle, floodplains 50 m at 2 m, channel 10 m at 0 m; the outer 20 m of the left
    # floodplain is storage. Hand arithmetic with Manning, K = (1/n) A R^(2/3) (Chow 1959, ch. 6):
    # the left floodplain conveys only over its inner 30 m (its wetted perimeter there: 30 m of bed;
    # the vertical division between storage and conveying ground carries no perimeter), while area
    # and top width count the storage too. Both evaluation paths (clipping and level tables) agree.
    x = [0, 20, 50, 50, 60, 60, 110]
    z = [2, 2, 2, 0, 0, 2, 2]
    n = [0.06, 0.06, 0.03, 0.03, 0.03, 0.06]
    part = [0, 0, 1, 1, 1, 2]
    storage = [True, False, False, False, False, False]
    t = build_table(x, z, n, part, storage=storage)
    plain = build_table(x, z, n, part)
    w = np.array([2.5, 3.0])
    p, depth = properties(t, w), w - 2.0
    np.testing.assert_allclose(p.area, properties(plain, w).area, rtol=1e-12)
    np.testing.assert_allclose(p.top_width, 110.0, rtol=1e-12)
    k_left = (30 * depth) * ((30 * depth) / 30.0) ** (2 / 3) / 0.06
    np.testing.assert_allclose(p.part_conveyance[:, 0], k_left, rtol=1e-12)
    np.testing.assert_allclose(p.part_conveyance[:, 1:], properties(plain, w).part_conveyance[:, 1:], rtol=1e-12)
    from geoflow.hydraulics.geometry import fast_properties, flow_state
    fast = fast_properties(t, w)
    exact = properties(t, w)
    np.testing.assert_allclose(fast.conveyance, exact.conveyance, rtol=1e-10)
    np.testing.assert_allclose(fast.area, exact.area, rtol=1e-10)
    a, k, alpha, part_k = flow_state(t, w)
    np.testing.assert_allclose(k, exact.conveyance, rtol=1e-10)
    # the velocity head alpha V^2 / 2g = Q^2 sum(K_i^3 / A_i^2) / (2 g K^3) ignores the storage area
    q, g = 50.0, 9.80665
    sub_k, sub_a = exact.sub_conveyance, exact.sub_area
    flow = sub_k > 0
    expected = q * q * np.sum(np.where(flow, sub_k ** 3 / np.where(flow, sub_a, 1.0) ** 2, 0.0), axis=1) / (
        2 * g * exact.conveyance ** 3)
    np.testing.assert_allclose(alpha * q * q / (2 * g * a * a), expected, rtol=1e-10)


def test_storage_never_touches_the_channel_and_is_checked():
    x, z = [0, 10, 10, 20, 20, 30], [2, 2, 0, 0, 2, 2]
    t = build_table(x, z, [0.05] * 5, [0, 1, 1, 1, 2], storage=[False, True, True, True, False])
    assert t.storage is None                              # channel segments cannot be storage
    with pytest.raises(GeometryError, match="storage needs one value per segment"):
        build_table(x, z, [0.05] * 5, [0, 1, 1, 1, 2], storage=[True, False])
