"""Manufactured steady solutions in the manner of MacDonald et al. (1997), energy form.

MacDonald, Baines, Nichols & Samuels (1997), J. Hydraul. Eng. 123(11):1041-1045: choose the depth
h(x), derive the bed so that h(x) is exact. Energy form (MacDonald et al. 1997):
    z_b(x) = z_b(0) - [E(x) - E(0)] - int_0^x Sf(h(s)) ds,  E = h + Q^2/(2 g A^2), Sf = Q^2/K^2
in a prismatic trapezoid (one subdivision, alpha = 1). The integral is taken with scipy quad.
A standard-step run then differs from h(x) only through the discrete friction term: O(dx^2).
"""
import numpy as np
import pytest
from scipy.integrate import quad

from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import Boundary, SolverOptions, solve_profile

B, Z, N, Q, G, LENGTH = 5.0, 1.0, 0.03, 10.0, 9.80665, 1000.0


def area(h):
    return (B + Z * h) * h


def sf(h):
    a, p = area(h), B + 2 * h * np.sqrt(1 + Z * Z)
    return (Q * N / (a * (a / p) ** (2 / 3))) ** 2


def depth_sub(x):
    return 1.5 + 0.3 * np.exp(-((x - 500.0) / 150.0) ** 2)


def depth_super(x):
    return 0.5 + 0.1 * np.exp(-((x - 500.0) / 150.0) ** 2)


def bed(x, h):
    e = h(x) + Q * Q / (2 * G * area(h(x)) ** 2)
    pieces = [quad(lambda s: sf(h(s)), a, b, epsabs=1e-13, epsrel=1e-12)[0]
              for a, b in zip(x[:-1], x[1:])]
    friction = np.concatenate([[0.0], np.cumsum(pieces)])
    return 100.0 - (e - e[0]) - friction


def run(dx, h, regime, engine):
    x = np.arange(0.0, LENGTH + dx / 2, dx)
    zb = bed(x, h)
    tables = [build_table([0, 5 * Z, 5 * Z + B, 10 * Z + B], [z + 5, z, z, z + 5],
                          [N] * 3, [1] * 3) for z in zb]
    opts = SolverOptions(regime=regime, contraction=0.0, expansion=0.0, tolerance=1e-7, engine=engine)
    lengths = np.repeat(np.diff(x)[:, None], 3, 1)
    if regime == "subcritical":
        prof = solve_profile(tables, lengths, np.full(x.size, Q),
                             downstream=Boundary.stage(zb[-1] + h(x[-1])), options=opts)
    else:
        prof = solve_profile(tables, lengths, np.full(x.size, Q),
                             upstream=Boundary.stage(zb[0] + h(x[0])), options=opts)
    return prof, np.max(np.abs(prof.wse - zb - h(x)))


@pytest.mark.parametrize("h,regime,froude_ok", [
    (depth_sub, "subcritical", lambda fr: fr.max() < 0.8),
    (depth_super, "supercritical", lambda fr: fr.min() > 1.2)])
def test_manufactured_profile_recovered_and_second_order(h, regime, froude_ok, engine):
    prof10, err10 = run(10.0, h, regime, engine)
    assert froude_ok(prof10.froude)
    assert np.all(prof10.regime == regime)
    assert err10 < 0.01
    _, err20 = run(20.0, h, regime, engine)
    _, err40 = run(40.0, h, regime, engine)
    # second order: the error ratio approaches 4 when the spacing halves (MacDonald et al. 1997)
    assert 3.8 < err20 / err10 < 4.2
    assert 3.8 < err40 / err20 < 4.2
