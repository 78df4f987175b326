"""Rating curves at every section, end to end on a prismatic trapezoidal valley.

The valley is a trapezoidal channel (b = 10 m, side slopes 2:1, 4 m deep) between floodplains, built
so that every break of the ground falls on a DEM cell centre (tests/valleys.make_compound_valley): the
DEM then holds the trapezoid exactly and the check measures the rating, not the DEM's rounding of the
channel toes (which costs about 1 % of depth at 0.7 m on a 1 m DEM with the toes between cell centres).

References:
- Normal depth of the trapezoid by Manning's equation (Chow 1959, Open-Channel Hydraulics, ch. 6),
  solved with scipy brentq (tests/valleys.py); with a normal-depth boundary at the bed slope every
  section of a prismatic reach is at normal depth for every discharge.
- Trapezoid b = 10 m, z = 2, n = 0.035, S = 0.001: Q = 9.5693 m3/s at y = 1 m and 32.8254 m3/s at
  y = 2 m (computed from Manning's equation, Chow 1959 ch. 6; the same values are checked in
  tests/test_nrange_references.py).
- Backwater length L = 0.7 y_n / S0 (Samuels 1989, Proc. ICE Part 2, 87:571, from memory): sections
  closer than L to the downstream boundary are flagged boundary_controlled.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from valleys import compound_config, make_compound_valley

from geoflow.batch import check, run
from geoflow.errors import ConfigError, GeoflowError
from geoflow.outputs import RATING_COLUMNS

Q = [5.0, 9.5693, 20.0, 32.8254, 50.0]


CLASSES = "[roughness.classes.channel]\nn = 0.035\n[roughness.classes.floodplain]\nn = 0.06\n"


def rating_valley(tmp_path, extra=""):
    v = make_compound_valley(tmp_path, channel_width=10.0, wall_height=4.0, wall_run=8.0, floodplain=20.0,
                             length=1200.0)
    cfg = compound_config(tmp_path, v, CLASSES, {"design": 20.0},
                          extra=f"[rating_curves]\ndischarges = {Q}\n{extra}")
    return v, cfg


def test_rating_depths_are_normal_depths_monotone_and_boundary_reach_flagged(tmp_path):
    v, cfg = rating_valley(tmp_path)
    res = run(cfg)
    assert not res.failed, res.reaches
    rating = pd.read_csv(tmp_path / "out" / "rating_curves.csv", keep_default_na=False, na_values=[""])
    assert list(rating.columns) == list(RATING_COLUMNS)
    sections = sorted(set(rating["section_id"]))
    assert len(rating) == len(sections) * len(Q)
    yn = {q: v.normal_depth(q, 0.035, 0.06) for q in Q}
    assert max(yn.values()) < 4.0                                     # in bank: the trapezoid alone
    assert yn[9.5693] == pytest.approx(1.0, abs=1e-4) and yn[32.8254] == pytest.approx(2.0, abs=1e-4)
    depth = rating["wse_m"] - v.bed_at(v.x0 + rating["chainage_m"])
    np.testing.assert_allclose(depth, rating["depth_m"], atol=2e-4)
    err = depth / rating["discharge_m3s"].map(yn) - 1
    print(f"rating: max depth error {np.max(np.abs(err)) * 100:.3f} %")
    assert np.all(np.abs(err) < 0.01)
    for _, rows in rating.groupby("section_id"):
        assert np.all(np.diff(rows.sort_values("discharge_m3s")["wse_m"]) > 0)
    assert not rating["flags"].fillna("").str.contains("not_rising").any()
    distance = v.length - rating["chainage_m"]
    length = 0.7 * rating["discharge_m3s"].map(yn) / v.slope
    np.testing.assert_allclose(rating["backwater_length_m"], length, rtol=0.01)
    clear = np.abs(distance / length - 1) > 0.02                       # away from the threshold itself
    flagged = rating["flags"].fillna("").str.contains("boundary_controlled")
    assert np.array_equal(flagged[clear], (distance < length)[clear])
    assert flagged.any() and (~flagged).any()


def test_a_fixed_stage_is_flagged_where_the_level_cannot_rise(tmp_path):
    v, cfg = rating_valley(tmp_path, extra='downstream = { type = "stage", wse = 43.0 }\n')
    res = run(cfg)
    assert not res.failed, res.reaches
    rating = pd.read_csv(tmp_path / "out" / "rating_curves.csv", keep_default_na=False, na_values=[""])
    last = rating[rating["section_id"] == rating["section_id"].max()].sort_values("discharge_m3s")
    assert np.allclose(last["wse_m"], 43.0)                          # the boundary holds the level
    assert last["flags"].iloc[1:].str.contains("not_rising").all()
    assert last["flags"].str.contains("boundary_controlled").all()
    first = rating[rating["section_id"] == 0].sort_values("discharge_m3s")
    assert np.all(np.diff(first["wse_m"]) > 0)                        # far upstream the section controls again


def test_rating_keys_are_checked(tmp_path):
    v, cfg = rating_valley(tmp_path)
    text = cfg.read_text()
    cfg.write_text(text.replace(f"discharges = {Q}", "discharges = [10.0, 5.0]"))
    with pytest.raises(ConfigError, match=r"\[rating_curves\] discharges.*increase"):
        check(cfg)
    cfg.write_text(text.replace(f"discharges = {Q}", f'discharges = {Q}\ndownstream = {{ type = "junction", '
                                                     'reach = "c1" }'))
    with pytest.raises(ConfigError, match=r"\[rating_curves\] downstream.*own boundary"):
        check(cfg)
    cfg.write_text(text.replace(f"discharges = {Q}", f'discharges = {Q}\ndownstream = {{ type = "stage", '
                                                     'wse = 20.0 }'))
    with pytest.raises(GeoflowError, match=r"\[rating_curves\] downstream.*below the lowest ground"):
        check(cfg)
