"""Standard-step profiles against uniform flow, scipy solve_ivp, closed forms and Chow (1959)."""
import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq

from geoflow.hydraulics.boundaries import normal_wse
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import Boundary, SolverOptions, solve_events, solve_profile

FT = 0.3048
NO_EDDY = dict(contraction=0.0, expansion=0.0)


def trapezoid(b, z, h, n, zb):
    x = [0.0, z * h, z * h + b, 2 * z * h + b]
    return build_table(x, [zb + h, zb, zb, zb + h], [n] * 3, [1, 1, 1])


def prismatic(b, z, h, n, s0, x):
    """Sections at chainages x (upstream -> downstream) on a constant bed slope s0."""
    return [trapezoid(b, z, h, n, s0 * (x[-1] - xi)) for xi in x], np.repeat(np.diff(x)[:, None], 3, 1)


def trapezoid_ode(b, z, n, q, s0, g):
    """GVF equation dy/dx = (S0 - Sf)/(1 - Q^2 T/(g A^3)) (Chow 1959, ch. 9, from memory)."""
    def rhs(_, y):
        a, p, t = (b + z * y) * y, b + 2 * y * np.sqrt(1 + z * z), b + 2 * z * y
        sf = (q * n / (a * (a / p) ** (2 / 3))) ** 2
        return (s0 - sf) / (1 - q * q * t / (g * a ** 3))
    return rhs


def test_uniform_flow_stays_at_normal_depth(engine):
    # A prismatic channel at constant slope with a normal-depth boundary stays uniform (Chow 1959, ch. 9: uniform flow is a solution of the GVF equation)
    x = np.arange(0, 2001, 100.0)
    tables, lengths = prismatic(5.0, 2.0, 6.0, 0.03, 0.001, x)
    q = np.full(x.size, 20.0)
    prof = solve_profile(tables, lengths, q, downstream=Boundary.normal_depth(0.001),
                         options=SolverOptions(engine=engine))
    bed = np.array([t.thalweg for t in tables])
    yn = normal_wse(tables[0], 20.0, 0.001)[0] - bed[0]
    assert np.max(np.abs(prof.wse - bed - yn)) < 1e-3
    assert np.all(prof.regime == "subcritical")
    np.testing.assert_allclose(prof.friction_slope, 0.001, rtol=1e-3)


@pytest.mark.parametrize("kind", ["M1", "M2"])
def test_m_curves_vs_solve_ivp(kind, engine):
    # M1 (backwater) and M2 (drawdown) in a prismatic trapezoid vs scipy solve_ivp of the GVF ODE
    b, z, n, s0, q, g = 5.0, 2.0, 0.03, 0.001, 20.0, 9.80665
    x = np.arange(0, 3001, 25.0)
    tables, lengths = prismatic(b, z, 6.0, n, s0, x)
    yn = normal_wse(tables[-1], q, s0)[0]
    yc = brentq(lambda y: q * q * (b + 2 * z * y) / (g * ((b + z * y) * y) ** 3) - 1, 1e-3, 6)
    y_end = yn + 1.5 if kind == "M1" else yc + 0.5 * (yn - yc)
    prof = solve_profile(tables, lengths, np.full(x.size, q), downstream=Boundary.stage(y_end),
                         options=SolverOptions(engine=engine, **NO_EDDY))
    ode = solve_ivp(trapezoid_ode(b, z, n, q, s0, g), (x[-1], x[0]), [y_end], t_eval=x[::-1],
                    rtol=1e-10, atol=1e-12)
    bed = np.array([t.thalweg for t in tables])
    err = np.abs((prof.wse - bed) - ode.y[0][::-1])
    assert err.max() < 0.005


def test_horizontal_bed_h2_closed_form(engine):
    # Closed form of dx/dh for an H2 curve (Chow 1959, ch. 10, integrated here): horizontal wide rectangle, Manning, q = 2, n = 0.03: h goes 1 -> 2 m over
    # 1099.018 m (closed form, computed here). A 100 km wide rectangle makes R = h to 4e-5.
    b, q, n = 1.0e5, 2.0, 0.03
    x = np.linspace(0.0, 1099.018, 81)
    tables = [build_table([0, 0, b, b], [5, 0, 0, 5], [n] * 3, [1] * 3) for _ in x]
    lengths = np.repeat(np.diff(x)[:, None], 3, 1)
    prof = solve_profile(tables, lengths, np.full(x.size, q * b), downstream=Boundary.stage(1.0),
                         options=SolverOptions(g=9.81, engine=engine, **NO_EDDY))
    assert prof.wse[0] == pytest.approx(2.0, abs=2e-3)


def test_chow_example_10_1_backwater_length(engine):
    # Chow (1959) Ex. 10-1 channel (from memory): dam holds 5.00 ft; length to
    # 3.40 ft. Here alpha = 1 (one subdivision), so the reference is the exact integral of
    # dx/dy = (1 - Q^2 T/(g A^3)) / (S0 - Sf) with alpha = 1 (scipy quad), within 1%; the
    # alpha = 1.10 lengths computed for the four friction-slope rules (2367.8-2384.4 ft) are checked within 2%.
    b, z, n, s0, q, g = 20 * FT, 2.0, 0.025, 0.0016, 400 * FT ** 3, 32.2 * FT
    x = np.arange(0, 3000.1, 25.0) * FT
    tables, lengths = prismatic(b, z, 8 * FT, n, s0, x)
    prof = solve_profile(tables, lengths, np.full(x.size, q),
                         downstream=Boundary.stage(5.0 * FT), options=SolverOptions(g=g, engine=engine, **NO_EDDY))
    y = (prof.wse - np.array([t.thalweg for t in tables]))[::-1] / FT
    dist = (x[-1] - x[::-1]) / FT
    length = np.interp(-3.40, -y, dist)
    rhs = trapezoid_ode(b, z, n, q, s0, g)
    exact = quad(lambda yy: 1 / rhs(0, yy * FT), 3.40, 5.00)[0]
    assert length == pytest.approx(exact, rel=0.01)
    assert 0.0 < length / 2376.0 - 1.0 < 0.03


def _two_rectangles(b_up, b_dn, q, y_dn, opts, length=50.0):
    up = build_table([0, 0, b_up, b_up], [6, 0, 0, 6], [0.02] * 3, [1] * 3)
    dn = build_table([0, 0, b_dn, b_dn], [6, 0, 0, 6], [0.02] * 3, [1] * 3)
    return solve_profile([up, dn], [[length] * 3], [q, q],
                         downstream=Boundary.stage(y_dn), options=opts)


@pytest.mark.parametrize("b_up,b_dn", [(20.0, 10.0), (10.0, 20.0)])
def test_transition_loss_vs_hand_energy_balance(b_up, b_dn, engine):
    # Hand energy balance (USACE 1993 EM 1110-2-1416, from memory): y1 + V1^2/2g = y2 + V2^2/2g + L Sf_bar + C |dh_v|,
    # C = contraction (0.1) where the velocity head rises downstream, else expansion (0.3);
    # Sf_bar by average conveyance (Reed & Wolfkill 1976); rectangles A = b y, P = b + 2y.
    q, y2, g, ln = 30.0, 1.5, 9.80665, 50.0
    opts = SolverOptions(engine=engine)
    k = lambda b, y: b * y * (b * y / (b + 2 * y)) ** (2 / 3) / 0.02  # noqa: E731
    hv = lambda b, y: (q / (b * y)) ** 2 / (2 * g)  # noqa: E731

    def balance(y1):
        c = 0.1 if hv(b_dn, y2) > hv(b_up, y1) else 0.3
        sf = (2 * q / (k(b_up, y1) + k(b_dn, y2))) ** 2
        return y1 + hv(b_up, y1) - (y2 + hv(b_dn, y2) + ln * sf + c * abs(hv(b_dn, y2) - hv(b_up, y1)))

    ref = brentq(balance, 1.2, 5.0, xtol=1e-12)
    prof = _two_rectangles(b_up, b_dn, q, y2, opts)
    assert prof.wse[0] == pytest.approx(ref, abs=1e-5)
    assert abs(prof.energy_residual[0]) < 1e-3


@pytest.mark.parametrize("rule", ["arithmetic", "geometric", "harmonic"])
def test_friction_slope_rules_vs_hand_balance(rule, engine):
    # The four averaging rules (Reed & Wolfkill 1976), hand energy balance in a prismatic rectangle (no eddy loss)
    q, y2, g, ln, b = 12.0, 1.0, 9.80665, 200.0, 6.0
    sf = lambda y: (q * 0.02 / (b * y * (b * y / (b + 2 * y)) ** (2 / 3))) ** 2  # noqa: E731
    mean = {"arithmetic": lambda a, c: (a + c) / 2, "geometric": lambda a, c: np.sqrt(a * c),
            "harmonic": lambda a, c: 2 * a * c / (a + c)}[rule]
    e = lambda y: y + (q / (b * y)) ** 2 / (2 * g)  # noqa: E731
    ref = brentq(lambda y1: e(y1) - e(y2) - ln * mean(sf(y1), sf(y2)), 0.9, 3.0, xtol=1e-12)
    prof = _two_rectangles(b, b, q, y2, SolverOptions(friction_slope=rule, engine=engine, **NO_EDDY), ln)
    assert prof.wse[0] == pytest.approx(ref, abs=1e-5)


def test_solve_events_matches_single_solves(engine):
    # Vectorised events give the same profiles as one-by-one solves (internal consistency)
    x = np.arange(0, 1001, 50.0)
    tables, lengths = prismatic(5.0, 2.0, 6.0, 0.03, 0.001, x)
    qs = np.array([[5.0] * x.size, [20.0] * x.size, [60.0] * x.size])
    opts = SolverOptions(engine=engine)
    many = solve_events(tables, lengths, qs, downstream=Boundary.stage([2.0, 3.0, 4.0]), options=opts)
    for k, wse_end in enumerate([2.0, 3.0, 4.0]):
        one = solve_profile(tables, lengths, qs[k], downstream=Boundary.stage(wse_end), options=opts)
        np.testing.assert_allclose(many[k].wse, one.wse, atol=1e-9)


def test_flow_change_between_sections_vs_hand_balance(engine):
    # Discharge rises from 20 to 30 m3/s between two identical rectangles (b = 8 m, n = 0.02):
    # E1 = E2 + L ((Q1 + Q2)/(K1 + K2))^2 + C |dh_v| (Reed & Wolfkill 1976; USACE 1993), solved with brentq
    b, g, ln, q1, q2, y2 = 8.0, 9.80665, 150.0, 20.0, 30.0, 1.6
    k = lambda y: b * y * (b * y / (b + 2 * y)) ** (2 / 3) / 0.02  # noqa: E731
    hv = lambda q, y: (q / (b * y)) ** 2 / (2 * g)  # noqa: E731

    def balance(y1):
        c = 0.1 if hv(q2, y2) > hv(q1, y1) else 0.3
        return (y1 + hv(q1, y1) - y2 - hv(q2, y2) - ln * ((q1 + q2) / (k(y1) + k(y2))) ** 2
                - c * abs(hv(q2, y2) - hv(q1, y1)))

    ref = brentq(balance, 1.0, 5.0, xtol=1e-12)
    t = build_table([0, 0, b, b], [6, 0, 0, 6], [0.02] * 3, [1] * 3)
    prof = solve_profile([t, t], [[ln] * 3], [q1, q2], downstream=Boundary.stage(y2),
                         options=SolverOptions(engine=engine))
    assert prof.wse[0] == pytest.approx(ref, abs=1e-5)
    np.testing.assert_allclose(prof.discharge, [q1, q2])
