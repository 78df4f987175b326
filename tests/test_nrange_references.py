"""Unit checks of roughness cases, n calibration and ratings against published forms and computed values.

Sections are built directly with geoflow.hydraulics.build_table (no files), so these check the method
against closed forms:
- wide channel at uniform flow, y = (n q / S^0.5)^0.6 (Manning's equation with R = y; Chow 1959,
  Open-Channel Hydraulics, ch. 6), hence d ln y / d ln n = 0.6: q = 2 m2/s, S = 0.001,
  n = 0.030 / 0.035 / 0.040 give y = 1.4686 / 1.6109 / 1.7452 m (computed from that formula);
- compound section: main channel 10 m wide with 2 m vertical walls, two 50 m floodplains (vertical valley
  walls), S = 0.001, subdivided conveyance with vertical interfaces carrying no perimeter (Chow 1959
  ch. 6): with n_channel = 0.035 and n_floodplain = 0.080, Q = 20 / 150 / 400 m3/s give normal depths
  y = 1.8243 / 3.6364 / 5.3381 m (computed with scipy brentq on that formula). Least squares
  (scipy.optimize.least_squares) from (0.05, 0.05) on levels at several flows recovers (0.035, 0.080);
  with the Q = 150 level only the pairs on a ridge fit equally well, e.g. (0.04517, 0.06902) (computed
  for the same section), so the fit cannot be determined;
- trapezoid b = 10 m, z = 2, n = 0.035, S = 0.001: Q(1 m) = 9.5693, Q(2 m) = 32.8254 m3/s (computed from
  Manning's equation, Chow 1959 ch. 6);
- backwater length L = 0.7 y_n / S0 (Samuels 1989, Proc. ICE Part 2, 87:571, from memory).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from scipy.optimize import brentq

from geoflow.batch.ratings import backwater_length, mean_bed_slope
from geoflow.config import RoughnessClass
from geoflow.hydraulics import Boundary, build_table
from geoflow.roughness import case_factors, classes_without_range, combine, group_factors, group_members
from geoflow.roughness.cases import scaled_classes, scaled_section
from geoflow.roughness.fit import fit_multipliers

S = 0.001


def normal_depth(table, q, slope=S):
    return Boundary.normal_depth(slope).wse_at(table, np.atleast_1d(q), None) - table.thalweg


def test_wide_channel_depths_of_the_three_cases_and_their_exponent():
    """y = (n q / sqrt(S))^0.6 on a 20 km wide rectangle (R = y within 0.02 %), n from case_factors."""
    classes = {"bed": RoughnessClass(n=0.035, n_low=0.030, n_high=0.040)}
    width, q = 20000.0, 2.0
    expected = {"low": 1.4686, "normal": 1.6109, "high": 1.7452}
    y = {}
    for case in ("low", "normal", "high"):
        n = 0.035 * case_factors(classes, case).get("bed", 1.0)
        assert (n * q / np.sqrt(S)) ** 0.6 == pytest.approx(expected[case], abs=5e-5)       # the formula
        table = build_table([0.0, 0.0, width, width], [5.0, 0.0, 0.0, 5.0], [n] * 3, [1, 1, 1])
        y[case] = float(normal_depth(table, q * width)[0])
        assert y[case] == pytest.approx(expected[case], rel=3e-4), case
    slope = np.log(y["high"] / y["low"]) / np.log(0.040 / 0.030)
    assert slope == pytest.approx(0.6, abs=1e-3)


def compound_table(n_channel, n_floodplain):
    """The textbook compound section with vertical walls (equal stations make vertical segments)."""
    x = [-55.0, -55.0, -5.0, -5.0, 5.0, 5.0, 55.0, 55.0]
    z = [12.0, 2.0, 2.0, 0.0, 0.0, 2.0, 2.0, 12.0]
    part = [0, 0, 1, 1, 1, 2, 2]
    n = [n_floodplain, n_floodplain, n_channel, n_channel, n_channel, n_floodplain, n_floodplain]
    return build_table(x, z, n, part)


def test_compound_section_normal_depths():
    """Check values 1.8243 / 3.6364 / 5.3381 m, and an independent brentq on the subdivided form."""
    y = normal_depth(compound_table(0.035, 0.080), [20.0, 150.0, 400.0])
    np.testing.assert_allclose(y, [1.8243, 3.6364, 5.3381], atol=1e-4)

    def q_of(d):        # subdivided conveyance written out: rectangle channel + two floodplains with outer walls
        ac, pc = 10 * d, 10 + 2 * min(d, 2.0)
        k = ac * (ac / pc) ** (2 / 3) / 0.035
        if d > 2:
            af, pf = 50 * (d - 2), 50 + (d - 2)
            k += 2 * af * (af / pf) ** (2 / 3) / 0.080
        return k * np.sqrt(S)
    for yy, q in zip(y, (20.0, 150.0, 400.0)):
        assert yy == pytest.approx(brentq(lambda d, q=q: q_of(d) - q, 0.01, 10.0, xtol=1e-12), abs=1e-6)


def residual_for(flows):
    """Levels of the compound section at ``flows`` for multipliers of (0.05, 0.05), minus the truth's."""
    observed = normal_depth(compound_table(0.035, 0.080), flows)

    def residual(log_m):
        m = np.exp(log_m)
        return normal_depth(compound_table(0.05 * m[0], 0.05 * m[1]), flows) - observed
    return residual


def test_least_squares_recovers_channel_and_floodplain_n_from_two_flows():
    for flows in ([20.0, 150.0], [20.0, 150.0, 400.0]):
        fit = fit_multipliers(residual_for(np.array(flows)), 2, bounds=(0.3, 3.0))
        n = 0.05 * fit.multipliers
        assert n == pytest.approx([0.035, 0.080], rel=2e-3), (flows, n)
        assert fit.well_determined and fit.rmse < 1e-3 and not fit.at_bound.any()


def test_one_flow_fits_a_point_of_the_ridge_and_is_not_determined():
    flows = np.array([150.0])
    fit = fit_multipliers(residual_for(flows), 2, bounds=(0.3, 3.0))
    assert fit.rmse < 1e-3                                     # the level is matched ...
    assert not fit.well_determined and fit.reasons             # ... but the pair is not determined
    n = 0.05 * fit.multipliers
    assert not np.allclose(n, [0.035, 0.080], rtol=0.03)       # it is another point of the ridge
    ridge = normal_depth(compound_table(0.04517, 0.06902), flows)[0]
    assert ridge == pytest.approx(3.6364, abs=1e-3)            # the ridge point of the check values


def test_in_bank_levels_cannot_see_the_floodplain():
    fit = fit_multipliers(residual_for(np.array([10.0, 20.0])), 2, bounds=(0.3, 3.0))
    assert not fit.well_determined
    assert np.all(np.abs(fit.jacobian[:, 1]) < 1e-9)            # the floodplain n changes no level
    assert 0.05 * fit.multipliers[0] == pytest.approx(0.035, rel=3e-3)
    assert fit.multipliers[1] == pytest.approx(1.0, abs=1e-6)   # left at the table's n


def test_a_multiplier_that_needs_to_leave_the_bounds_stops_there():
    fit = fit_multipliers(residual_for(np.array([20.0, 150.0])), 2, bounds=(0.9, 1.1))
    assert fit.at_bound.all()
    np.testing.assert_allclose(fit.multipliers, [0.9, 1.1], rtol=1e-6)


def test_trapezoid_rating_check_values():
    """b = 10, z = 2, n = 0.035, S = 0.001: normal depth 1 m at 9.5693 m3/s and 2 m at 32.8254 m3/s."""
    x = [-30.0, -5.0 - 2 * 4.0, -5.0, 5.0, 5.0 + 2 * 4.0, 30.0]
    z = [4.0, 4.0, 0.0, 0.0, 4.0, 4.0]
    table = build_table(x, z, [0.035] * 5, [1] * 5)
    np.testing.assert_allclose(normal_depth(table, [9.5693, 32.8254]), [1.0, 2.0], atol=1e-4)


def test_backwater_length_and_mean_bed_slope():
    """L = 0.7 y_n / S0 (Samuels 1989, from memory); S0 from a least-squares line through the bed."""
    np.testing.assert_allclose(backwater_length([1.0, 2.0], 0.001), [700.0, 1400.0])
    assert np.all(np.isinf(backwater_length([1.0], 0.0)))
    ch = np.linspace(0.0, 1000.0, 21)
    bed = 50.0 - 0.002 * ch + 0.05 * np.sin(ch)                 # noisy bed falling 2 m per km
    assert mean_bed_slope(ch, bed) == pytest.approx(np.polyfit(ch, -bed, 1)[0])
    assert mean_bed_slope(ch, bed) == pytest.approx(0.002, rel=0.05)


def test_case_factors_groups_and_scaling_rules():
    classes = {"channel": RoughnessClass(n=0.04, n_low=0.032, n_high=0.05, n_by_depth=((0.5, 0.06), (2.0, 0.04))),
               "grass": RoughnessClass(n=0.035, n_low=0.03), "woods": RoughnessClass(n=0.1)}
    assert case_factors(classes, "low") == pytest.approx({"channel": 0.8, "grass": 0.03 / 0.035})
    assert case_factors(classes, "normal") == {}
    assert classes_without_range(classes, "high") == ["grass", "woods"]
    scaled = scaled_classes(classes, {"channel": 0.8})
    assert scaled["channel"].n == pytest.approx(0.032)
    assert [n for _, n in scaled["channel"].n_by_depth] == pytest.approx([0.048, 0.032])
    assert scaled["woods"] is classes["woods"]
    members = group_members(["channel", "floodplain", ["woods"]], "channel", ["channel", "grass", "woods", ""])
    assert members == {"channel": ("channel",), "floodplain": ("", "grass"), "woods": ("woods",)}
    factors = combine(group_factors(members, {"channel": 0.5, "floodplain": 2.0}), {"channel": 0.8, "woods": 1.2})
    assert factors == pytest.approx({"channel": 0.4, "": 2.0, "grass": 2.0, "woods": 1.2})
    out = scaled_section(Segments(np.array([0.035, 0.04, 0.1]), np.array(["grass", "channel", "woods"])), factors)
    np.testing.assert_allclose(out.n, [0.07, 0.016, 0.12])


@dataclass(frozen=True)
class Segments:
    """The two fields of a section that roughness scaling reads."""

    n: np.ndarray
    landcover: np.ndarray
