"""Config options for real layers, each run end to end on a straight analytic valley.

Reference throughout: uniform flow, Manning normal depth of the trapezoid (Chow 1959, ch. 6;
scipy brentq in tests/valleys.py). Typical n values: Chow (1959) Table 5-6 as given in
geoflow.roughness.tables (clean straight stream: min 0.025, normal 0.030, max 0.033).
"""
import geopandas as gpd
import numpy as np
import pytest
from shapely.geometry import LineString
from valleys import make_valley, write_config

from geoflow.batch import check, run
from geoflow.config import load_config
from geoflow.errors import ConfigError


def depth_ok(res, v, yn, tol=0.02):
    p = res.profile
    d = p["wse_m"] - v.bed_at(v.x0 + p["chainage_m"])
    return bool(np.all(np.abs(d / yn - 1) < tol))


@pytest.fixture()
def valley(tmp_path):
    return make_valley(tmp_path, length=600.0)


def test_reference_n_from_builtin_table(tmp_path, valley):
    cfg = write_config(tmp_path, valley, discharge=30.0, n=0.03)
    cfg.write_text(cfg.read_text().replace("n = 0.03\n", 'reference = "stream_clean_straight"\n', 1))
    loaded = load_config(cfg)
    c = loaded.roughness.classes["channel"]
    assert (c.n_low, c.n, c.n_high) == (0.025, 0.03, 0.033)     # Chow (1959) Table 5-6
    assert depth_ok(run(cfg), valley, valley.normal_depth(30.0, 0.03))
    cfg.write_text(cfg.read_text().replace("stream_clean_straight", "stream_clean_straigt"))
    with pytest.raises(ConfigError, match="did you mean 'stream_clean_straight'"):
        load_config(cfg)


def test_csv_class_table(tmp_path, valley):
    (tmp_path / "n.csv").write_text("class,n,n_low,n_high\nchannel,0.035,0.03,0.04\n")
    cfg = write_config(tmp_path, valley, discharge=30.0, n=0.03)
    text = cfg.read_text().replace('channel_class = "channel"', 'channel_class = "channel"\ntable = "n.csv"')
    cfg.write_text(text.replace("[roughness.classes.channel]\nn = 0.03\n", ""))
    assert depth_ok(run(cfg), valley, valley.normal_depth(30.0, 0.035))
    (tmp_path / "n.csv").write_text("class,n\nchannel,3.5\n")
    with pytest.raises(ConfigError, match="n.csv.*row 2"):
        load_config(cfg)


def test_adaptive_width_keeps_normal_depth_and_trims_sections(tmp_path, valley):
    cfg = write_config(tmp_path, valley, discharge=30.0, n=0.03, width=180.0,
                       extra="")
    cfg.write_text(cfg.read_text().replace("width = 180.0", "width = 180.0\nrise = 4.5"))
    res = run(cfg)
    assert depth_ok(res, valley, valley.normal_depth(30.0, 0.03))
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    # the bank is 4 m high then the valley floor rises 0.05 m per m beyond 40 m: 4.5 m is reached
    # 10 m beyond that, i.e. at 6 + 8 + 40 + 10 = 64 m from the centre (analytic geometry)
    assert np.allclose(secs.length, 2 * 64.0, atol=2.5)


def test_user_section_lines_replace_automatic_ones(tmp_path, valley):
    xs = [valley.x0 + 100.0, valley.x0 + 300.0, valley.x0 + 599.0]
    lines = [LineString([(x, valley.yc + 50), (x, valley.yc - 50)]) for x in xs]   # drawn right -> left
    gpd.GeoDataFrame({"reach_id": ["r1"] * 3}, geometry=lines, crs=str(load_crs(valley))).to_file(
        tmp_path / "xs.gpkg", driver="GPKG")
    cfg = write_config(tmp_path, valley, discharge=30.0, n=0.03)
    cfg.write_text(cfg.read_text().replace("width = 120.0", 'width = 120.0\nlines = "xs.gpkg"'))
    res = run(cfg)
    assert list(res.profile["chainage_m"].round(3)) == [100.0, 300.0, 599.0]
    assert depth_ok(res, valley, valley.normal_depth(30.0, 0.03))


def test_centreline_drawn_upstream_is_reversed_with_a_warning(tmp_path, valley):
    gdf = gpd.read_file(valley.centrelines)
    gdf["geometry"] = [LineString(list(g.coords)[::-1]) for g in gdf.geometry]
    gdf.to_file(valley.centrelines, layer="centrelines", driver="GPKG")
    cfg = write_config(tmp_path, valley, discharge=30.0, n=0.03)
    lines = check(cfg).summary_lines()
    assert any("r1" in ln and "revers" in ln for ln in lines), lines
    res = run(cfg)
    assert depth_ok(res, valley, valley.normal_depth(30.0, 0.03))


def load_crs(v):
    import rasterio
    with rasterio.open(v.dem) as ds:
        return ds.crs


def test_storage_areas_carry_no_flow(tmp_path):
    """A user polygon over the outer left floodplain ([sections] storage_areas) makes that ground storage.

    Reference: uniform flow, so Q = sum K_i S^(1/2) over the subdivisions (Chow 1959, ch. 6) with the
    storage strip's conveyance zero, solved with scipy brentq on the analytic valley profile of
    tests/valleys.py (channel and banks |y| < 14 m, flat floodplain to 54 m, walls 1:20 beyond).
    """
    from scipy.optimize import brentq
    from shapely.geometry import box

    v = make_valley(tmp_path, length=600.0, classes=("channel", "grass"))
    q, n_ch, n_fp = 450.0, 0.03, 0.05
    gpd.GeoDataFrame({"name": ["pond"]}, geometry=[box(v.x0 - 50, v.yc + 34.0, v.x0 + 700, v.yc + 90)],
                     crs=str(load_crs(v))).to_file(tmp_path / "ponds.gpkg", driver="GPKG")
    base = write_config(tmp_path, v, discharge=q, n=n_ch, classes={"channel": n_ch, "grass": n_fp})
    plain = run(base)
    base.write_text(base.read_text().replace("width = 120.0", 'width = 120.0\nstorage_areas = "ponds.gpkg"')
                    .replace('output_dir = "out"', 'output_dir = "out_storage"'))
    assert load_config(base).input_files()["[sections] storage_areas"] == tmp_path / "ponds.gpkg"
    stored = run(base)
    secs = gpd.read_file(stored.paths["sections"], layer="sections")
    assert secs["flags"].str.contains("storage").all()
    np.testing.assert_allclose(secs["storage_m"], 60.0 - 34.0, atol=1e-6)

    y = np.linspace(-60.0, 60.0, 240001)
    off = np.abs(y)
    ground = np.clip(v.bank_height - (off - v.bottom_width / 2) / v.side_slope, 0.0, v.bank_height)
    ground = v.bank_height - ground + np.clip(off - 54.0, 0.0, None) * 0.05         # above the bed
    dy = y[1] - y[0]

    def depth_for(store: bool) -> float:
        parts = [(y > 34.0, None), ((y > 14.0) & (y <= (34.0 if store else 60.0)), n_fp),
                 (np.abs(y) <= 14.0, n_ch), (y < -14.0, n_fp)]
        if not store:
            parts = parts[1:]

        def f(h):
            total = 0.0
            for mask, nn in parts:
                d = np.clip(h - ground[mask], 0.0, None)
                area = d.sum() * dy
                wet = d > 0
                perim = np.sum(np.hypot(dy, np.diff(ground[mask]))[wet[1:] | wet[:-1]])
                if nn is not None and area > 0:
                    total += area * (area / perim) ** (2 / 3) / nn
            return total * np.sqrt(v.slope) - q
        return brentq(f, 4.01, 8.0, xtol=1e-6)

    for res, store in ((plain, False), (stored, True)):
        p = res.profile
        mid = p[(p.chainage_m > 100) & (p.chainage_m < 500)]
        d = mid["wse_m"] - v.bed_at(v.x0 + mid["chainage_m"])
        assert np.all(np.abs(d - depth_for(store)) < 0.01), (store, d.describe(), depth_for(store))
    assert depth_for(True) > depth_for(False) + 0.03
