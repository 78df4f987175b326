"""Mixed-regime profiles: hydraulic jump placement and control at a slope break.

Rectangle b = 10 m, Q = 20 m3/s, n = 0.02, one subdivision (alpha = beta = 1). References: the
Belanger sequent-depth equation y2/y1 = (sqrt(1 + 8 Fr1^2) - 1)/2 (Chow 1959, ch. 15, from
memory), Manning normal depth by scipy brentq, and the GVF ODE integrated with scipy solve_ivp.
"""
import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import Boundary, SolverOptions, solve_profile

B, Q, N, G = 10.0, 20.0, 0.02, 9.80665
DX = 10.0


def rect_normal_depth(s0):
    return brentq(lambda y: B * y * (B * y / (B + 2 * y)) ** (2 / 3) * np.sqrt(s0) / N - Q, 1e-3, 20)


def rect_ode(s0):
    def rhs(_, y):
        a, p = B * y[0], B + 2 * y[0]
        return [(s0 - (Q * N / (a * (a / p) ** (2 / 3))) ** 2) / (1 - Q * Q * B / (G * a ** 3))]
    return rhs


def slope_break_reach(s_up, s_dn, n_up=60, n_dn=80):
    x = np.arange(n_up + n_dn + 1) * DX
    x_break = n_up * DX
    zb = np.where(x <= x_break, -s_up * x, -s_up * x_break - s_dn * (x - x_break)) + 100.0
    tables = [build_table([0, 0, B, B], [z + 10, z, z, z + 10], [N] * 3, [1] * 3) for z in zb]
    return x, zb, tables, np.full((x.size - 1, 3), DX)


def test_jump_on_steep_reach_at_sequent_depth(engine):
    s1, s2 = 0.03, 0.0004
    y1, y2 = rect_normal_depth(s1), rect_normal_depth(s2)
    fr1 = Q / (B * y1) / np.sqrt(G * y1)
    sequent = y1 * (np.sqrt(1 + 8 * fr1 ** 2) - 1) / 2
    assert y2 > sequent  # tailwater drowns the jump up onto the steep reach (S1 curve)
    x, zb, tables, lengths = slope_break_reach(s1, s2)
    prof = solve_profile(tables, lengths, np.full(x.size, Q), downstream=Boundary.normal_depth(s2),
                         upstream=Boundary.normal_depth(s1),
                         options=SolverOptions(regime="mixed", contraction=0.0, expansion=0.0,
                                             engine=engine))
    jumps = [i for i, f in enumerate(prof.flags) if "jump_upstream" in f]
    assert len(jumps) == 1
    j = jumps[0]
    y = prof.wse - zb
    assert np.all(prof.regime[:j] == "supercritical") and np.all(prof.regime[j:] == "subcritical")
    np.testing.assert_allclose(y[:j], y1, atol=1e-3)
    # reference jump position: where the S1 curve from the break reaches the sequent depth
    x_break = 60 * DX

    def reach_sequent(_, yy):
        return yy[0] - sequent
    reach_sequent.terminal = True
    ode = solve_ivp(rect_ode(s1), (x_break, 0.0), [y2], events=reach_sequent, rtol=1e-10, atol=1e-12)
    x_jump = ode.t_events[0][0]
    assert x[j - 1] <= x_jump <= x[j]
    # the subcritical S1 depths from the jump to the break follow the ODE
    s1_curve = solve_ivp(rect_ode(s1), (x_break, x[j]), [y2], t_eval=x[j:61][::-1], rtol=1e-10,
                         atol=1e-12)
    np.testing.assert_allclose(y[j:61], s1_curve.y[0][::-1], atol=0.005)


def test_mild_to_steep_break_passes_through_critical(engine):
    s1, s2 = 0.0004, 0.03
    x, zb, tables, lengths = slope_break_reach(s1, s2, n_up=100, n_dn=60)
    prof = solve_profile(tables, lengths, np.full(x.size, Q), downstream=Boundary.normal_depth(s2),
                         options=SolverOptions(regime="mixed", contraction=0.0, expansion=0.0,
                                             engine=engine))
    y = prof.wse - zb
    yc = ((Q / B) ** 2 / G) ** (1 / 3)  # rectangle critical depth (Chow 1959, ch. 3, from memory)
    assert y[100] == pytest.approx(yc, abs=1e-3)
    assert prof.regime[100] == "critical" and "critical_fallback" in prof.flags[100]
    assert np.all(prof.regime[101:] == "supercritical")
    assert np.all(prof.regime[:100] == "subcritical")
    # M2 drawdown upstream of the break vs the GVF ODE started just above critical depth
    ode = solve_ivp(rect_ode(s1), (x[100], x[0]), [yc * 1.001], t_eval=x[:100][::-1], rtol=1e-10,
                    atol=1e-12)
    np.testing.assert_allclose(y[:90], ode.y[0][::-1][:90], atol=0.005)
    assert y[-1] == pytest.approx(rect_normal_depth(s2), abs=0.01)     # S2 tends to y_n downstream
    assert not any("jump_upstream" in f for f in prof.flags)
