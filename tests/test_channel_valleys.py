"""The channel a LiDAR DEM cannot see, end to end on hidden LiDAR-like valleys.

Valley (tests/valleys.py, ``flown_depth``): a true trapezoidal channel whose DEM holds the water
surface of the flight day, a flat strip ``flown_depth`` m above the true bed. Reference: uniform
flow. With a normal-depth boundary the profile of the prismatic true channel stays at the
Manning normal depth (Chow 1959, ch. 6), solved independently with scipy brentq
(``Valley.normal_depth``), and the wetted width of the depth raster is the true top width
b + 2 z y_n (analytic geometry).

- with surveyed points of the true channel ([channel] survey) and, separately, with the shape
  given ([channel] shape with depth, or with flow_at_survey: the burn-depth recipe of Corum,
  Ball & Hubbard 2015), the in-bank depth above the true bed is within 2 % of y_n at every
  section and ``bed_source`` says where the bed came from;
- the DEM-only answer (the flat water strip taken as the bed) is computed too and reported for
  comparison: it must be far off, or the valley would not test anything;
- a survey on another vertical datum is reported (median of DEM minus survey on dry points).
"""
from __future__ import annotations

import json
import shutil

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from valleys import make_valley, write_config, write_survey

import geoflow

N_CHANNEL, N_FLOODPLAIN = 0.03, 0.05
VALLEYS = {   # id: (bottom width m, side slope H:V, bed slope, flown depth m, design Q m3/s, DEM cell m)
    "wide_1m": (12.0, 2.0, 0.001, 1.2, 30.0, 1.0),
    "narrow_2m": (8.0, 1.5, 0.002, 0.8, 15.0, 2.0),
}


def manning_q(v, depth, n):
    """Q (m3/s) of the true trapezoid at ``depth`` (Manning, Chow 1959 ch. 6)."""
    a, p = v.area(depth), v.perimeter(depth)
    return a * (a / p) ** (2 / 3) * np.sqrt(v.slope) / n


@pytest.fixture(scope="module", params=list(VALLEYS))
def valley(request, tmp_path_factory):
    b, z, s, flown, q, cell = VALLEYS[request.param]
    base = tmp_path_factory.mktemp(request.param)
    v = make_valley(base, length=800.0, bottom_width=b, side_slope=z, bank_height=4.0, slope=s, cell=cell,
                    classes=("channel", "grass"), flown_depth=flown, half_width=80.0)
    write_survey(base, v, [0.0, 200.0, 400.0, 600.0, 800.0])
    return request.param, base, v, q


def run_variant(base, v, q, name, extra):
    """Run the valley with ``extra`` config text in its own folder; (profile, depth above the true bed, out dir)."""
    folder = base / name
    folder.mkdir()
    for f in ("dem.tif", "centrelines.gpkg", "landcover.gpkg", "survey.gpkg"):
        shutil.copy(base / f, folder / f)
    cfg = write_config(folder, v, discharge=q, n=N_CHANNEL, classes={"channel": N_CHANNEL, "grass": N_FLOODPLAIN},
                       extra=extra, width=140.0)
    result = geoflow.run(cfg)
    prof = result.profile
    return prof, prof["wse_m"].to_numpy() - v.bed_at(v.x0 + prof["chainage_m"].to_numpy()), folder / "out"


def raster_width_and_max(path, v, margin=100.0):
    with rasterio.open(path) as ds:
        d = ds.read(1, masked=True)
        xs = ds.transform.c + (np.arange(ds.width) + 0.5) * ds.transform.a
        cell = abs(ds.transform.e)
    keep = (xs > v.x0 + margin) & (xs < v.x0 + v.length - margin)
    wet = (~np.ma.getmaskarray(d)) & (d.filled(0) > 0)
    return float(np.median(wet[:, keep].sum(axis=0))) * cell, float(d[:, keep].max())


def shape_text(v, depth_or_flow: str) -> str:
    return (f"[channel]\nshape = {{ bottom_width = {v.bottom_width}, side_slope = {v.side_slope}, "
            f"{depth_or_flow} }}\n")


def variants(v, q_flown):
    return {"survey": '[channel]\nsurvey = "survey.gpkg"\n',
            "shape_depth": shape_text(v, f"depth = {v.flown_depth}"),
            "shape_flow": shape_text(v, f"flow_at_survey = {q_flown:.6f}")}


def test_hidden_channel_normal_depth_within_2_percent(valley):
    vid, base, v, q = valley
    yn = v.normal_depth(q, N_CHANNEL)                               # brentq on the true channel
    assert v.flown_depth < yn < v.bank_height                       # in bank, above the flown water
    _, dem_only, _ = run_variant(base, v, q, "dem_only", "")
    dem_error = float(np.max(np.abs(dem_only / yn - 1)))
    print(f"\n{vid}: true normal depth {yn:.3f} m; DEM only (flat water strip as the bed): depth above the true bed "
          f"{dem_only.mean():.3f} m, {100 * dem_error:.0f} % off")
    assert dem_error > 0.15                                          # the valley hides a real channel
    q_flown = manning_q(v, v.flown_depth, N_CHANNEL)
    for name, extra in variants(v, q_flown).items():
        prof, depth, out = run_variant(base, v, q, name, extra)
        err = np.abs(depth / yn - 1)
        print(f"{vid} {name}: depth {depth.mean():.4f} m, largest error {100 * err.max():.3f} %")
        assert np.all(err < 0.02), (name, yn, depth)
        source = "survey" if name == "survey" else "shape"
        secs = gpd.read_file(out / "sections.gpkg", layer="sections")
        assert (secs["bed_source"] == source).all(), (name, secs["bed_source"].value_counts())
        assert np.all(secs["dem_bed_m"] - secs["bed_m"] > 0.9 * v.flown_depth)       # the bed used lies below
        assert np.allclose(prof["bed_m"], v.bed_at(v.x0 + prof["chainage_m"]), atol=0.02)
        width, dmax = raster_width_and_max(out / "rasters" / "r1" / "design_depth.tif", v)
        print(f"{vid} {name}: raster max depth {dmax / yn - 1:+.2%}, wet width {width / v.top_width(yn) - 1:+.2%}")
        assert abs(dmax / yn - 1) < 0.03, (name, dmax, yn)           # the raster measures to the same channel
        assert abs(width / v.top_width(yn) - 1) < 0.05 + v.cell / v.top_width(yn), (name, width)


def test_flow_at_survey_reports_the_depth_found(valley):
    vid, base, v, _ = valley
    q_flown = manning_q(v, v.flown_depth, N_CHANNEL)
    _, _, out = run_variant(base, v, q_flown, "flown_flow", shape_text(v, f"flow_at_survey = {q_flown:.6f}"))
    entry = json.loads((out / "manifest.json").read_text())["reaches"]["r1"]["channel"]["shape"]
    assert entry["depth_from"] == "flow_at_survey" and entry["slope_from"] == "dem"
    assert entry["slope"] == pytest.approx(v.slope, rel=0.01)        # fitted to the flown water surface
    assert entry["depth_m"] == pytest.approx(v.flown_depth, rel=0.01)
    log = (out / "run.log").read_text()
    assert f"cut {entry['depth_m']:.3f} m below the flown water surface" in log


def test_survey_on_another_datum_is_reported(valley):
    vid, base, v, q = valley
    folder = base / "offset_survey"
    folder.mkdir()
    write_survey(folder, v, [0.0, 400.0, 800.0], z_offset=-0.5)
    for f in ("dem.tif", "centrelines.gpkg", "landcover.gpkg"):
        shutil.copy(base / f, folder / f)
    cfg = write_config(folder, v, discharge=q, n=N_CHANNEL, classes={"channel": N_CHANNEL, "grass": N_FLOODPLAIN},
                       extra='[channel]\nsurvey = "survey.gpkg"\n', width=140.0)
    result = geoflow.check(cfg)
    geom = result.geometries["r1"]
    datum = geom.channel["survey"]["dem_minus_survey"]
    assert datum["median_m"] == pytest.approx(0.5, abs=0.01)         # DEM = true ground on the dry points
    assert any("another vertical datum" in w and "+0.50 m" in w for w in geom.warnings)
    assert any("datum" in line for line in result.summary_lines())


def test_profile_table_bed_is_the_bed_used(valley):
    """profile.csv bed_m is the lowest ground of the section used (the true bed here), not the DEM's."""
    vid, base, v, q = valley
    prof, _, out = run_variant(base, v, q, "bed_check", '[channel]\nsurvey = "survey.gpkg"\n')
    table = pd.read_csv(out / "profile.csv")
    assert np.allclose(table["bed_m"], v.bed_at(v.x0 + table["chainage_m"]), atol=0.02)
    assert np.allclose(table["depth_m"], table["wse_m"] - table["bed_m"])
