"""Roughness cases end to end: every event run with every class at n_low / n (normal) / n_high.

References:
- Normal depth of a compound valley with subdivided conveyance, K = sum (1/n_i) A_i R_i^(2/3) with
  vertical interfaces at the channel edges carrying no perimeter (Chow 1959, Open-Channel Hydraulics,
  ch. 6): subdivision areas and wetted perimeters from the analytic ground line with shapely, the depth
  with scipy brentq (tests/valleys.py). With a normal-depth boundary at the bed slope a prismatic reach
  stays at normal depth, so each case's depth must be the normal depth for that case's n.
- Manning's equation is monotonic in 1/n (Chow 1959, ch. 6), so low < normal < high at every section.
- Spread raster: the difference of the two cases' WSE rasters (read back with rasterio) where both are
  wet, and the difference of the two analytic normal depths everywhere it is defined.
"""
from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from valleys import compound_config, make_compound_valley, make_valley, write_config

from geoflow.batch import run
from geoflow.config import load_config
from geoflow.errors import ConfigError

N_CH, N_CH_LOW, N_CH_HIGH = 0.035, 0.030, 0.045
N_FP, N_FP_LOW = 0.080, 0.060            # the floodplain gives no n_high: it keeps n in the high case
CLASSES = f"""[roughness.classes.channel]
n = {N_CH}
n_low = {N_CH_LOW}
n_high = {N_CH_HIGH}
[roughness.classes.floodplain]
n = {N_FP}
n_low = {N_FP_LOW}
"""


def read(path):
    with rasterio.open(path) as ds:
        return ds.read(1, masked=True).astype(float).filled(np.nan), ds.transform


@pytest.fixture(scope="module")
def cases_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cases")
    v = make_compound_valley(folder)
    cfg = compound_config(folder, v, CLASSES, {"flood": 150.0})
    cfg.write_text(cfg.read_text().replace('channel_class = "channel"', 'channel_class = "channel"\n'
                                           'cases = ["low", "high"]'))
    res = run(cfg)
    assert not res.failed, res.reaches
    return v, folder / "out", res


def test_each_case_depth_is_normal_depth_for_its_n_and_cases_are_ordered(cases_run):
    v, out, res = cases_run
    prof = pd.read_csv(out / "profile.csv")
    assert list(prof.columns[:4]) == ["reach_id", "event", "roughness_case", "section_id"]
    assert sorted(set(prof["roughness_case"])) == ["high", "low", "normal"]
    n_of = {"low": (N_CH_LOW, N_FP_LOW), "normal": (N_CH, N_FP), "high": (N_CH_HIGH, N_FP)}
    depth = {}
    for case, (nc, nf) in n_of.items():
        rows = prof[prof["roughness_case"] == case].sort_values("section_id")
        d = (rows["wse_m"] - v.bed_at(v.x0 + rows["chainage_m"])).to_numpy()
        yn = v.normal_depth(150.0, nc, nf)
        assert np.all(np.abs(d / yn - 1) < 0.02), (case, yn, d)
        print(f"{case}: yn {yn:.4f}, max depth error {np.max(np.abs(d / yn - 1)) * 100:.3f} %")
        depth[case] = d
    assert np.all(depth["low"] < depth["normal"]) and np.all(depth["normal"] < depth["high"])


def test_spread_raster_is_high_minus_low_where_either_case_is_wet(cases_run):
    v, out, _ = cases_run
    low, t_low = read(out / "rasters" / "c1" / "flood.low_wse.tif")
    high, t_high = read(out / "rasters" / "c1" / "flood.high_wse.tif")
    spread, t_spread = read(out / "uncertainty" / "flood_wse_spread.tif")
    assert t_low == t_high == t_spread and low.shape == high.shape == spread.shape
    both = np.isfinite(low) & np.isfinite(high)
    either = np.isfinite(low) | np.isfinite(high)
    assert np.array_equal(np.isfinite(spread), either)
    assert np.max(np.abs(spread[both] - (high - low)[both])) < 0.01
    expected = v.normal_depth(150.0, N_CH_HIGH, N_FP) - v.normal_depth(150.0, N_CH_LOW, N_FP_LOW)
    assert np.max(np.abs(spread[either] - expected)) < 0.01, (np.nanmin(spread), np.nanmax(spread), expected)


def test_case_outputs_are_named_and_recorded(cases_run):
    v, out, res = cases_run
    rdir = out / "rasters" / "c1"
    names = {p.name for p in rdir.iterdir()}
    assert {"flood_wse.tif", "flood_depth.tif", "flood_velocity.tif", "flood.low_wse.tif", "flood.low_depth.tif",
            "flood.high_wse.tif", "flood.high_depth.tif"} == names
    ext = gpd.read_file(out / "inundation.gpkg", layer="extent")
    area = ext.groupby("roughness_case")["area_m2"].sum()
    assert set(area.index) == {"low", "normal", "high"}
    assert area["low"] <= area["normal"] <= area["high"]
    man = json.loads((out / "manifest.json").read_text())
    assert man["roughness_cases"]["classes_keeping_n"] == {"low": [], "high": ["floodplain"]}
    assert man["roughness_cases"]["factors"]["high"] == {"channel": pytest.approx(N_CH_HIGH / N_CH)}
    assert "uncertainty/flood_wse_spread.tif" in man["files"]
    assert "keep their n" in (out / "run.log").read_text()
    sections = gpd.read_file(out / "sections.gpkg", layer="sections")
    normal = res.profile[res.profile["roughness_case"] == "normal"].set_index("section_id")["wse_m"]
    np.testing.assert_allclose(sections.set_index("section_id")["wse_flood_m"], normal)


def test_a_rerun_without_cases_removes_their_files(tmp_path):
    """No stale results (the run-folder rule): case rasters and spreads of an earlier run are removed."""
    v = make_valley(tmp_path, length=300.0)
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03)
    plain = cfg.read_text().replace("n = 0.03\n", "n = 0.03\nn_low = 0.025\nn_high = 0.04\n", 1)
    cfg.write_text(plain.replace('channel_class = "channel"', 'channel_class = "channel"\ncases = ["low", "high"]'))
    out = tmp_path / "out"
    assert not run(cfg).failed
    assert (out / "uncertainty" / "design_wse_spread.tif").is_file()
    assert (out / "rasters" / "r1" / "design.low_wse.tif").is_file()
    cfg.write_text(plain)
    assert not run(cfg).failed
    assert not (out / "uncertainty").exists()
    assert not (out / "rasters" / "r1" / "design.low_wse.tif").exists()
    assert set(pd.read_csv(out / "profile.csv")["roughness_case"]) == {"normal"}
    assert json.loads((out / "manifest.json").read_text())["stale_files"] == []


def test_cases_scale_an_n_law_by_the_class_range(tmp_path):
    """Rule: a class's n_by_discharge law is multiplied by n_low / n in the low case (documented rule);
    reference: Manning normal depth of the trapezoid at that n (Chow 1959 ch. 6, scipy brentq)."""
    v = make_valley(tmp_path, length=600.0)
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03)
    text = cfg.read_text().replace("n = 0.03\n", "n = 0.03\nn_low = 0.024\nn_high = 0.039\n"
                                   "n_by_discharge = [[10.0, 0.04], [60.0, 0.02]]\n", 1)
    cfg.write_text(text.replace('channel_class = "channel"', 'channel_class = "channel"\ncases = ["low", "high"]'))
    p = run(cfg).profile
    n_q = np.interp(20.0, [10.0, 60.0], [0.04, 0.02])
    for case, f in (("normal", 1.0), ("low", 0.024 / 0.03), ("high", 0.039 / 0.03)):
        rows = p[p["roughness_case"] == case]
        d = (rows["wse_m"] - v.bed_at(v.x0 + rows["chainage_m"])).to_numpy()
        yn = v.normal_depth(20.0, n_q * f)
        assert np.all(np.abs(d / yn - 1) < 0.02), (case, yn, d)


@pytest.mark.parametrize("cases,match", [('["normal"]', "always computed"), ('["lo"]', "did you mean 'low'"),
                                         ('["low", "low"]', "listed twice"), ('"low"', "must be a list")])
def test_bad_cases_are_config_errors(tmp_path, cases, match):
    v = make_valley(tmp_path, length=300.0)
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03)
    cfg.write_text(cfg.read_text().replace('channel_class = "channel"', f'channel_class = "channel"\ncases = {cases}'))
    with pytest.raises(ConfigError, match=r"\[roughness\] cases.*" + match):
        load_config(cfg)
