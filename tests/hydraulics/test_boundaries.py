"""Normal depth and boundary conditions against Manning's equation, Chow (1959) and np.interp."""
import numpy as np
import pytest
from scipy.optimize import brentq

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.boundaries import Boundary, normal_wse
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import SolverOptions, solve_profile

FT = 0.3048


def trapezoid(b, z, h, n, zb=0.0, parts=(1, 1, 1)):
    x = [0.0, z * h, z * h + b, 2 * z * h + b]
    return build_table(x, [zb + h, zb, zb, zb + h], [n] * 3, list(parts))


def test_normal_depth_trapezoid_vs_manning_brentq():
    # Manning Q = (1/n) A R^(2/3) S^(1/2) (Chow 1959, ch. 5, from memory), solved with scipy brentq
    b, z, n, s = 5.0, 2.0, 0.03, 0.0008
    t = trapezoid(b, z, 8.0, n)
    q = np.array([3.0, 30.0, 150.0])

    def manning(y, qq):
        a, p = (b + z * y) * y, b + 2 * y * np.sqrt(1 + z * z)
        return a * (a / p) ** (2 / 3) * np.sqrt(s) / n - qq

    ref = [brentq(manning, 1e-4, 8.0, args=(qq,), xtol=1e-12) for qq in q]
    np.testing.assert_allclose(normal_wse(t, q, s), ref, atol=1e-7)


def test_chow_channel_normal_depth():
    # Chow (1959) Ex. 6-2 channel: y_n = 3.36 ft (from memory), 3.3610 ft computed with brentq
    # (k = 1.486). SI Manning here; the k = 1.486 rounding moves y_n by < 0.001 ft.
    t = trapezoid(20 * FT, 2.0, 10 * FT, 0.025)
    yn = normal_wse(t, 400 * FT ** 3, 0.0016)[0] / FT
    assert yn == pytest.approx(3.3610, abs=2e-3)


def test_rectangle_normal_depth_matches_manning_by_hand():
    # Manning's equation Q = (1/n) A R^(2/3) S^(1/2) (Chow 1959, ch. 6) evaluated by hand for rectangles,
    # S = 0.0025, n = 0.015: b = 6 m, y = 1.6 m -> 32.921 m3/s; b = 5 m, y = 0.8 m -> 9.5488 m3/s (computed,
    # rounded here to 32.91 and 9.548, hence the 1e-3 tolerance)
    for b, y, q in ((6.0, 1.6, 32.91), (5.0, 0.8, 9.548)):
        t = build_table([0, 0, b, b], [4, 0, 0, 4], [0.015] * 3, [1] * 3)
        assert normal_wse(t, q, 0.0025)[0] == pytest.approx(y, rel=1e-3)


def test_rating_boundary_sets_interpolated_stage(engine):
    # The downstream WSE must equal linear interpolation of the rating table (np.interp reference)
    tables = [trapezoid(5, 2, 8, 0.03, zb=0.1 * (3 - i)) for i in range(4)]
    rq, rh = np.array([5.0, 20.0, 60.0]), np.array([1.4, 2.2, 3.5])
    prof = solve_profile(tables, np.full((3, 3), 100.0), np.full(4, 33.0),
                         downstream=Boundary.rating(discharge=rq, stage=rh),
                         options=SolverOptions(engine=engine))
    assert prof.wse[-1] == pytest.approx(np.interp(33.0, rq, rh), abs=1e-12)
    assert prof.flags[-1] == ("boundary",)
    with pytest.raises(HydraulicsError, match="outside the table"):
        solve_profile(tables, np.full((3, 3), 100.0), np.full(4, 80.0),
                      downstream=Boundary.rating(discharge=rq, stage=rh))


def test_boundary_and_option_errors():
    with pytest.raises(HydraulicsError, match="slope"):
        Boundary.normal_depth(0.0)
    with pytest.raises(HydraulicsError, match="increase"):
        Boundary.rating([3, 2], [1, 2])
    with pytest.raises(HydraulicsError, match="did you mean 'mixed'"):
        SolverOptions(regime="mixd")
    with pytest.raises(HydraulicsError, match="did you mean 'compiled'"):
        SolverOptions(engine="compile")
    t = trapezoid(5, 2, 8, 0.03)
    with pytest.raises(HydraulicsError, match="below the thalweg"):
        solve_profile([t, t], [[10, 10, 10]], [5.0, 5.0], downstream=Boundary.stage(-1.0))


def test_stage_below_critical_is_flagged_critical_fallback(engine):
    # A subcritical run cannot start below critical WSE: the boundary is raised to critical
    t = trapezoid(5, 2, 8, 0.03)
    prof = solve_profile([t, t], [[10, 10, 10]], [30.0, 30.0], downstream=Boundary.stage(0.2),
                         options=SolverOptions(engine=engine))
    assert prof.wse[-1] == pytest.approx(prof.critical_wse[-1])
    assert "critical_fallback" in prof.flags[-1]


def test_normal_depth_with_depth_dependent_n():
    # n falls linearly from 0.05 at 0.3 m depth to 0.03 at 2 m (a stage-dependent roughness law);
    # in a rectangle every segment sees the flow depth, so Manning with n(y) solved by brentq is
    # the reference (Chow 1959, ch. 5, from memory).
    b, s, q = 6.0, 0.001, 12.0
    law = ([0.3, 2.0], np.array([[0.05] * 3, [0.03] * 3]))
    t = build_table([0, 0, b, b], [5, 0, 0, 5], [0.04] * 3, [1] * 3, n_depth=law)

    def manning(y):
        n = np.interp(y, law[0], [0.05, 0.03])
        a, p = b * y, b + 2 * y
        return a * (a / p) ** (2 / 3) * np.sqrt(s) / n - q

    assert normal_wse(t, q, s)[0] == pytest.approx(brentq(manning, 0.01, 5.0, xtol=1e-12), abs=1e-7)
