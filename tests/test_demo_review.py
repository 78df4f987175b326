"""The demo run as a reviewer opens it: report pages, rasters and GeoPackages read back with reference
readers (html.parser, rasterio, sqlite3, pyogrio, the csv module).

Checks the documented promises, so no outside numbers are needed: each page has a map image, every
section flagged in profile.csv is plotted on its reach's page, every flag word is explained with
geoflow.flags' text, the run facts match the manifest and config, and every raster carries its unit
and the caution in its own metadata.
"""
from __future__ import annotations

import csv
import json
import sqlite3
from pathlib import Path

import pyogrio
import pytest
import rasterio
import shapely
from test_report import parse, png

import geoflow
from geoflow.constants import CAUTION, MIN_OUTLINE_PART_CELLS
from geoflow.flags import describe
from geoflow.naming import safe_name
from geoflow.outputs import RASTER_MEANING

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("demo")
    text = (ROOT / "configs" / "demo.toml").read_text(encoding="utf-8")
    text = text.replace('"../sample_gis/', f'"{(ROOT / "sample_gis").as_posix()}/')
    text = text.replace('output_dir = "../out/demo"', 'output_dir = "out"')
    cfg = tmp / "demo.toml"
    cfg.write_text(text, encoding="utf-8")
    geoflow.run(cfg)
    out = tmp / "out"
    with open(out / "profile.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    return out, rows, json.loads((out / "manifest.json").read_text(encoding="utf-8"))


def test_every_page_has_a_map_image(demo):
    out, _, man = demo
    for name in ["index"] + [safe_name(r) for r in man["reaches"]]:
        page = parse(out / "report" / f"{name}.html")
        maps = [i for i in page.imgs if "map" in i["alt"]]
        assert maps and png(maps[0]).shape[1] > 800, name
        assert CAUTION in " ".join(page.text)


def test_every_flagged_section_is_plotted_and_every_flag_word_explained(demo):
    out, rows, man = demo
    for rid in man["reaches"]:
        flagged = {int(r["section_id"]) for r in rows if r["reach_id"] == rid and r["flags"]}
        words = {w for r in rows if r["reach_id"] == rid for w in r["flags"].split(";") if w}
        page = parse(out / "report" / f"{safe_name(rid)}.html")
        plotted = {int(i["figure"][8:]) for i in page.imgs if (i["figure"] or "").startswith("section-")}
        for tiles in [i for i in page.imgs if (i["figure"] or "").startswith("sections-")]:
            plotted |= {int(s) for s in tiles["alt"].removeprefix("cross-sections ").split(", ")}
        assert plotted == flagged, rid
        assert flagged, "the demo has flagged sections on every reach"
        for w in words:
            entry = describe(w)
            assert entry.meaning != "(not documented)", w
            assert w in page.cells and entry.meaning in page.cells and entry.action in page.cells, (rid, w)
    index = parse(out / "report" / "index.html")
    for w in {w for r in rows for w in r["flags"].split(";") if w}:
        assert describe(w).meaning in index.cells


def test_run_facts_on_the_reach_pages(demo):
    out, _, man = demo
    page = parse(out / "report" / "main.html")
    cells = page.cells

    def value(item):
        return cells[cells.index(item) + 1]
    assert value("config SHA-256") == man["config_sha256"]
    assert value("program") == f"geoflow {man['geoflow_version']}"
    assert value("run name") == "demo" and value("DEM cell size (m)") == "2"
    assert value("CRS").startswith("EPSG:32630") and value("DEM vertical unit") == "m"
    assert value("friction slope between sections") == "average conveyance"
    for cls in ("channel", "grassland", "crops", "woodland", "built_up", "paved"):
        assert any(c.startswith(cls) for c in cells), cls
    assert "0.033" in cells and "0.045" in cells                  # channel n_low, n_high
    assert "normal depth, slope 0.0013882" in cells
    trib = parse(out / "report" / "tributary.html").cells
    assert "level of reach main where this reach joins it" in trib


def test_rasters_carry_units_and_the_caution(demo):
    out, _, man = demo
    tifs = sorted(out.glob("rasters/*/*.tif")) + sorted(out.glob("mosaic/*/*.tif"))
    views = sorted(out.glob("mosaic/*.vrt"))
    assert len(tifs) >= 12 and len(views) == 4 and len(tifs) > 12        # the confluence gives patches
    for tif in tifs + views:
        patch = tif.parent.parent.name == "mosaic"                 # mosaic/<event>_max_<kind>/<patch>.tif
        kind = (tif.parent.name if patch else tif.stem).rsplit("_", 1)[-1]
        with rasterio.open(tif) as ds:
            tags = ds.tags()
            assert tags["caution"] == CAUTION, tif
            assert tags["units"] == RASTER_MEANING[kind][1] and ds.units == (RASTER_MEANING[kind][1],), tif
            assert RASTER_MEANING[kind][0] in ds.descriptions[0], tif
            if tif.suffix == ".tif":
                assert ds.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"


def test_geopackages_describe_their_layers_and_outlines_are_dissolved(demo):
    out, _, man = demo
    for name, layer in (("sections.gpkg", "sections"), ("inundation.gpkg", "extent")):
        with sqlite3.connect(out / name) as db:
            (desc,) = db.execute("SELECT description FROM gpkg_contents WHERE table_name = ?", (layer,)).fetchone()
        assert desc and pyogrio.read_info(out / name, layer=layer)["layer_metadata"]["caution"] == CAUTION
    df = pyogrio.read_dataframe(out / "inundation.gpkg", layer="extent")
    assert len(df) == len(df[["reach_id", "event"]].drop_duplicates()) == 4   # one outline per reach x event
    parts = shapely.get_parts(df.geometry.values)
    assert shapely.area(parts).min() >= (MIN_OUTLINE_PART_CELLS - 0.5) * 2.0 * 2.0   # no single-cell fragments


def test_tributary_velocity_stays_off_the_main_channel(demo):
    """The tributary's map is cut to its own part of the valley floor (geoflow.sections.territory),
    which leaves out the main river's channel: no tributary cell, of any raster, lies within the main
    channel's top half-width (10 m, sample_gis/README.md: the channel cover is the centreline buffered
    by it) of the main centreline, less half a cell diagonal (1.4 m on 2 m cells)."""
    out, _, _ = demo
    lines = pyogrio.read_dataframe(ROOT / "sample_gis" / "centrelines.gpkg", layer="centrelines")
    main = lines.loc[lines["reach_id"] == "main"].geometry.iloc[0]
    for kind in ("wse", "depth", "velocity"):
        for event in ("q2", "q100"):
            with rasterio.open(out / "rasters" / "tributary" / f"{event}_{kind}.tif") as ds:
                v = ds.read(1, masked=True)
                rows, cols = (~v.mask).nonzero()
                xs, ys = rasterio.transform.xy(ds.transform, rows, cols)
            assert len(xs) > 100
            assert shapely.distance(shapely.points(xs, ys), main).min() > 10.0 - 1.42, (kind, event)
