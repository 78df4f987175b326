"""Tests for geoflow.outputs: files are read back with the reference readers
(rasterio for GeoTIFF, geopandas/pyogrio for GeoPackage, the csv module, json)."""
from __future__ import annotations

import csv
import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import rasterio.shutil
from affine import Affine
from rasterio.crs import CRS
from rasterio.enums import Compression
from shapely.geometry import LineString, Polygon

from geoflow import outputs
from geoflow.errors import OutputError
from geoflow.outputs import (
    PROFILE_COLUMNS,
    atomic_path,
    write_extent_gpkg,
    write_manifest,
    write_profile_csv,
    write_raster,
    write_sections_gpkg,
)

CRS_UTM = CRS.from_epsg(32633)
TRANSFORM = Affine(2.0, 0.0, 500000.0, 0.0, -2.0, 4000000.0)


def no_temp_files(folder) -> bool:
    return not any(".tmp-" in p.name for p in folder.rglob("*"))


@pytest.mark.parametrize("shape", [(600, 520), (40, 30)])
def test_raster_is_float32_cog(tmp_path, shape):
    rng = np.random.default_rng(1)
    arr = rng.uniform(-5, 50, shape)
    arr[:5, :] = np.nan
    path = write_raster(tmp_path / "r" / "a_depth.tif", arr, TRANSFORM, CRS_UTM)
    # Reference reader: rasterio / GDAL metadata.
    with rasterio.open(path) as ds:
        assert ds.dtypes == ("float32",)
        assert ds.nodata == -9999.0
        assert ds.crs == CRS_UTM and ds.transform == TRANSFORM
        assert ds.profile["tiled"] and ds.block_shapes[0] in [(256, 256), (512, 512)]
        assert ds.compression == Compression.deflate
        assert ds.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"       # GDAL COG driver marker
        assert len(ds.overviews(1)) >= 1
        back = ds.read(1, masked=True)
    assert np.array_equal(back.mask, np.isnan(arr))
    np.testing.assert_array_equal(back.filled(np.nan)[5:], arr.astype(np.float32)[5:])
    assert no_temp_files(tmp_path)


def test_raster_overview_is_average(tmp_path):
    # A 2x2 average of a known field (common practice, no source: AVERAGE resampling).
    arr = np.add.outer(np.arange(600.0), np.arange(600.0))
    path = write_raster(tmp_path / "a.tif", arr, TRANSFORM, CRS_UTM)
    with rasterio.open(path) as ds:
        assert ds.overviews(1)[0] == 2
        ov = ds.read(1, out_shape=(300, 300))
    np.testing.assert_allclose(ov, arr.reshape(300, 2, 300, 2).mean(axis=(1, 3)), atol=1e-3)


def test_uncompressed_temporary_gives_the_same_cog_bytes(tmp_path):
    # The block writer fills an uncompressed, sparse temporary before the COG copy. Reference: the
    # same windows written to a DEFLATE + predictor 3 temporary (what the writer used before) and
    # copied by GDAL's COG driver with the same options must give the very same file, byte for byte;
    # windows never written read as no data in both.
    rng = np.random.default_rng(7)
    rows, cols = 700, 900
    arr = np.round(rng.uniform(40.0, 60.0, (rows, cols)), 2).astype(np.float32)
    windows = [rasterio.windows.Window(0, 0, 512, 300), rasterio.windows.Window(400, 250, 500, 450)]
    ours = tmp_path / "ours.tif"
    with outputs.block_raster_writer(ours, cols, rows, TRANSFORM, CRS_UTM) as write:
        for w in windows:
            write(arr[w.toslices()], w)
    tmp = tmp_path / "deflate_tmp.tif"
    with rasterio.open(tmp, "w", driver="GTiff", width=cols, height=rows, count=1, dtype="float32", crs=CRS_UTM,
                       transform=TRANSFORM, nodata=-9999.0, tiled=True, blockxsize=256, blockysize=256,
                       compress="DEFLATE", predictor=3) as ds:
        for w in windows:
            ds.write(arr[w.toslices()], 1, window=w)
    ref = tmp_path / "ref.tif"
    with rasterio.open(tmp) as src:
        rasterio.shutil.copy(src, str(ref), driver="COG", **outputs.cog_options(cols, rows))
    assert ours.read_bytes() == ref.read_bytes()
    with rasterio.open(ours) as ds:
        back = ds.read(1, masked=True)
    assert back.mask[650:, :350].all()                 # never written: no data
    np.testing.assert_array_equal(back[:300, :512], arr[:300, :512])


def test_failed_raster_write_leaves_nothing(tmp_path, monkeypatch):
    def boom(*args, **kwargs):
        raise rasterio.errors.RasterioIOError("disk full (simulated)")
    monkeypatch.setattr(rasterio.shutil, "copy", boom)
    target = tmp_path / "x.tif"
    with pytest.raises(OutputError, match="x.tif"):
        write_raster(target, np.ones((10, 10)), TRANSFORM, CRS_UTM)
    assert not target.exists() and no_temp_files(tmp_path)


def test_atomic_path_keeps_old_file_on_failure(tmp_path):
    target = tmp_path / "sub" / "m.json"
    write_manifest(target, {"version": "1"})
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("interrupted")
    assert json.loads(target.read_text()) == {"version": "1"}
    assert no_temp_files(tmp_path)


def profile_frame() -> pd.DataFrame:
    rng = np.random.default_rng(2)
    n = 4
    data = {c: rng.uniform(0, 10, n) for c in PROFILE_COLUMNS}
    data.update(reach_id=["r1"] * n, event=["q100"] * n, section_id=np.arange(n),
                flags=[(), ("supercritical", "extended"), "", None], friction_slope=[1.23456789e-4] * n,
                wse_m=[10.123456, np.nan, 11.0, 12.5])
    df = pd.DataFrame(data)
    df["note"] = "x"
    return df[list(reversed(df.columns))]          # shuffled order on input


def test_profile_csv_column_order_and_format(tmp_path):
    path = write_profile_csv(tmp_path / "profile.csv", profile_frame())
    with open(path, newline="") as fh:                    # reference reader: csv module
        rows = list(csv.reader(fh))
    k = len(PROFILE_COLUMNS)
    assert tuple(rows[0][:k]) == PROFILE_COLUMNS and rows[0][k:] == ["note"]
    flags = [r[PROFILE_COLUMNS.index("flags")] for r in rows[1:]]
    assert flags == ["", "supercritical;extended", "", ""]
    wse = [r[PROFILE_COLUMNS.index("wse_m")] for r in rows[1:]]
    assert wse == ["10.1235", "", "11.0000", "12.5000"]
    assert float(rows[1][PROFILE_COLUMNS.index("friction_slope")]) == pytest.approx(1.23457e-4, rel=1e-6)
    assert no_temp_files(tmp_path)


def test_profile_csv_missing_column(tmp_path):
    with pytest.raises(OutputError, match="froude"):
        write_profile_csv(tmp_path / "p.csv", profile_frame().drop(columns="froude"))
    assert not (tmp_path / "p.csv").exists()


def test_sections_gpkg_roundtrip_and_replace(tmp_path):
    lines = [LineString([(500000 + 10 * i, 4000100), (500000 + 10 * i, 4000000)]) for i in range(3)]
    gdf = gpd.GeoDataFrame({"section_id": [0, 1, 2], "reach_id": "r1", "chainage_m": [0.0, 10.0, 20.0],
                            "channel_edge_left_m": 40.0, "channel_edge_right_m": 60.0,
                            "flags": [(), ("extended",), ()], "wse_q100": [3.0, 2.9, 2.8]},
                           geometry=lines, crs=CRS_UTM.to_wkt())
    path = tmp_path / "sections.gpkg"
    write_sections_gpkg(path, gdf.iloc[:1])
    write_sections_gpkg(path, gdf)                  # replaced whole, not appended
    assert [name for name, _ in pyogrio.list_layers(path)] == ["sections"]
    back = gpd.read_file(path, layer="sections")
    assert len(back) == 3 and list(back.columns[:6]) == list(outputs.SECTION_COLUMNS)
    assert back.crs.to_epsg() == 32633
    assert list(back["flags"]) == ["", "extended", ""]
    assert back.geometry.geom_equals(gdf.geometry).all()
    np.testing.assert_allclose(back["wse_q100"], [3.0, 2.9, 2.8])
    assert no_temp_files(tmp_path)


def test_extent_gpkg_roundtrip(tmp_path):
    sq = Polygon([(0, 0), (10, 0), (10, 10), (0, 10)])
    gdf = gpd.GeoDataFrame({"reach_id": ["r1", "r1"], "event": ["q10", "q100"], "roughness_case": ["normal", "high"]},
                           geometry=[sq, sq.buffer(1.0)], crs="EPSG:32633")
    path = write_extent_gpkg(tmp_path / "inundation.gpkg", gdf)
    assert [name for name, _ in pyogrio.list_layers(path)] == ["extent"]
    back = gpd.read_file(path, layer="extent")
    assert list(back["event"]) == ["q10", "q100"] and back.crs.to_epsg() == 32633
    assert list(back["roughness_case"]) == ["normal", "high"]
    np.testing.assert_allclose(back.area, gdf.area)


def test_gpkg_without_crs_rejected(tmp_path):
    gdf = gpd.GeoDataFrame({"reach_id": ["r1"], "event": ["e"], "roughness_case": ["normal"]},
                           geometry=[Polygon([(0, 0), (1, 0), (1, 1)])])
    with pytest.raises(OutputError, match="CRS"):
        write_extent_gpkg(tmp_path / "e.gpkg", gdf)
    assert not (tmp_path / "e.gpkg").exists()


def test_manifest_json(tmp_path):
    man = {"version": "0.1.0", "reaches": {"r1": {"status": "ok", "seconds": np.float64(1.5),
                                                  "max_depth": float("nan"), "n": np.int64(3)}},
           "path": tmp_path}
    path = write_manifest(tmp_path / "manifest.json", man)
    back = json.loads(path.read_text(encoding="utf-8"))           # reference reader: json
    assert back["reaches"]["r1"] == {"status": "ok", "seconds": 1.5, "max_depth": None, "n": 3}
    assert back["path"] == str(tmp_path)


def test_every_flag_word_the_code_can_emit_is_documented():
    """Each quoted flag word appended in geoflow's code has an entry in geoflow.flags (common practice)."""
    import re
    from pathlib import Path

    from geoflow.flags import FLAGS
    root = Path(__file__).resolve().parents[1] / "geoflow"
    emitted = set()
    for path in root.rglob("*.py"):
        text = path.read_text()
        emitted |= set(re.findall(r'flags(?:\[\w+\])?\.append\("([a-z_]+)"\)', text))
        emitted |= set(re.findall(r'f(?:\.append\(|\s*\+=\s*\[)"([a-z_]+)"', text))
        emitted |= set(re.findall(r'\.append\("([a-z]+_[a-z_]+)"(?:\)| if )', text))
        emitted |= set(re.findall(r'else "([a-z]+_[a-z_]+)"\)', text))
        emitted |= set(re.findall(r'\(\("(storage)",\)', text))
    assert emitted, "the scan found no flag words"
    assert emitted <= set(FLAGS), sorted(emitted - set(FLAGS))


def test_readme_flag_table_is_the_generated_one():
    """README's flag table between the markers equals geoflow.flags.markdown_table() (common practice)."""
    from pathlib import Path

    from geoflow.flags import markdown_table
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    start, end = "<!-- flags:start -->\n", "<!-- flags:end -->"
    assert text[text.index(start) + len(start):text.index(end)] == markdown_table()


def test_raster_metadata_survives_the_cog_copy(tmp_path):
    """Units, band description and the caution are GDAL metadata read back with rasterio (reference
    reader), for both writers: in memory (write_raster) and block-wise (block_raster_writer)."""
    from rasterio.windows import Window

    from geoflow.constants import CAUTION
    meta = outputs.raster_metadata("velocity", CAUTION, reach_id="r1", event="q100")
    a = write_raster(tmp_path / "v.tif", np.ones((300, 280)), TRANSFORM, CRS_UTM, meta=meta)
    with outputs.block_raster_writer(tmp_path / "b.tif", 280, 300, TRANSFORM, CRS_UTM, meta=meta) as w:
        w(np.ones((300, 280)), Window(0, 0, 280, 300))
    for path in (a, tmp_path / "b.tif"):
        with rasterio.open(path) as ds:
            assert ds.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"
            tags = ds.tags()
            assert tags["units"] == "m/s" and tags["caution"] == CAUTION
            assert tags["reach_id"] == "r1" and tags["event"] == "q100"
            assert ds.units == ("m/s",) and ds.tags(1)["units"] == "m/s"
            assert ds.descriptions[0].startswith("depth-averaged velocity") and "(m/s)" in ds.descriptions[0]


def test_geopackage_layers_carry_a_description_and_the_caution(tmp_path):
    """The layer description is the GeoPackage standard's gpkg_contents.description (read with
    sqlite3, the reference reader); the caution is layer metadata (read with pyogrio)."""
    import sqlite3

    from geoflow.constants import CAUTION
    gdf = gpd.GeoDataFrame({"reach_id": ["r1"], "event": ["q"], "roughness_case": ["normal"], "area_m2": [1.0]},
                           geometry=[Polygon([(0, 0), (1, 0), (1, 1)])], crs=CRS_UTM.to_wkt())
    path = write_extent_gpkg(tmp_path / "inundation.gpkg", gdf)
    with sqlite3.connect(path) as db:
        (desc,) = db.execute("SELECT description FROM gpkg_contents WHERE table_name = 'extent'").fetchone()
    assert desc == outputs.LAYER_MEANING["extent"] and "m2" in desc
    assert pyogrio.read_info(path, layer="extent")["layer_metadata"]["caution"] == CAUTION
