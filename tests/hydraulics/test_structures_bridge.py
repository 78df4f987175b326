"""Bridges against Yarnell's (1934) formula by hand, momentum and energy balances solved
independently with brentq, Bradley's (1978) pressure-flow forms and the weir equation."""
import numpy as np
import pytest
from scipy.optimize import brentq

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.structures import Bridge, Piers, bridge_headwater
from geoflow.hydraulics.structures.bridge import deck_discharge, orifice_discharge, sluice_discharge
from geoflow.hydraulics.structures.lowflow import yarnell_rise

G = 9.81  # the check values below were computed with g = 9.81
B = 20.0


def rectangle(width=B, n=0.03, wall=8.0):
    return build_table([0, 0, width, width], [wall, 0.0, 0.0, wall], [n] * 3, [1] * 3)


def bridge(**kw):
    base = dict(low_chord=6.0, high_chord=7.0, length=0.0, piers=Piers(2, 2.0, "square"))
    base.update(kw)
    return Bridge(**base)


# --- Yarnell (1934): dy = K (K + 5 Fr^2 - 0.6)(a + 15 a^4) Fr^2 y, by hand

def _yarnell_omega_form(k, a, v, y):
    # the same formula as an energy-head form: H = 2K (K + 10 w - 0.6)(a + 15 a^4) V^2/2g,
    # w = (V^2/2g)/y (Yarnell 1934, as restated in the open literature)
    hv = v * v / (2 * G)
    return 2 * k * (k + 10 * hv / y - 0.6) * (a + 15 * a ** 4) * hv


@pytest.mark.parametrize("k, a, v, y, published", [(0.9, 0.1, 1.0, 2.0, 0.00517),
                                                   (1.25, 0.2, 2.0, 2.0, 0.19059)])
def test_yarnell_formula_check_values(k, a, v, y, published):
    # computed check values of the published formula, and the equivalent omega form
    dy = yarnell_rise(k, a, v, y, G)
    assert dy == pytest.approx(published, abs=1e-5)
    assert dy == pytest.approx(_yarnell_omega_form(k, a, v, y), rel=1e-12)


def test_yarnell_through_the_bridge_entry_point():
    # rectangle B = 20, Q = 80, y = 2 downstream, two square piers of 2 m (K = 1.25, Yarnell
    # 1934 table): alpha = 4 * 2 / 40 = 0.2, V = 2 m/s, so dy = 0.19059 m by hand
    b = bridge(low_flow_method="yarnell")
    r = bridge_headwater([80.0], [2.0], b, rectangle(), rectangle(), g=G)
    assert r.headwater_wse[0] == pytest.approx(2.0 + 0.19059, abs=1e-5)
    assert r.control[0] == "free_surface"
    fr2 = 4.0 / (G * 2.0)
    hand = 1.25 * (1.25 + 5 * fr2 - 0.6) * (0.2 + 15 * 0.2 ** 4) * fr2 * 2.0
    assert r.headwater_wse[0] - 2.0 == pytest.approx(hand, rel=1e-9)


# --- momentum

def test_momentum_frictionless_rectangle_check_value():
    # B = 20, Q = 80, y_d = 2, piers 4 m in all, C_D = 2 (square, from memory), drag on the
    # upstream pier area: y_u = 2.0940 m (computed check value), and brentq on
    # M_u - 1/2 C_D A_p V_u^2 / g = M_d with M = B y^2/2 + Q^2/(g B y)
    b = bridge(low_flow_method="momentum")
    r = bridge_headwater([80.0], [2.0], b, rectangle(), rectangle(), g=G)
    assert r.headwater_wse[0] == pytest.approx(2.0940, abs=1e-4)
    m = lambda y: B * y * y / 2 + 80.0 ** 2 / (G * B * y)
    drag = lambda y: 0.5 * 2.0 * (4.0 * y) * (80.0 / (B * y)) ** 2 / G
    ref = brentq(lambda y: m(y) - drag(y) - m(2.0), 2.0, 4.0, xtol=1e-12)
    assert r.headwater_wse[0] == pytest.approx(ref, abs=1e-7)


# --- energy method, against brentq on the energy equation with the same loss rules

def _rect_energy(y, width, q):
    return y + (q / (width * y)) ** 2 / (2 * G)


def _sub_root(f, y_c, top=30.0):
    return brentq(f, y_c * (1 + 1e-12), top, xtol=1e-13)


@pytest.mark.parametrize("q, tw", [(80.0, 2.0), (40.0, 3.0), (150.0, 4.5)])
def test_energy_method_frictionless_matches_brentq(q, tw):
    # E_BD = E_2 + Ce |hv_BD - hv_2|, E_BU = E_BD (no length), E_3 = E_BU + Cc |hv_BU - hv_3|
    # (standard step with eddy losses; USACE EM 1110-2-1416, 1993, from memory)
    b = bridge(low_flow_method="energy")
    r = bridge_headwater([q], [tw], b, rectangle(), rectangle(), g=G)
    net = B - 4.0
    hv = lambda y, w: (q / (w * y)) ** 2 / (2 * G)
    e2 = _rect_energy(tw, B, q)
    yc_net = ((q / net) ** 2 / G) ** (1 / 3)
    y_bd = _sub_root(lambda y: _rect_energy(y, net, q) - e2 - 0.5 * abs(hv(y, net) - hv(tw, B)),
                     yc_net)
    e_bu = _rect_energy(y_bd, net, q)
    yc = ((q / B) ** 2 / G) ** (1 / 3)
    y3 = _sub_root(lambda y: _rect_energy(y, B, q) - e_bu - 0.3 * abs(hv(y_bd, net) - hv(y, B)), yc)
    assert r.headwater_wse[0] == pytest.approx(y3, abs=2e-5)


def test_energy_method_with_friction_matches_brentq():
    # friction over the bridge length with the average-conveyance slope ((Q1+Q2)/(K1+K2))^2
    # (Reed & Wolfkill 1976, from memory); K = A R^(2/3)/n with the pier faces in P
    q, tw, length, n = 60.0, 2.5, 25.0, 0.03
    b = bridge(low_flow_method="energy", length=length)
    r = bridge_headwater([q], [tw], b, rectangle(n=n), rectangle(n=n), g=G)
    net = B - 4.0
    hv = lambda y, w: (q / (w * y)) ** 2 / (2 * G)
    k_net = lambda y: net * y * (net * y / (net + 6 * y)) ** (2 / 3) / n
    e2 = _rect_energy(tw, B, q)
    yc_net = ((q / net) ** 2 / G) ** (1 / 3)
    y_bd = _sub_root(lambda y: _rect_energy(y, net, q) - e2 - 0.5 * abs(hv(y, net) - hv(tw, B)),
                     yc_net)
    sf = lambda y: (2 * q / (k_net(y) + k_net(y_bd))) ** 2
    e_bd = _rect_energy(y_bd, net, q)
    y_bu = _sub_root(lambda y: _rect_energy(y, net, q) - e_bd - length * sf(y), yc_net)
    yc = ((q / B) ** 2 / G) ** (1 / 3)
    y3 = _sub_root(lambda y: _rect_energy(y, B, q) - _rect_energy(y_bu, net, q)
                   - 0.3 * abs(hv(y_bu, net) - hv(y, B)), yc)
    assert r.headwater_wse[0] == pytest.approx(y3, abs=2e-5)
    assert y3 > y_bu > y_bd


def test_choked_opening_is_set_by_critical_depth():
    # a 6 m opening between abutments, low tailwater: no subcritical solution in the opening
    # (Bradley 1978 class B); E_3 = E_c(opening) + Cc |hv_c - hv_3|
    q, tw = 30.0, 1.0
    b = Bridge(low_chord=6.0, high_chord=7.0, length=0.0, opening_left=7.0, opening_right=13.0,
               low_flow_method="energy")
    r = bridge_headwater([q], [tw], b, rectangle(), rectangle(), g=G)
    assert "critical_in_opening" in r.flags[0]
    yc = ((q / 6.0) ** 2 / G) ** (1 / 3)
    hv = lambda y, w: (q / (w * y)) ** 2 / (2 * G)
    y3 = _sub_root(lambda y: _rect_energy(y, B, q) - 1.5 * yc - 0.3 * abs(hv(yc, 6.0) - hv(y, B)),
                   ((q / B) ** 2 / G) ** (1 / 3))
    assert r.headwater_wse[0] == pytest.approx(y3, abs=1e-4)


def test_a_bridge_that_obstructs_nothing_below_the_water_adds_nothing():
    # energy conservation without friction or obstruction: the level carries across both faces
    b = Bridge(low_chord=6.0, high_chord=7.0, length=0.0, low_flow_method="energy")
    r = bridge_headwater([40.0, 90.0], [2.0, 3.0], b, rectangle(), rectangle(), g=G)
    np.testing.assert_allclose(r.headwater_wse, [2.0, 3.0], atol=1e-9)


def test_tailwater_below_critical_is_a_free_outfall():
    # a supercritical tailwater cannot control the flow through the bridge: the result equals
    # the one for a tailwater at critical depth (yc = (q^2/g)^(1/3), Chow 1959, from memory)
    q = 80.0
    yc = ((q / B) ** 2 / G) ** (1 / 3)
    low = bridge_headwater([q], [0.5 * yc], bridge(), rectangle(), rectangle(), g=G)
    at_critical = bridge_headwater([q], [yc], bridge(), rectangle(), rectangle(), g=G)
    assert low.headwater_wse[0] == pytest.approx(at_critical.headwater_wse[0], abs=1e-6)
    assert "tailwater_below_critical" in low.flags[0] and "critical_in_opening" in low.flags[0]
    assert low.tailwater_wse[0] == 0.5 * yc


def test_highest_method_is_the_default_and_the_maximum():
    r = bridge_headwater([80.0, 30.0, 150.0], [2.0, 3.0, 4.0], bridge(), rectangle(), rectangle(),
                         g=G)
    d = r.detail
    stacked = np.column_stack([d["headwater_energy_method"], d["headwater_momentum_method"],
                               d["headwater_yarnell"]])
    np.testing.assert_allclose(r.headwater_wse, stacked.max(axis=1))
    assert set(d["low_flow_method"]) <= {"energy", "momentum", "yarnell"}


# --- pressure and deck flow (Bradley 1978, HDS-1; forms from memory)

def test_pressure_and_weir_check_values():
    # sluice: Cd 0.5, A 40, Y3 = 4, Z = 3, V3 = 1: Q = 141.49; orifice: C 0.8, A 40, dH 0.5:
    # Q = 100.23; deck weir C = 2.6 x 0.552, L = 50, H = 0.4: Q = 18.15 m3/s (computed values)
    q_sluice = sluice_discharge(4.0 + 1 / (2 * G), 0.0, 3.0, 40.0, 0.5, G)
    assert q_sluice == pytest.approx(141.49, abs=0.01)
    assert orifice_discharge(10.5, 10.0, 40.0, 0.8, G) == pytest.approx(100.23, abs=0.01)
    b = bridge(deck_coefficient=2.6 * 0.552)
    q = deck_discharge([7.4], [0.0], np.array([7.0, 7.0]), np.array([20.0, 30.0]), b)
    assert q[0] == pytest.approx(18.15, abs=0.01)


def _wse_from_energy(e, q):
    return _sub_root(lambda y: _rect_energy(y, B, q) - e, ((q / B) ** 2 / G) ** (1 / 3))


def _narrow(**kw):
    return Bridge(low_chord=3.0, high_chord=4.0, length=0.0, opening_left=5.0, opening_right=15.0,
                  **kw)


def test_sluice_gate_flow():
    # opening 10 m x 3 m (A = 30, Z = 3, mean bed 0), tailwater below the low chord:
    # E = Z/2 + Q^2 / (2 g Cd^2 A^2), headwater on the subcritical branch upstream
    q = 100.0
    r = bridge_headwater([q], [1.5], _narrow(), rectangle(), rectangle(), g=G)
    e = 1.5 + q * q / (2 * G * 0.25 * 900.0)
    assert r.control[0] == "pressure"
    assert r.headwater_wse[0] == pytest.approx(_wse_from_energy(e, q), abs=1e-6)


def test_orifice_flow_when_the_tailwater_reaches_the_low_chord():
    q, tw = 60.0, 3.5
    r = bridge_headwater([q], [tw], _narrow(), rectangle(), rectangle(), g=G)
    e = tw + q * q / (2 * G * 0.64 * 900.0)
    assert r.control[0] == "pressure"
    assert r.headwater_wse[0] == pytest.approx(_wse_from_energy(e, q), abs=1e-6)


@pytest.mark.parametrize("q, tw", [(250.0, 1.5), (180.0, 3.5), (400.0, 4.3)])
def test_pressure_plus_deck_overtopping_split(q, tw):
    # Q = Q_pressure(E) + Q_deck(E), deck crest 4.0 over the 20 m face, Villemonte (1947) for a
    # tailwater above it; brentq on the energy level, then the WSE on the subcritical branch
    r = bridge_headwater([q], [tw], _narrow(), rectangle(), rectangle(), g=G)
    assert r.control[0] == "overtopping"
    assert r.q_through[0] + r.q_over_crest[0] == pytest.approx(q, rel=1e-3)

    def q_open(e):
        sluice = 0.5 * 30.0 * np.sqrt(2 * G * (e - 1.5))
        return min(sluice, 0.8 * 30.0 * np.sqrt(2 * G * (e - tw))) if tw >= 3.0 else sluice

    def q_deck(e):
        h1, h2 = e - 4.0, max(tw - 4.0, 0.0)
        return 1.44 * B * h1 ** 1.5 * (1 - (h2 / h1) ** 1.5) ** 0.385 if h1 > 0 else 0.0

    e = brentq(lambda e: q_open(e) + q_deck(e) - q, max(4.0, tw) + 1e-9, 20.0, xtol=1e-12)
    ref = _wse_from_energy(e, q)
    assert r.headwater_wse[0] == pytest.approx(ref, abs=1e-5)
    assert r.q_over_crest[0] == pytest.approx(q_deck(e), rel=1e-4)
    assert ("deck_weir_submerged" in r.flags[0]) == (tw > 4.0)


# --- monotone in Q across low flow, pressure flow and overtopping

@pytest.mark.parametrize("method", ["highest", "energy", "momentum", "yarnell"])
def test_headwater_monotone_across_regimes(method):
    x, z = [0, 2, 4, 16, 18, 20], np.array([8.0, 1.0, 0.2, 0.0, 1.2, 8.0])
    n, part = [0.04, 0.03, 0.03, 0.03, 0.04], [0, 1, 1, 1, 2]
    up, down = build_table(x, z, n, part), build_table(x, z - 0.1, n, part)
    b = Bridge(low_chord=4.0, high_chord=5.0, length=12.0, opening_left=1.0, opening_right=19.0,
               piers=Piers(2, 1.0, "semicircular", drag_coefficient=1.33), low_flow_method=method)
    q = np.geomspace(1.0, 700.0, 400)
    seen = set()
    for tw in (1.0, 2.5, 3.9, 4.5, 6.0):
        r = bridge_headwater(q, np.full(q.size, tw), b, up, down)
        assert np.all(np.diff(r.headwater_wse) >= -1e-7), (method, tw)
        assert np.all(r.headwater_wse >= tw - 1e-9)
        np.testing.assert_allclose(r.q_through + r.q_over_crest, q, rtol=1e-6)
        seen |= set(r.control)
    assert seen == {"free_surface", "pressure", "overtopping"}


# --- one-line errors that name the parameter

@pytest.mark.parametrize("kw, words", [
    (dict(high_chord=5.0), "below low_chord"),
    (dict(length=-1.0), "length"),
    (dict(low_flow_method="yarnel"), "did you mean 'yarnell'"),
    (dict(piers=Piers(2, 1.0, "squar")), "did you mean 'square'"),
    (dict(piers=Piers(2, 0.0)), "piers width"),
    (dict(piers=Piers(-1, 1.0)), "count"),
    (dict(contraction=3.0), "contraction"),
])
def test_bad_parameters_raise_one_line_errors(kw, words):
    with pytest.raises(HydraulicsError) as err:
        bridge(**kw)
    assert words in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("kw, words", [
    (dict(piers=Piers(5, 4.0)), "as wide as the opening"),
    (dict(piers=Piers(2, 2.0, stations=(5.0, 6.0))), "without overlapping"),
    (dict(opening_left=-5.0), "inside the face section"),
    (dict(low_chord=-1.0, high_chord=0.0), "not above the ground"),
    (dict(piers=Piers(), low_flow_method="yarnell"), "needs piers"),
    (dict(piers=Piers(2, 1.0, "twin_cylinder"), low_flow_method="momentum"), "drag coefficient"),
])
def test_bad_geometry_raises_one_line_errors(kw, words):
    with pytest.raises(HydraulicsError) as err:
        bridge_headwater([50.0], [2.0], bridge(**kw), rectangle(), rectangle())
    assert words in str(err.value) and "\n" not in str(err.value)


def test_missing_coefficient_is_flagged_under_highest():
    b = bridge(piers=Piers(2, 1.0, "twin_cylinder"))
    r = bridge_headwater([50.0], [2.0], b, rectangle(), rectangle())
    assert "no_drag_coefficient" in r.flags[0]
    assert np.isnan(r.detail["headwater_momentum_method"][0])
