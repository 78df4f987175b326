"""Critical WSE (minimum specific energy) against closed forms, scipy and Chow (1959)."""
import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.critical import critical_wse, specific_energy
from geoflow.hydraulics.geometry import build_table

FT = 0.3048


def trapezoid(b, z, h, n=0.025):
    x = [0.0, z * h, z * h + b, 2 * z * h + b]
    return build_table(x, [h, 0.0, 0.0, h], [n] * 3, [1, 1, 1])


def test_rectangle_matches_closed_form():
    # y_c = (q^2/g)^(1/3) for a rectangle (Chow 1959, ch. 3, from memory)
    t = build_table([0, 0, 5, 5], [4, 0, 0, 4], [0.03] * 3, [1] * 3)
    q = np.array([1.0, 10.0, 40.0])
    r = critical_wse(t, q, g=9.81)
    np.testing.assert_allclose(r.wse, ((q / 5) ** 2 / 9.81) ** (1 / 3), rtol=1e-6)
    assert r.minima.tolist() == [1, 1, 1]


def test_trapezoid_matches_scipy_froude_condition():
    # Q^2 T / (g A^3) = 1 (Chow 1959, ch. 3, from memory), solved independently with brentq
    b, z, q, g = 4.0, 1.5, 25.0, 9.80665
    t = trapezoid(b, z, 6.0)
    ref = brentq(lambda y: q * q * (b + 2 * z * y) / (g * ((b + z * y) * y) ** 3) - 1, 1e-3, 6)
    assert critical_wse(t, q).wse[0] == pytest.approx(ref, abs=1e-6)


def test_chow_channel_critical_depth():
    # Chow (1959) channel, b = 20 ft, z = 2, Q = 400 cfs, g = 32.2: y_c = 2.15 ft (from memory);
    # 2.1477 ft computed from Q^2 T/(g A^3) = 1 (Chow 1959, ch. 3). Units converted here, not in the code.
    t = trapezoid(20 * FT, 2.0, 10 * FT)
    yc = critical_wse(t, 400 * FT ** 3, g=32.2 * FT).wse[0] / FT
    assert yc == pytest.approx(2.1477, abs=5e-4)


@pytest.mark.parametrize("q", [60.0, 80.0])
def test_compound_section_with_two_minima_reports_lowest_energy(q):
    # Deep narrow channel + wide shallow floodplains: E(h) has two local minima for this flow
    # (compound-channel behaviour, Chow 1959 ch. 3, from memory). Reference: a dense brute-force
    # scan of E plus scipy bounded minimisation around each local minimum. At 60 m3/s the
    # in-channel minimum is lower, at 80 m3/s the one above the floodplains.
    x = [0, 200, 200.5, 201, 201, 207, 207, 207.5, 208, 408]
    z = [3.3, 3.0, 3.0, 3.0, 0, 0, 3.0, 3.0, 3.0, 3.3]
    n = [0.035, 0.035, 0.035, 0.03, 0.03, 0.03, 0.035, 0.035, 0.035]
    t = build_table(x, z, n, [0, 0, 0, 1, 1, 1, 2, 2, 2])
    levels = np.linspace(0.05, 6.0, 20001)
    e = specific_energy(t, levels, q)
    interior = np.flatnonzero((e[1:-1] < e[:-2]) & (e[1:-1] < e[2:])) + 1
    assert interior.size == 2
    refined = [minimize_scalar(lambda h: specific_energy(t, h, q)[0], method="bounded",
                               bounds=(levels[i - 1], levels[i + 1]), options={"xatol": 1e-9})
               for i in interior]
    best = min(refined, key=lambda r: r.fun)
    r = critical_wse(t, q)
    assert r.minima[0] == 2
    assert r.wse[0] == pytest.approx(best.x, abs=1e-5)
    assert r.specific_energy[0] == pytest.approx(best.fun, abs=1e-8)


def test_bad_discharge_raises():
    with pytest.raises(HydraulicsError, match="discharge"):
        critical_wse(trapezoid(2, 1, 3), [-1.0])
