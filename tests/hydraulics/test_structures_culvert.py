"""Culverts against FHWA HDS-5 (Normann, Houghtalen & Johnston 2001, FHWA-NHI-01-020) worked
values, check values computed from its published equations, and independent scipy solutions."""
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad
from scipy.optimize import brentq

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.structures.barrel import critical_depth_box, critical_depth_circular
from geoflow.hydraulics.structures.culvert import (
    Culvert,
    culvert_headwater,
    inlet_control_headwater,
    outlet_control_headwater,
    road_discharge,
)
from geoflow.hydraulics.structures.inlets import (
    INLETS,
    InletCoefficients,
    submerged_ratio,
    unsubmerged_form1_ratio,
    unsubmerged_form2_ratio,
)

G = 9.81  # the check values below were computed with g = 9.81


def pipe(**kw):
    base = dict(shape="circular", diameter=1.2, length=30.0, invert_up=100.3, invert_down=100.0,
                n=0.012, inlet="concrete_square_edge_headwall")
    base.update(kw)
    return Culvert(**base)


def box(**kw):
    base = dict(shape="box", span=2.0, rise=1.5, length=30.0, invert_up=100.15, invert_down=100.0,
                n=0.012, inlet="box_headwall_chamfer_19mm")
    base.update(kw)
    return Culvert(**base)


# --- HDS-5 2001, Appendix A worked table (US units; K 0.0340, M 1.5, c 0.0496, Y 0.53, -0.5 S)

def test_hds5_appendix_a_form1_worked_value():
    # Hc/D = 0.55, Qc/AD^0.5 = 1.18, S = 0.02: HW/D = 0.58 (HDS-5 2001 App. A, source found)
    ratio = unsubmerged_form1_ratio(1.18, 0.55, 0.0340, 1.5, -0.5, 0.02)
    assert ratio == pytest.approx(0.58, abs=0.005)
    assert ratio == pytest.approx(0.584, abs=5e-4)  # unrounded value of the same equation


@pytest.mark.parametrize("x, published", [(4.0, 1.31), (6.0, 2.31), (8.0, 3.69)])
def test_hds5_appendix_a_submerged_worked_values(x, published):
    # HDS-5 2001 App. A worked table, submerged equation (source found)
    assert submerged_ratio(x, 0.0496, 0.53, -0.5, 0.02) == pytest.approx(published, abs=0.005)


# --- circular concrete pipe, square edge with headwall, D = 1.2 m, S = 0.01 (HDS-5 2001 Table 9
# constants; check values computed from HDS-5 Eqs A-1..A-3 with Ku = 1.811)

def test_circular_pipe_submerged_inlet_control():
    c = pipe()
    assert c.intensity(3.0) == pytest.approx(4.3853, abs=1e-4)
    hw, regime = inlet_control_headwater(np.array([3.0]), c, G)
    assert regime[0] == 2
    assert hw[0] == pytest.approx(1.7165, abs=2e-4)
    assert hw[0] / 1.2 == pytest.approx(1.4304, abs=2e-4)


def test_circular_pipe_unsubmerged_form1():
    c = pipe()
    dc = critical_depth_circular([1.0], 1.2, G)[0]
    assert dc == pytest.approx(0.5417, abs=1e-4)
    assert c.barrel.critical_head(np.array([1.0]), G)[0] == pytest.approx(0.7492, abs=1e-4)
    assert c.intensity(1.0) == pytest.approx(1.4618, abs=1e-4)
    hw, regime = inlet_control_headwater(np.array([1.0]), c, G)
    assert regime[0] == 0
    assert hw[0] == pytest.approx(0.7683, abs=2e-4)


def test_box_form2_and_submerged():
    # concrete box 2.0 x 1.5 m, 90-degree headwall with 3/4-in chamfers (form 2)
    c = box()
    assert c.intensity(4.0) == pytest.approx(1.9716, abs=1e-4)
    assert c.intensity(12.0) == pytest.approx(5.9147, abs=1e-4)
    hw, regime = inlet_control_headwater(np.array([4.0, 12.0]), c, G)
    assert regime.tolist() == [0, 2]
    assert hw[0] == pytest.approx(1.2149, abs=2e-4)   # form 2, no slope term
    assert hw[1] == pytest.approx(3.1491, abs=2e-4)   # submerged, S = 0.005
    assert unsubmerged_form2_ratio(1.9716, 0.515, 0.667) * 1.5 == pytest.approx(1.2149, abs=2e-4)


def test_outlet_control_check_values():
    # same pipe, n = 0.012, L = 30 m, ke = 0.5, Q = 3 (HDS-5 2001 Eqs 5-7; computed check values):
    # V = 2.6526, Ku n^2 L / R^1.33 = 0.4206, H = 0.6888 m
    c = pipe()
    v = 3.0 / c.barrel.area
    assert v == pytest.approx(2.6526, abs=1e-4)
    friction = 19.63 * 0.012 ** 2 * 30 / c.barrel.hydraulic_radius ** 1.33
    assert friction == pytest.approx(0.4206, abs=1e-4)
    tw_high = 5.0  # ho = TW: HWo - TW + S L = H
    h = outlet_control_headwater(np.array([3.0]), np.array([tw_high]), c, G)[0] - tw_high + 0.3
    assert h == pytest.approx(0.6888, abs=1e-4)
    hwo = outlet_control_headwater(np.array([3.0, 3.0]), np.array([1.5, 0.5]), c, G)
    assert hwo[0] == pytest.approx(1.8888, abs=2e-4)
    assert critical_depth_circular([3.0], 1.2, G)[0] == pytest.approx(0.9522, abs=1e-4)
    assert hwo[1] == pytest.approx(1.4648, abs=2e-4)   # ho = (dc + D)/2 = 1.0761


def test_outlet_control_governs_over_inlet_control():
    # TW = 1.5 m above the outlet invert: HWo = 1.8888 > HWi = 1.7165, so outlet control governs
    r = culvert_headwater([3.0], [100.0 + 1.5], pipe(), g=G)
    assert r.control[0] == "outlet"
    assert r.headwater_wse[0] == pytest.approx(100.3 + 1.8888, abs=2e-4)
    r = culvert_headwater([3.0], [100.0 + 0.5], pipe(), g=G)
    assert r.control[0] == "inlet"
    assert r.headwater_wse[0] == pytest.approx(100.3 + 1.7165, abs=2e-4)


# --- critical depth, independent of the closed-form segment geometry

def _circle_area_quad(y, d):
    r = d / 2
    return quad(lambda s: 2 * np.sqrt(max(r * r - (r - s) ** 2, 0.0)), 0, y)[0]


@pytest.mark.parametrize("q", [0.05, 0.5, 1.0, 3.0, 8.0])
def test_circular_critical_depth_matches_quadrature_and_brentq(q):
    # Q^2 T / (g A^3) = 1 (Chow 1959 ch. 3, from memory), A by scipy quad of the chord width
    d = 1.2

    def froude_excess(y):
        t = 2 * np.sqrt((d / 2) ** 2 - (d / 2 - y) ** 2)
        return G * _circle_area_quad(y, d) ** 3 - q * q * t

    ref = brentq(froude_excess, 1e-6, d - 1e-9, xtol=1e-13)
    assert critical_depth_circular([q], d, G)[0] == pytest.approx(ref, abs=1e-7)


def test_box_critical_depth_closed_form_and_cap():
    # dc = (q^2/g)^(1/3) for a rectangle (Chow 1959 ch. 3, from memory); HDS-5 caps dc at D
    dc = critical_depth_box(np.array([4.0, 400.0]), 2.0, 1.5, G)
    assert dc[0] == pytest.approx((2.0 ** 2 / G) ** (1 / 3), rel=1e-12)
    assert dc[1] == 1.5


# --- HDS-5 2001 Example 4: gravel road, L = 60.96 m, Cd(SI) = 0.552 Cd(US)

@pytest.mark.parametrize("head, cd_us, published, computed", [(0.16, 2.70, 5.8, 5.815),
                                                              (0.45, 2.92, 29.7, 29.661)])
def test_road_overtopping_hds5_example4(head, cd_us, published, computed):
    c = pipe(crest=103.0, crest_length=60.96, crest_coefficient=0.552 * cd_us)
    q = road_discharge(np.array([103.0 + head]), np.array([100.0]), c)[0]
    assert q == pytest.approx(published, rel=0.01)      # source found (rounded in the example)
    assert q == pytest.approx(computed, rel=1e-3)


# --- overtopping: the split, against an independent brentq solution

def _independent_headwater(q_total, tw_wse, crest, crest_len, cr, d=1.2, s=0.01, length=30.0,
                           n=0.012, ke=0.5, up=100.3, down=100.0):
    """Scalar HDS-5 (Eqs 5-8, App. A) with scipy brentq, written apart from the package: the
    outer root is on the headwater, the inner one inverts HW(Qb) for the barrel flow."""
    area, rise = np.pi * d * d / 4, d
    inlet = INLETS["concrete_square_edge_headwall"]
    top = lambda y: 2 * np.sqrt((d / 2) ** 2 - (d / 2 - y) ** 2)

    def dc(q):
        f = lambda y: G * _circle_area_quad(y, d) ** 3 - q * q * top(y)
        return brentq(f, 1e-6, d - 1e-9, xtol=1e-12)

    def hw_inlet(q):
        x = 1.811 * q / (area * np.sqrt(rise))
        if x >= 4.0:
            return rise * (inlet.c * x * x + inlet.y - 0.5 * s)
        if x > 3.5:  # a linear blend: the final answer is asserted to lie outside 3.5-4.0
            t = (x - 3.5) / 0.5
            return (1 - t) * hw_inlet(3.5 * area * np.sqrt(rise) / 1.811 * (1 - 1e-12)) \
                + t * rise * (inlet.c * 16.0 + inlet.y - 0.5 * s)
        y = dc(q)
        a_c = _circle_area_quad(y, d)
        t_c = top(y)
        return rise * ((y + a_c / (2 * t_c)) / rise + inlet.k * x ** inlet.m - 0.5 * s)

    def hw_barrel(q):
        hwi = hw_inlet(q)
        v = q / area
        hl = (1 + ke + 19.63 * n * n * length / (d / 4) ** 1.33) * v * v / (2 * G)
        hwo = max(tw_wse - down, (dc(q) + d) / 2) + hl - s * length
        return max(hwi, hwo)

    def q_barrel(hw):
        return brentq(lambda q: hw_barrel(q) - hw, 1e-6, q_total, xtol=1e-12)

    def q_road(hw_wse):
        h1, h2 = hw_wse - crest, max(tw_wse - crest, 0.0)
        return cr * crest_len * h1 ** 1.5 * (1 - (h2 / h1) ** 1.5) ** 0.385  # Villemonte (1947)

    hw_all = hw_barrel(q_total)  # the whole flow through the barrel overtops here
    hw = brentq(lambda hw: q_barrel(hw) + q_road(up + hw) - q_total, max(crest, tw_wse) - up + 1e-9,
                hw_all, xtol=1e-10)
    x = 1.811 * q_barrel(hw) / (area * np.sqrt(rise))
    assert not 3.5 < x < 4.0 or hw_barrel(q_barrel(hw)) > hw_inlet(q_barrel(hw)) + 1e-6
    return hw + up


@pytest.mark.parametrize("q, tw", [(12.0, 100.5), (25.0, 101.5), (40.0, 102.8)])
def test_overtopped_culvert_split_and_headwater(q, tw):
    c = pipe(crest=102.5, crest_length=40.0, crest_coefficient=1.66)
    r = culvert_headwater([q], [tw], c, g=G)
    assert r.control[0] == "overtopping"
    assert r.q_through[0] + r.q_over_crest[0] == pytest.approx(q, rel=1e-3)
    ref = _independent_headwater(q, tw, 102.5, 40.0, 1.66)
    assert r.headwater_wse[0] - 100.3 == pytest.approx(ref - 100.3, rel=0.01)
    assert r.headwater_wse[0] == pytest.approx(ref, abs=2e-4)
    if tw > 102.5:
        assert "road_weir_submerged" in r.flags[0]


def test_no_overtopping_below_the_crest():
    c = pipe(crest=104.0, crest_length=40.0)
    r = culvert_headwater([1.0, 3.0], [100.2, 100.4], c, g=G)
    assert np.all(r.q_over_crest == 0) and np.all(r.q_through == [1.0, 3.0])
    assert r.control.tolist() == ["inlet", "inlet"]


# --- monotone and smooth in Q across every regime

@pytest.mark.parametrize("name", sorted(INLETS))
def test_headwater_monotone_across_all_regimes(name):
    shape = INLETS[name].shape
    c = (pipe if shape == "circular" else box)(inlet=name, crest=103.2, crest_length=30.0)
    q = np.geomspace(0.02, 60.0, 1500)
    for tw in (99.5, 100.9, 102.0, 103.5):
        r = culvert_headwater(q, np.full(q.size, tw), c)
        assert np.all(np.diff(r.headwater_wse) > 0), (name, tw)
        assert set(r.control) >= {"overtopping"}
    regimes = culvert_headwater(q, np.full(q.size, 99.5), c).detail["inlet_regime"]
    assert {0, 1, 2} <= set(regimes.tolist())


@pytest.mark.parametrize("name", sorted(INLETS))
def test_transition_is_tangent_to_both_forms(name):
    # HDS-5 draws the transition "between and tangent to" both curves: value and slope of the
    # inlet-control headwater in X match the unsubmerged form at 3.5 and the submerged one at 4.0
    co = INLETS[name]
    c = pipe(inlet=name) if co.shape == "circular" else box(inlet=name)
    b = c.barrel

    def hw_at(x):
        q = np.atleast_1d(x) * b.area * np.sqrt(b.rise) / 1.811
        return inlet_control_headwater(q, c)[0] / b.rise

    h = 1e-6
    for x0 in (3.5, 4.0):
        left = (hw_at(x0) - hw_at(x0 - h)) / h
        right = (hw_at(x0 + h) - hw_at(x0)) / h
        assert abs(hw_at(x0 + 1e-9) - hw_at(x0 - 1e-9))[0] < 1e-7
        assert right[0] == pytest.approx(left[0], rel=1e-3)


@settings(max_examples=40, deadline=None)
@given(d=st.floats(0.3, 3.0), slope=st.floats(0.0, 0.05), tw_depth=st.floats(-1.0, 4.0),
       q1=st.floats(0.01, 30.0), q2=st.floats(0.01, 30.0), name=st.sampled_from(
           [k for k, v in INLETS.items() if v.shape == "circular"]))
def test_headwater_never_falls_as_discharge_rises(d, slope, tw_depth, q1, q2, name):
    up = 10.0 + 40 * slope
    c = Culvert("circular", diameter=d, length=40.0, invert_up=up, invert_down=10.0, n=0.013,
                inlet=name, barrels=2, crest=up + d + 1.0, crest_length=25.0)
    lo, hi = sorted((q1, q2))
    r = culvert_headwater([lo, hi], [10.0 + tw_depth] * 2, c)
    assert r.headwater_wse[0] <= r.headwater_wse[1] + 1e-9
    assert r.q_through + r.q_over_crest == pytest.approx([lo, hi], rel=1e-6)


# --- several barrels, flags

def test_two_barrels_share_the_flow():
    one, two = pipe(), pipe(barrels=2)
    assert culvert_headwater([6.0], [100.4], two, g=G).headwater_wse[0] == pytest.approx(
        culvert_headwater([3.0], [100.4], one, g=G).headwater_wse[0], abs=1e-12)


def test_flags_low_head_transition_and_adverse_slope():
    # HDS-5 supports the outlet-control equation down to about HW = 0.75 D
    r = culvert_headwater([0.3], [100.6], pipe(invert_up=100.0, invert_down=99.9, length=30.0))
    assert r.control[0] == "outlet" and "outlet_low_head" in r.flags[0]
    x = 3.75 * pipe().barrel.area * np.sqrt(1.2) / 1.811
    assert "inlet_transition" in culvert_headwater([x], [100.0], pipe()).flags[0]
    adverse = pipe(invert_up=100.0, invert_down=100.2)
    assert "adverse_slope" in culvert_headwater([1.0], [100.0], adverse).flags[0]


def test_custom_inlet_coefficients():
    custom = InletCoefficients("circular", 1, 0.0340, 1.5, 0.0496, 0.53, -0.5, 0.9, "worked table")
    c = pipe(inlet_coefficients=custom)
    hw = inlet_control_headwater(np.array([6.0 * c.barrel.area * np.sqrt(1.2) / 1.811]), c)[0]
    assert hw[0] / 1.2 == pytest.approx(submerged_ratio(6.0, 0.0496, 0.53, -0.5, 0.01), rel=1e-12)


# --- one-line errors that name the parameter

@pytest.mark.parametrize("kw, words", [
    (dict(diameter=-1.0), "diameter"),
    (dict(length=0.0), "length"),
    (dict(n=0.0), "n must"),
    (dict(barrels=0), "barrels"),
    (dict(inlet="concrete_square_edge_headwal"), "did you mean 'concrete_square_edge_headwall'"),
    (dict(inlet="box_wingwall_0"), "is for box barrels"),
    (dict(crest=100.1, crest_length=10.0), "above the road crest"),
    (dict(crest=101.0, crest_length=10.0), "crown"),
    (dict(crest=103.0), "crest_length"),
    (dict(shape="circle"), "did you mean 'circular'"),
])
def test_bad_parameters_raise_one_line_errors(kw, words):
    with pytest.raises(HydraulicsError) as err:
        pipe(**kw)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_bad_events_raise():
    with pytest.raises(HydraulicsError, match="discharge must be finite and > 0"):
        culvert_headwater([0.0], [100.0], pipe())
    with pytest.raises(HydraulicsError, match="one value per event"):
        culvert_headwater([1.0, 2.0, 3.0], [100.0, 100.1], pipe())
