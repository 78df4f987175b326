"""Calibration of Manning's n to observed water levels, end to end on a compound valley.

Reference: the observed levels are the analytic normal depth of the valley for the true n (channel
0.035, floodplain 0.080, the truth of the textbook compound-section example used in the unit checks),
with subdivided conveyance and vertical interfaces at the channel edges (Chow 1959, Open-Channel
Hydraulics, ch. 6; areas and perimeters with shapely, depth with scipy brentq in tests/valleys.py),
placed on the analytic bed. The run starts from deliberately wrong n (0.05 both) and must recover the
true n. Identifiability: channel and floodplain n trade off at a single flow, and in-bank marks carry
no information on the floodplain n (common practice of n calibration, no source beyond the ridge shown
in the unit checks).
"""
from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import Point
from valleys import CRS, compound_config, make_compound_valley

from geoflow.batch import check, run
from geoflow.cli import main
from geoflow.errors import ConfigError, InputDataError

TRUE = {"channel": 0.035, "floodplain": 0.080}
START = """[roughness.classes.channel]
n = 0.05
[roughness.classes.floodplain]
n = 0.05
"""
CHAINAGES = (75.0, 180.0, 310.0, 455.0)      # between sections (spacing 50 m): levels are interpolated


def write_marks(folder, v, flows: dict, chainages=CHAINAGES, offsets=None, extra=()):
    """marks.gpkg: for each event {name: Q}, marks at ``chainages`` on the analytic level of the true n."""
    rng = np.random.default_rng(7)
    pts, ev, wse = [], [], []
    for name, q in flows.items():
        y = v.normal_depth(q, TRUE["channel"], TRUE["floodplain"])
        for ch in chainages:
            off = rng.uniform(-40.0, 40.0) if offsets is None else offsets
            pts.append(Point(v.x0 + ch, 4200000.0 + v.half_width + off))
            ev.append(name)
            wse.append(float(v.bed_at(v.x0 + ch) + y))
    for p, e, w in extra:
        pts.append(p)
        ev.append(e)
        wse.append(w)
    gpd.GeoDataFrame({"event": ev, "wse_m": wse}, geometry=pts, crs=CRS).to_file(folder / "marks.gpkg",
                                                                                driver="GPKG")


def setup(folder, flows, marks=None, extra=""):
    v = make_compound_valley(folder)
    write_marks(folder, v, marks or flows)
    cal = '[calibration]\nobservations = "marks.gpkg"\nadjust = ["channel", "floodplain"]\nbounds = [0.5, 2.0]\n'
    return v, compound_config(folder, v, START, flows, extra=cal + extra)


def test_calibration_recovers_true_n_from_marks_at_two_flows(tmp_path):
    flows = {"small": 20.0, "big": 150.0}
    v, cfg = setup(tmp_path, flows, extra="[rating_curves]\ndischarges = [20.0, 150.0, 400.0]\n")
    assert v.normal_depth(20.0, **{"n_channel": 0.035, "n_floodplain": 0.08}) < 2.0     # in bank
    assert v.normal_depth(150.0, 0.035, 0.08) > 2.5                                      # out of bank
    res = run(cfg)
    assert not res.failed, res.reaches
    out = tmp_path / "out"
    summary = json.loads((out / "manifest.json").read_text())["calibration"]
    cal = summary["reaches"]["c1"]
    assert summary["marks"] == 8 and summary["well_determined"] and summary["rmse_m"] == pytest.approx(cal["rmse_m"])
    assert summary["multipliers"] == {"c1": cal["multipliers"]} and not summary["bound_hit"]
    n = cal["calibrated_n"]
    print(f"calibrated n {n}, rmse {cal['rmse_m'] * 1000:.2f} mm, {cal['solves']} solves")
    for cls, true in TRUE.items():
        assert abs(n[cls] / true - 1) < 0.03, (cls, n[cls], true)
    assert cal["rmse_m"] < 0.01 and cal["well_determined"] and not cal["bound_hit"] and cal["marks"] == 8
    assert cal["multipliers"]["channel"] == pytest.approx(n["channel"] / 0.05)
    table = pd.read_csv(out / "calibration.csv")
    assert list(table.columns[:1]) == ["reach_id"] and {"event", "chainage_m", "observed_wse_m", "computed_wse_m",
                                                         "residual_m"} <= set(table.columns)
    assert len(table) == 8 and np.all(np.abs(table["residual_m"]) < 0.01)
    np.testing.assert_allclose(table["computed_wse_m"] - table["observed_wse_m"], table["residual_m"], atol=2e-4)
    # every output uses the calibrated n: the profile and the ratings sit at the true normal depth
    prof = res.profile[res.profile["event"] == "big"]
    depth = prof["wse_m"] - v.bed_at(v.x0 + prof["chainage_m"])
    assert np.all(np.abs(depth / v.normal_depth(150.0, 0.035, 0.08) - 1) < 0.01)
    rating = pd.read_csv(out / "rating_curves.csv")
    at400 = rating[rating["discharge_m3s"] == 400.0]
    assert np.all(np.abs(at400["depth_m"] / v.normal_depth(400.0, 0.035, 0.08) - 1) < 0.01)
    assert "calibrated to 8 mark(s)" in (out / "run.log").read_text()


def test_marks_at_one_flow_fit_the_levels_but_are_reported_not_determined(tmp_path):
    v, cfg = setup(tmp_path, {"small": 20.0, "big": 150.0}, marks={"big": 150.0})
    res = run(cfg)
    assert not res.failed
    out = tmp_path / "out"
    cal = json.loads((out / "manifest.json").read_text())["calibration"]["reaches"]["c1"]
    assert not cal["well_determined"] and cal["rmse_m"] < 0.01
    assert any("one flow" in r for r in cal["reasons"]), cal["reasons"]
    assert any("not well determined" in w for w in res.reaches["c1"]["warnings"])
    assert "NOT well determined" in (out / "run.log").read_text()


def test_in_bank_marks_leave_the_floodplain_n_alone_and_say_so(tmp_path):
    v, cfg = setup(tmp_path, {"low": 10.0, "small": 20.0})
    res = run(cfg)
    assert not res.failed
    cal = json.loads((tmp_path / "out" / "manifest.json").read_text())["calibration"]["reaches"]["c1"]
    assert not cal["well_determined"]
    assert any("floodplain" in r and "in bank" in r for r in cal["reasons"]), cal["reasons"]
    assert cal["multipliers"]["floodplain"] == pytest.approx(1.0, abs=1e-3)       # kept at the table's n
    assert abs(cal["calibrated_n"]["channel"] / 0.035 - 1) < 0.03


def test_marks_that_match_no_reach_are_refused_at_check_naming_them(tmp_path):
    v, cfg = setup(tmp_path, {"big": 150.0})
    far = Point(v.x0 + 200.0, 4200000.0 + v.half_width + 500.0)
    write_marks(tmp_path, v, {"big": 150.0}, extra=[(far, "big", 45.0)])
    with pytest.raises(InputDataError, match=r"marks.gpkg.*farther from every centreline.*feature 4"):
        check(cfg)
    assert main(["check", str(cfg)]) == 2
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("mark,match", [
    ((300.0, "flood2"), r"events that are not in \[\[events\]\].*feature 4.*'flood2'"),
    ((-15.0, "big"), r"beyond the first or last cross-section.*feature 4"),
])
def test_marks_with_unknown_event_or_off_the_sections_are_refused(tmp_path, mark, match):
    v, cfg = setup(tmp_path, {"big": 150.0})
    p = Point(v.x0 + mark[0], 4200000.0 + v.half_width)
    write_marks(tmp_path, v, {"big": 150.0}, extra=[(p, mark[1], 45.0)])
    with pytest.raises(InputDataError, match=match):
        check(cfg)


@pytest.mark.parametrize("key,match", [
    ('adjust = [["pasture"]]', r"adjust\[0\].*'pasture'.*neither"),
    ('adjust = ["chanel"]', r"did you mean 'channel'"),
    ('adjust = ["channel", ["channel"]]', r"already the 'channel' group"),
    ('bounds = [1.2, 2.0]', r"bounds.*0 < lowest < 1 < highest"),
])
def test_bad_calibration_keys_are_config_errors(tmp_path, key, match):
    v, cfg = setup(tmp_path, {"big": 150.0})
    text = cfg.read_text()
    name = key.split(" = ")[0]
    lines = [ln for ln in text.splitlines() if not ln.startswith(name + " =")]
    cfg.write_text("\n".join(lines).replace('observations = "marks.gpkg"', f'observations = "marks.gpkg"\n{key}'))
    with pytest.raises(ConfigError, match=match):
        check(cfg)
