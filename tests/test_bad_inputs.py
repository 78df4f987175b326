"""A catalogue of bad and awkward inputs: each must give exit 2 at both `check` and `run`, one line
that names the file / key / reach, no traceback, nothing written anywhere and every input unchanged.

No outside reference is needed: these check the documented contract (README "Bad input").
"Nothing written, inputs unchanged" is checked by hashing every file under the test folder
before and after (a new, removed or changed file fails the case).
"""
from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import rasterio
from shapely.geometry import LineString, Point
from valleys import make_valley, write_config, write_survey

from geoflow.cli import main


def snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1))


def rewrite_layer(path: Path, layer: str, fn) -> None:
    gdf = gpd.read_file(path, layer=layer)
    gdf = fn(gdf)
    path.unlink()
    gdf.to_file(path, layer=layer, driver="GPKG")


def _dem_values(v, fn):
    with rasterio.open(v.dem) as ds:
        profile, z = ds.profile, ds.read(1)
    z = fn(z)
    with rasterio.open(v.dem, "w", **profile) as ds:
        ds.write(z, 1)


# Each case: (id, mutate(tmp_path, valley, config_path), words the message must contain)
def _out_dot_and_centrelines_named_like_an_output(tmp, v, cfg):
    v.centrelines.rename(tmp / "sections.gpkg")
    edit(cfg, 'centrelines = "centrelines.gpkg"', 'centrelines = "sections.gpkg"')
    edit(cfg, 'output_dir = "out"', 'output_dir = "."')


def _section_lines_inside_the_output_folder(tmp, v, cfg):
    (tmp / "out" / "parts").mkdir(parents=True)
    gpd.GeoDataFrame({"reach_id": ["r1", "r1"]},
                     geometry=[LineString([(v.x0 + 50, v.yc + 50), (v.x0 + 50, v.yc - 50)]),
                               LineString([(v.x0 + 300, v.yc + 50), (v.x0 + 300, v.yc - 50)])],
                     crs="EPSG:32630").to_file(tmp / "out" / "parts" / "lines.gpkg", layer="lines", driver="GPKG")
    edit(cfg, "[sections]\n", '[sections]\nlines = "out/parts/lines.gpkg"\n')


def _roughness_table_named_profile_csv_in_output(tmp, v, cfg):
    (tmp / "profile.csv").write_text("class,n\nchannel,0.03\ngrass,0.04\n")
    edit(cfg, 'output_dir = "out"', 'output_dir = "."')
    edit(cfg, "[roughness]\n", '[roughness]\ntable = "profile.csv"\n')


def _dem_inside_output_rasters(tmp, v, cfg):
    (tmp / "out" / "rasters").mkdir(parents=True)
    shutil.move(v.dem, tmp / "out" / "rasters" / "dem.tif")
    edit(cfg, 'dem = "dem.tif"', 'dem = "out/rasters/dem.tif"')


def _long_event_name(tmp, v, cfg):
    edit(cfg, 'name = "design"', f'name = "{"e" * 300}"')


def _long_reach_id(tmp, v, cfg):
    rewrite_layer(v.centrelines, "centrelines", lambda g: g.assign(reach_id=["r" * 300]))


def _flow_change_beyond_reach_end(tmp, v, cfg):
    edit(cfg, "discharge = 20.0", "discharge = 20.0\nchanges = [{ chainage = 5000.0, discharge = 28.0 }]")


def _rating_stage_falls(tmp, v, cfg):
    edit(cfg, 'downstream = { type = "normal_depth", slope = 0.001 }',
         'downstream = { type = "rating", discharge = [1.0, 10.0, 100.0], stage = [54.0, 53.0, 52.0] }')


def _rating_does_not_cover_the_flow(tmp, v, cfg):
    edit(cfg, 'downstream = { type = "normal_depth", slope = 0.001 }',
         'downstream = { type = "rating", discharge = [1.0, 5.0, 10.0], stage = [50.5, 51.0, 51.5] }')


def _channel_class_matches_nothing(tmp, v, cfg):
    edit(cfg, 'channel_class = "channel"', 'channel_class = "chanel"\ndefault_n = 0.05')


def _stage_hundreds_of_metres_above(tmp, v, cfg):
    edit(cfg, 'downstream = { type = "normal_depth", slope = 0.001 }', 'downstream = { type = "stage", wse = 452.0 }')


def _stage_below_the_bed(tmp, v, cfg):
    edit(cfg, 'downstream = { type = "normal_depth", slope = 0.001 }', 'downstream = { type = "stage", wse = 40.0 }')


def _cell_size_not_a_multiple(tmp, v, cfg):
    cfg.write_text(cfg.read_text() + "\n[mapping]\ncell_size = 1.5\n")


def _all_nodata_dem(tmp, v, cfg):
    _dem_values(v, lambda z: np.full_like(z, -9999.0))


def _dem_is_text(tmp, v, cfg):
    v.dem.write_text("not a raster\n")


def _dem_truncated(tmp, v, cfg):
    data = v.dem.read_bytes()
    v.dem.write_bytes(data[: len(data) // 3])


def _dem_without_crs(tmp, v, cfg):
    with rasterio.open(v.dem) as ds:
        profile, z = ds.profile, ds.read(1)
    profile["crs"] = None
    with rasterio.open(v.dem, "w", **profile) as ds:
        ds.write(z, 1)


def _centrelines_wrong_layer(tmp, v, cfg):
    edit(cfg, "[reaches]\n", '[reaches]\nlayer = "rivers"\n')


def _centrelines_wrong_id_field(tmp, v, cfg):
    edit(cfg, "[reaches]\n", '[reaches]\nid_field = "name"\n')


def _centrelines_are_points(tmp, v, cfg):
    rewrite_layer(v.centrelines, "centrelines", lambda g: g.set_geometry([Point(v.x0, v.yc)]))


def _centreline_off_the_dem(tmp, v, cfg):
    rewrite_layer(v.centrelines, "centrelines",
                  lambda g: g.set_geometry([LineString([(v.x0 + 9000, v.yc), (v.x0 + 9400, v.yc)])]))


def _centreline_shorter_than_spacing(tmp, v, cfg):
    rewrite_layer(v.centrelines, "centrelines",
                  lambda g: g.set_geometry([LineString([(v.x0 + 100, v.yc), (v.x0 + 120, v.yc)])]))


def _reach_ids_collide_when_made_path_safe(tmp, v, cfg):
    def two(g):
        line = g.geometry.iloc[0]
        return gpd.GeoDataFrame({"reach_id": ["a/b", "a_b"]}, geometry=[line, line], crs=g.crs)
    rewrite_layer(v.centrelines, "centrelines", two)


def _landcover_wrong_class_field(tmp, v, cfg):
    edit(cfg, 'class_field = "cover"', 'class_field = "kind"')


def _landcover_gap_without_default_n(tmp, v, cfg):
    rewrite_layer(v.landcover, "landcover", lambda g: g[g["cover"] == "channel"])


def _class_missing_from_table(tmp, v, cfg):
    edit(cfg, "[roughness.classes.grass]\nn = 0.04\n", "")


def _csv_table_without_n_column(tmp, v, cfg):
    (tmp / "n.csv").write_text("class,value\nchannel,0.03\n")
    edit(cfg, "[roughness]\n", '[roughness]\ntable = "n.csv"\n')


def _n_out_of_range(tmp, v, cfg):
    edit(cfg, "n = 0.04", "n = 4.0")


def _junction_to_unknown_reach(tmp, v, cfg):
    cfg.write_text(cfg.read_text().replace('downstream = { type = "normal_depth", slope = 0.001 }',
                                           'downstream = { type = "junction", reach = "main" }'))


def _junction_to_itself(tmp, v, cfg):
    cfg.write_text(cfg.read_text().replace('downstream = { type = "normal_depth", slope = 0.001 }',
                                           'downstream = { type = "junction", reach = "r1" }'))


def _section_lines_that_miss_the_centreline(tmp, v, cfg):
    gpd.GeoDataFrame({"reach_id": ["r1", "r1"]},
                     geometry=[LineString([(v.x0 + 50, v.yc + 50), (v.x0 + 50, v.yc + 10)]),
                               LineString([(v.x0 + 300, v.yc + 50), (v.x0 + 300, v.yc - 50)])],
                     crs="EPSG:32630").to_file(tmp / "lines.gpkg", layer="lines", driver="GPKG")
    edit(cfg, "[sections]\n", '[sections]\nlines = "lines.gpkg"\n')


def _output_dir_is_a_file(tmp, v, cfg):
    (tmp / "out").write_text("a file in the way\n")


def _unknown_reach_in_discharge_table(tmp, v, cfg):
    edit(cfg, "discharge = 20.0", "discharge = { r1 = 20.0, r9 = 5.0 }")


def _sample_step_too_coarse(tmp, v, cfg):
    edit(cfg, "width = 120.0", "width = 120.0\nsample_step = 40.0")


def _unknown_vertical_unit(tmp, v, cfg):
    edit(cfg, 'dem = "dem.tif"', 'dem = "dem.tif"\nvertical_unit = "yards"')


def _empty_centreline_layer(tmp, v, cfg):
    rewrite_layer(v.centrelines, "centrelines", lambda g: g.iloc[0:0])


def _managed_folder_links_outside(tmp, v, cfg):
    (tmp / "elsewhere").mkdir()
    (tmp / "out").mkdir()
    (tmp / "out" / "rasters").symlink_to(tmp / "elsewhere")


def _channel(cfg, text):
    cfg.write_text(cfg.read_text() + "\n[channel]\n" + text + "\n")


def _survey_without_z_m(tmp, v, cfg):
    rewrite_layer(write_survey(tmp, v, [100.0]), "survey", lambda g: g.rename(columns={"z_m": "elev"}))
    _channel(cfg, 'survey = "survey.gpkg"')


def _survey_z_m_empty(tmp, v, cfg):
    def blank(g):
        g["z_m"] = g["z_m"].astype(object)
        g.loc[3, "z_m"] = None
        return g
    rewrite_layer(write_survey(tmp, v, [100.0]), "survey", blank)
    _channel(cfg, 'survey = "survey.gpkg"')


def _survey_points_near_no_reach(tmp, v, cfg):
    write_survey(tmp, v, [100.0], extra_xy=[(v.x0 + v.length + 150.0, v.yc), (v.x0 + 50.0, v.yc + 90.0)])
    _channel(cfg, 'survey = "survey.gpkg"')


def _survey_of_lines(tmp, v, cfg):
    gpd.GeoDataFrame({"z_m": [50.0]}, geometry=[LineString([(v.x0 + 50, v.yc - 10), (v.x0 + 50, v.yc + 10)])],
                     crs="EPSG:32630").to_file(tmp / "survey.gpkg", layer="survey", driver="GPKG")
    _channel(cfg, 'survey = "survey.gpkg"')


def _survey_not_found(tmp, v, cfg):
    _channel(cfg, 'survey = "surveys.gpkg"')


def _shape_zero_width(tmp, v, cfg):
    _channel(cfg, "shape = { bottom_width = 0.0, side_slope = 2.0, depth = 1.0 }")


def _shape_depth_and_flow(tmp, v, cfg):
    _channel(cfg, "shape = { bottom_width = 8.0, side_slope = 2.0, depth = 1.0, flow_at_survey = 5.0 }")


def _shape_negative_side_slope(tmp, v, cfg):
    _channel(cfg, "shape = { bottom_width = 8.0, side_slope = -1.0, depth = 1.0 }")


def _flow_at_survey_no_depth_carries(tmp, v, cfg):
    _channel(cfg, "shape = { bottom_width = 8.0, side_slope = 2.0, flow_at_survey = 4000.0 }")


def _channel_reach_unknown(tmp, v, cfg):
    _channel(cfg, "[channel.reaches.r9]\nshape = { bottom_width = 8.0, side_slope = 2.0, depth = 1.0 }")


def _channel_table_empty(tmp, v, cfg):
    _channel(cfg, "")


CASES = [
    ("survey_without_z_m", _survey_without_z_m, ["survey.gpkg", "'z_m'", "not found"]),
    ("survey_z_m_empty", _survey_z_m_empty, ["survey.gpkg", "'z_m'", "feature 3"]),
    ("survey_points_near_no_reach", _survey_points_near_no_reach, ["survey.gpkg", "2 survey point(s)", "feature 73", "feature 74"]),
    ("survey_of_lines", _survey_of_lines, ["survey.gpkg", "point layer"]),
    ("survey_not_found", _survey_not_found, ["[channel] survey", "not found"]),
    ("shape_zero_width", _shape_zero_width, ["[channel] shape bottom_width", "greater than 0"]),
    ("shape_depth_and_flow", _shape_depth_and_flow, ["[channel] shape", "not both"]),
    ("shape_negative_side_slope", _shape_negative_side_slope, ["[channel] shape side_slope", "0 or more"]),
    ("flow_at_survey_too_large", _flow_at_survey_no_depth_carries, ["r1", "flow_at_survey = 4000", "wider than"]),
    ("channel_reach_unknown", _channel_reach_unknown, ["[channel.reaches.r9]", "not in"]),
    ("channel_table_empty", _channel_table_empty, ["[channel]", "neither survey nor shape"]),
    ("out_dot_centrelines_named_sections_gpkg", _out_dot_and_centrelines_named_like_an_output,
     ["[reaches] centrelines", "overwrite"]),
    ("section_lines_inside_output", _section_lines_inside_the_output_folder, ["[sections] lines", "overwrite"]),
    ("roughness_table_named_profile_csv", _roughness_table_named_profile_csv_in_output, ["[roughness] table"]),
    ("dem_inside_output_rasters", _dem_inside_output_rasters, ["[terrain] dem", "rasters/"]),
    ("long_event_name", _long_event_name, ["[[events]][0] name", "100"]),
    ("long_reach_id", _long_reach_id, ["reach id", "characters"]),
    ("flow_change_beyond_end", _flow_change_beyond_reach_end, ["changes[0]", "beyond", "r1"]),
    ("rating_stage_falls", _rating_stage_falls, ["[boundary] downstream stage", "rise"]),
    ("rating_too_short", _rating_does_not_cover_the_flow, ["[boundary] downstream", "outside the rating"]),
    ("channel_class_matches_nothing", _channel_class_matches_nothing, ["channel_class", "'chanel'", "'channel'"]),
    ("stage_far_above", _stage_hundreds_of_metres_above, ["[boundary] downstream", "above the highest ground"]),
    ("stage_below_bed", _stage_below_the_bed, ["[boundary] downstream", "below the lowest ground"]),
    ("cell_size_not_multiple", _cell_size_not_a_multiple, ["[mapping] cell_size", "multiple"]),
    ("all_nodata_dem", _all_nodata_dem, ["dem.tif", "no data"]),
    ("dem_is_text", _dem_is_text, ["dem.tif", "raster"]),
    ("dem_truncated", _dem_truncated, ["dem.tif"]),
    ("dem_without_crs", _dem_without_crs, ["dem.tif", "coordinate reference system"]),
    ("centrelines_wrong_layer", _centrelines_wrong_layer, ["centrelines.gpkg", "rivers"]),
    ("centrelines_wrong_id_field", _centrelines_wrong_id_field, ["centrelines.gpkg", "name"]),
    ("centrelines_are_points", _centrelines_are_points, ["centrelines.gpkg", "not a line"]),
    ("centreline_off_dem", _centreline_off_the_dem, ["r1", "outside the DEM"]),
    ("centreline_shorter_than_spacing", _centreline_shorter_than_spacing, ["r1", "spacing"]),
    ("ids_collide_when_path_safe", _reach_ids_collide_when_made_path_safe, ["a/b", "a_b"]),
    ("landcover_wrong_field", _landcover_wrong_class_field, ["landcover.gpkg", "kind"]),
    ("landcover_gap_no_default_n", _landcover_gap_without_default_n, ["r1", "default_n"]),
    ("class_missing_from_table", _class_missing_from_table, ["grass", "default_n"]),
    ("csv_table_without_n", _csv_table_without_n_column, ["n.csv", "'n'"]),
    ("n_out_of_range", _n_out_of_range, ["[roughness.classes.grass] n", "0.005"]),
    ("junction_to_unknown_reach", _junction_to_unknown_reach, ["junction", "'main'"]),
    ("junction_to_itself", _junction_to_itself, ["junction", "'r1'"]),
    ("section_lines_miss_centreline", _section_lines_that_miss_the_centreline, ["lines.gpkg", "r1", "centreline"]),
    ("output_dir_is_a_file", _output_dir_is_a_file, ["[run] output_dir", "not a folder"]),
    ("unknown_reach_in_discharge", _unknown_reach_in_discharge_table, ["'r9'"]),
    ("sample_step_too_coarse", _sample_step_too_coarse, ["[sections] sample_step"]),
    ("unknown_vertical_unit", _unknown_vertical_unit, ["[terrain] vertical_unit", "yards"]),
    ("empty_centreline_layer", _empty_centreline_layer, ["centrelines.gpkg", "no features"]),
    ("managed_folder_links_outside", _managed_folder_links_outside, ["rasters", "outside the output folder"]),
]


@pytest.mark.parametrize("mutate,words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_is_one_line_exit_2_at_check_and_run_nothing_written(tmp_path, capsys, mutate, words):
    v = make_valley(tmp_path, length=400.0, half_width=60.0, classes=("channel", "grass"))
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, classes={"channel": 0.03, "grass": 0.04})
    mutate(tmp_path, v, cfg)
    before = snapshot(tmp_path)
    for command in (["check", str(cfg)], ["run", str(cfg), "--quiet"]):
        code = main(command)
        cap = capsys.readouterr()
        err = cap.err.strip()
        assert code == 2, (command[0], cap.out, err)
        assert len(err.splitlines()) == 1 and err.startswith("geoflow: error: "), err
        assert "Traceback" not in err and "internal error" not in err
        for w in words:
            assert w in err, (command[0], w, err)
        assert snapshot(tmp_path) == before, f"{command[0]} wrote or changed files"


def _bom(tmp, v, cfg):
    cfg.write_bytes(b"\xef\xbb\xbf" + cfg.read_bytes())


def _crlf(tmp, v, cfg):
    cfg.write_bytes(cfg.read_text().replace("\n", "\r\n").encode("utf-8"))


def _geojson_centrelines(tmp, v, cfg):
    gpd.read_file(v.centrelines).to_file(tmp / "cl.geojson", driver="GeoJSON")
    edit(cfg, 'centrelines = "centrelines.gpkg"', 'centrelines = "cl.geojson"')


def _shapefile_landcover(tmp, v, cfg):
    gpd.read_file(v.landcover).to_file(tmp / "lc.shp")
    edit(cfg, 'landcover = "landcover.gpkg"', 'landcover = "lc.shp"')


AWKWARD_BUT_VALID = [("byte_order_mark", _bom), ("windows_line_ends", _crlf),
                     ("geojson_centrelines", _geojson_centrelines), ("shapefile_landcover", _shapefile_landcover)]


@pytest.mark.parametrize("mutate", [c[1] for c in AWKWARD_BUT_VALID], ids=[c[0] for c in AWKWARD_BUT_VALID])
def test_awkward_but_valid_inputs_are_accepted(tmp_path, capsys, mutate):
    v = make_valley(tmp_path, length=400.0, half_width=60.0, classes=("channel", "grass"))
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, classes={"channel": 0.03, "grass": 0.04})
    mutate(tmp_path, v, cfg)
    assert main(["check", str(cfg)]) == 0, capsys.readouterr().err


@pytest.mark.parametrize("argv", [["run", "x.toml", "--workers", "x"], [], ["frob"], ["run"]])
def test_command_line_mistakes_are_one_line(argv, capsys):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    err = capsys.readouterr().err.strip()
    assert exc.value.code == 2 and len(err.splitlines()) == 1 and "--help" in err, err
