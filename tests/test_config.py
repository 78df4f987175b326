"""Config parsing and the one-line errors users see for bad configs (no outside reference needed:
these check the documented config contract in the README)."""
from __future__ import annotations

import subprocess
import sys

import geopandas as gpd
import pytest
from shapely.affinity import translate
from valleys import make_valley, write_config

from geoflow.cli import main
from geoflow.config import load_config
from geoflow.errors import ConfigError


@pytest.fixture()
def valley(tmp_path):
    return make_valley(tmp_path, length=400.0, half_width=60.0, classes=("channel", "grass"))


def good_config(tmp_path, valley, **kw):
    kw.setdefault("classes", {"channel": 0.03, "grass": 0.04})
    return write_config(tmp_path, valley, discharge=20.0, n=0.03, **kw)


def test_good_config_loads_with_defaults(tmp_path, valley):
    cfg = load_config(good_config(tmp_path, valley))
    assert cfg.sections.spacing == 50.0
    assert cfg.sections.sample_step is None
    assert cfg.hydraulics.friction_slope == "average_conveyance"
    assert cfg.hydraulics.gravity == 9.80665
    assert cfg.run.output_dir == (tmp_path / "out").resolve()
    assert cfg.roughness.n_table() == {"channel": 0.03, "grass": 0.04}
    assert cfg.events[0].upstream_discharge("r1") == 20.0
    assert len(cfg.sha256) == 64


def edit(path, old, new):
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1))
    return path


BAD_CONFIGS = [
    # (description, old text, new text, words the one-line message must contain)
    ("typo in a key", "spacing = 50.0", "spacng = 50.0", ["[sections] spacng", "did you mean 'spacing'"]),
    ("wrong type", "width = 120.0", 'width = "wide"', ["[sections] width", "must be a number"]),
    ("missing file", 'dem = "dem.tif"', 'dem = "no_such_dem.tif"', ["[terrain] dem", "no_such_dem.tif"]),
    ("zero discharge", "discharge = 20.0", "discharge = 0.0", ["discharge", "greater than 0"]),
    ("negative discharge", "discharge = 20.0", "discharge = -5", ["discharge", "greater than 0"]),
    ("unknown boundary", 'type = "normal_depth"', 'type = "normal_dept"', ["[boundary] downstream type",
                                                                             "did you mean 'normal_depth'"]),
    ("TOML syntax", "[sections]", "[sections", ["TOML syntax error", "line"]),
    ("unknown table", "[hydraulics]", "[hydrualics]", ["hydrualics", "unknown key"]),
]


@pytest.mark.parametrize("desc,old,new,words", BAD_CONFIGS, ids=[b[0] for b in BAD_CONFIGS])
def test_bad_config_one_clear_line_exit_2_nothing_written(tmp_path, valley, capsys, desc, old, new, words):
    path = good_config(tmp_path, valley, extra="[hydraulics]\nexpansion = 0.3\n")
    edit(path, old, new)
    code = main(["run", str(path), "--quiet"])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1, err
    assert "Traceback" not in err
    for w in words:
        assert w in err, (w, err)
    assert not (tmp_path / "out").exists()


def test_landcover_class_missing_from_table(tmp_path, valley, capsys):
    path = good_config(tmp_path, valley, classes={"channel": 0.03})
    assert main(["run", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert "'grass'" in err and "default_n" in err and "landcover.gpkg" in err
    assert len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_centreline_outside_dem(tmp_path, valley, capsys):
    gdf = gpd.read_file(valley.centrelines)
    gdf["geometry"] = [translate(g, xoff=5000.0) for g in gdf.geometry]
    gdf.to_file(valley.centrelines, layer="centrelines", driver="GPKG")
    path = good_config(tmp_path, valley)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "r1" in err and "DEM" in err
    assert len(err.splitlines()) == 1
    assert main(["run", str(path), "--quiet"]) == 2
    assert not (tmp_path / "out").exists()


def test_several_problems_reported_together(tmp_path, valley):
    path = good_config(tmp_path, valley)
    edit(path, "spacing = 50.0", "spacing = -1")
    edit(path, 'class_field = "cover"', 'class_feild = "cover"')
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert len(info.value.problems) >= 3     # bad spacing, unknown key, missing class_field
    assert "[sections] spacing" in str(info.value) and "class_feild" in str(info.value)


def test_cli_subprocess_has_no_traceback_and_help_has_caution(tmp_path, valley):
    path = good_config(tmp_path, valley)
    edit(path, "spacing = 50.0", "spacing = 'x'")
    proc = subprocess.run([sys.executable, "-m", "geoflow.cli", "run", str(path)], capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and "[sections] spacing" in proc.stderr
    helptext = subprocess.run([sys.executable, "-m", "geoflow.cli", "--help"], capture_output=True, text=True).stdout
    assert "qualified engineer" in helptext and "local codes" in helptext


def test_per_reach_section_overrides_inherit_defaults(tmp_path, valley):
    path = good_config(tmp_path, valley, extra="[sections.reaches.r1]\nwidth = 80.0\n")
    cfg = load_config(path)
    assert cfg.sections.for_reach("r1").width == 80.0
    assert cfg.sections.for_reach("r1").spacing == 50.0
    assert cfg.sections.for_reach("other").width == 120.0
    edit(path, "width = 80.0", "widht = 80.0")
    with pytest.raises(ConfigError, match=r"\[sections.reaches.r1\] widht"):
        load_config(path)


def test_output_dir_that_is_a_file_and_dem_that_is_not_a_raster(tmp_path, valley, capsys):
    path = good_config(tmp_path, valley)
    (tmp_path / "out").write_text("not a folder")
    assert main(["run", str(path), "--quiet"]) == 2
    assert "[run] output_dir" in capsys.readouterr().err
    (tmp_path / "out").unlink()
    (tmp_path / "notdem.tif").write_text("plain text, not a raster")
    edit(path, 'dem = "dem.tif"', 'dem = "notdem.tif"')
    assert main(["run", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert "notdem.tif" in err and "raster" in err and len(err.splitlines()) == 1
    assert not (tmp_path / "out").exists()
