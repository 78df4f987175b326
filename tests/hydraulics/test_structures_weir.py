"""Weirs against the weir equations of their published sources and independent brentq
inversions; the structures package stays pure."""
import ast
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

import geoflow.hydraulics.structures.common as common
from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.structures.common import villemonte_factor
from geoflow.hydraulics.structures.weir import Weir, free_discharge, weir_headwater

G = 9.81  # the check values below were computed with g = 9.81
IDEAL = (2 / 3) ** 1.5 * np.sqrt(G)  # critical depth over a level crest, no losses


def test_ideal_broad_crest_discharge_and_its_inverse():
    # Q = (2/3)^1.5 g^0.5 L H^1.5 (Bos 1989, ILRI Publ. 20; critical-depth theory),
    # L = 10, H = 0.5: Q = 6.0277 m3/s (computed check value)
    w = Weir(crest=10.0, crest_length=10.0, coefficient=IDEAL)
    assert free_discharge(0.5, w, G) == pytest.approx(6.0277, abs=1e-4)
    r = weir_headwater([6.0277], [9.0], w, g=G)
    assert r.headwater_wse[0] == pytest.approx(10.5, abs=1e-5)
    assert r.control[0] == "weir" and r.flags[0] == ()


def test_thin_plate_rehbock_and_kindsvater_carter():
    # b = 2, h = 0.3, P = 1: Rehbock Cd = 0.611 + 0.08 h/P = 0.635, Q = 0.6162 (from memory);
    # Kindsvater-Carter Ce = 0.602 + 0.075 h/P = 0.6245, Q = 0.6088 m3/s (USBR Water
    # Measurement Manual ch. 7 eqs 7-1/7-2; kh = 0.001 m source found, Ce, kb from memory)
    rehbock = Weir(5.0, 2.0, "sharp_crested", "rehbock", crest_height=1.0)
    kc = Weir(5.0, 2.0, "sharp_crested", "kindsvater_carter", crest_height=1.0)
    assert free_discharge(0.3, rehbock, G) == pytest.approx(0.6162, abs=1e-4)
    assert free_discharge(0.3, kc, G) == pytest.approx(0.6088, abs=1e-4)
    # and the headwater inverts them
    for w, q in ((rehbock, 0.6162), (kc, 0.6088)):
        assert weir_headwater([q], [4.0], w, g=G).headwater_wse[0] == pytest.approx(5.3, abs=1e-4)


def test_villemonte_factors():
    # Villemonte (1947), n = 1.5: [1 - r^1.5]^0.385 (from memory; computed check values)
    factors = villemonte_factor([0.5, 0.8, 0.9])
    np.testing.assert_allclose(factors, [0.8454, 0.6163, 0.4770], atol=1e-4)
    assert villemonte_factor(0.0) == 1.0 and villemonte_factor(1.0) == 0.0


@pytest.mark.parametrize("kind, c", [("broad_crested", 1.70), ("sharp_crested", 1.84),
                                     ("broad_crested", 1.45)])
@pytest.mark.parametrize("q", [0.05, 2.0, 35.0, 400.0])
def test_free_weir_headwater_matches_hand_inversion(kind, c, q):
    # Q = C L H^1.5 inverted by hand: H = (Q / (C L))^(2/3); tailwater below the crest
    w = Weir(crest=20.0, crest_length=12.0, kind=kind, coefficient=c)
    h = (q / (c * 12.0)) ** (2 / 3)
    r = weir_headwater([q], [19.0], w)
    assert r.headwater_wse[0] - 20.0 == pytest.approx(h, rel=5e-3)
    assert r.headwater_wse[0] - 20.0 == pytest.approx(h, rel=1e-8)


def test_default_coefficients():
    # broad-crested 1.70 (critical depth over the crest), sharp-crested 1.84 (Francis, from memory)
    assert Weir(0.0, 1.0).rule == 1.70
    assert Weir(0.0, 1.0, "sharp_crested").rule == 1.84


@pytest.mark.parametrize("q, tw", [(3.0, 10.2), (3.0, 10.45), (20.0, 10.9), (0.5, 10.6)])
def test_submerged_headwater_matches_brentq_on_villemonte(q, tw):
    # Q = C L H1^1.5 [1 - (H2/H1)^1.5]^0.385 (Villemonte 1947) solved independently for H1
    w = Weir(crest=10.0, crest_length=8.0, coefficient=1.6)
    h2 = tw - 10.0
    ref = brentq(lambda h1: 1.6 * 8.0 * h1 ** 1.5 * (1 - (h2 / h1) ** 1.5) ** 0.385 - q,
                 h2 + 1e-12, 50.0, xtol=1e-13)
    r = weir_headwater([q], [tw], w)
    assert r.headwater_wse[0] - 10.0 == pytest.approx(ref, rel=1e-7)
    assert "submerged" in r.flags[0]
    assert ("drowned" in r.flags[0]) == (h2 / ref >= 0.9)


def test_approach_velocity_head_is_included():
    # Energy head H = h + Q^2 / (2 g A^2) over the crest with A = B (h + P) in a rectangular
    # approach channel; Q = C L H^1.5 (energy form). Reference: brentq on the water level.
    b, p, c, length, q = 6.0, 0.8, 1.7, 6.0, 9.0
    approach = build_table([0, 0, b, b], [5.0, 0.0, 0.0, 5.0], [0.03] * 3, [1] * 3)
    w = Weir(crest=p, crest_length=length, coefficient=c)
    big_h = (q / (c * length)) ** (2 / 3)
    h = brentq(lambda h: h + q * q / (2 * G * (b * (h + p)) ** 2) - big_h, 1e-9, big_h)
    r = weir_headwater([q], [0.0], w, approach=approach, g=G)
    assert r.headwater_wse[0] == pytest.approx(p + h, abs=1e-7)
    assert r.headwater_wse[0] < p + big_h
    assert r.detail["headwater_energy"][0] == pytest.approx(p + big_h, abs=1e-7)


def test_bos_coefficient_rule():
    # Bos (1989): Q = Cd (2/3)(2g/3)^0.5 b H^1.5, Cd = 0.93 + 0.10 H/L (from memory)
    w = Weir(0.0, 3.0, "broad_crested", "bos", crest_breadth=2.0)
    h = 0.6
    expected = (0.93 + 0.10 * h / 2.0) * (2 / 3) * np.sqrt(2 * G / 3) * 3.0 * h ** 1.5
    assert free_discharge(h, w, G) == pytest.approx(expected, rel=1e-12)
    assert weir_headwater([expected], [-1.0], w, g=G).headwater_wse[0] == pytest.approx(h, abs=1e-8)
    assert "coefficient_out_of_range" in weir_headwater([50.0], [-1.0], w).flags[0]


def test_headwater_monotone_from_free_to_submerged():
    # dense sweeps in Q (tailwater above the crest: drowned -> submerged -> nearly free) and in
    # the tailwater (free overfall -> submerged)
    w = Weir(crest=10.0, crest_length=8.0, coefficient=1.6)
    q = np.geomspace(0.01, 300, 3000)
    r = weir_headwater(q, np.full(q.size, 10.7), w)
    assert np.all(np.diff(r.headwater_wse) > 0)
    assert r.headwater_wse.min() > 10.7
    tw = np.linspace(8.0, 14.0, 3000)
    r = weir_headwater(np.full(tw.size, 12.0), tw, w)
    assert np.all(np.diff(r.headwater_wse) >= 0)
    assert np.all(r.headwater_wse[tw <= 10.0] == r.headwater_wse[0])  # free overfall


@settings(max_examples=60, deadline=None)
@given(q1=st.floats(1e-3, 500.0), q2=st.floats(1e-3, 500.0), tw=st.floats(-2.0, 3.0),
       kind=st.sampled_from(["broad_crested", "sharp_crested"]))
def test_headwater_never_falls_as_discharge_rises(q1, q2, tw, kind):
    w = Weir(crest=0.0, crest_length=5.0, kind=kind)
    lo, hi = sorted((q1, q2))
    hw = weir_headwater([lo, hi], [tw, tw], w).headwater_wse
    assert hw[0] <= hw[1] + 1e-12 and hw[0] >= max(tw, 0.0)


@pytest.mark.parametrize("kw, words", [
    (dict(kind="broad_crest"), "did you mean 'broad_crested'"),
    (dict(crest_length=-2.0), "crest_length"),
    (dict(coefficient=0.0), "coefficient"),
    (dict(kind="sharp_crested", coefficient="rehbok"), "did you mean 'rehbock'"),
    (dict(kind="sharp_crested", coefficient="rehbock"), "needs crest_height"),
    (dict(coefficient="bos"), "needs crest_breadth"),
    (dict(crest=float("nan")), "crest must be finite"),
])
def test_bad_parameters_raise_one_line_errors(kw, words):
    base = dict(crest=1.0, crest_length=3.0)
    base.update(kw)
    with pytest.raises(HydraulicsError) as err:
        Weir(**base)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_approach_with_a_coefficient_that_already_has_it_is_refused():
    approach = build_table([0, 0, 4, 4], [3.0, 0.0, 0.0, 3.0], [0.03] * 3, [1] * 3)
    w = Weir(1.0, 4.0, "sharp_crested", "rehbock", crest_height=1.0)
    with pytest.raises(HydraulicsError, match="already includes the approach velocity"):
        weir_headwater([1.0], [0.5], w, approach=approach)


def test_structures_package_is_pure():
    # the layering rule of the project: hydraulics/ imports numpy/scipy and geoflow only
    forbidden = {"rasterio", "geopandas", "shapely", "dask", "pyogrio", "pyproj", "fiona",
                 "osgeo", "matplotlib", "xarray", "pandas"}
    files = sorted(Path(common.__file__).parent.glob("*.py"))
    assert len(files) >= 9
    for path in files:
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
                assert node.func.id != "open", f"{path.name} opens a file"
            if isinstance(node, ast.ImportFrom):
                assert node.level == 0, path.name
                names = [node.module]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            else:
                continue
            for name in names:
                top = name.split(".")[0]
                assert top not in forbidden, f"{path.name} imports {name}"
                if top == "geoflow":
                    assert name in ("geoflow.errors", "geoflow.constants") or name.startswith("geoflow.hydraulics"), name
