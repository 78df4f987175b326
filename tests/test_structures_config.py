"""[[structures]] in the config: bad input is one line, exit 2 at `check` and `run`, nothing written; good
input places the faces where the README says.

No outside reference is needed for the messages (the documented contract, README config reference); the face
placement is checked against the chainages it must have (chainage -/+ half the length) and shapely geometry.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from shapely.geometry import LineString
from valleys import make_valley, write_config

from geoflow import check
from geoflow.cli import main
from geoflow.errors import ConfigError


def snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def culvert(**over) -> str:
    keys = dict(reach='"r1"', chainage=200.0, type='"culvert"', id='"pipe"', shape='"circular"', diameter=1.2,
                length=20.0, invert_up=50.3, invert_down=50.2, n=0.013, inlet='"concrete_square_edge_headwall"',
                crest=52.5, crest_length=60.0)
    keys.update(over)
    return "\n[[structures]]\n" + "".join(f"{k} = {v}\n" for k, v in keys.items() if v is not None)


def bridge(**over) -> str:
    keys = dict(reach='"r1"', chainage=200.0, type='"bridge"', id='"span"', low_chord=53.0, high_chord=54.0,
                length=10.0)
    keys.update(over)
    return "\n[[structures]]\n" + "".join(f"{k} = {v}\n" for k, v in keys.items() if v is not None)


def _user_lines(tmp: Path, v) -> str:
    lines = [LineString([(v.x0 + c, v.yc + 50), (v.x0 + c, v.yc - 50)]) for c in (20.0, 150.0, 180.0)]
    gpd.GeoDataFrame({"reach_id": ["r1"] * 3}, geometry=lines, crs="EPSG:32630").to_file(tmp / "lines.gpkg")
    return 'lines = "lines.gpkg"\n'


CASES = [
    ("chainage_off_the_reach", lambda tmp, v: culvert(chainage=395.0), ["'pipe'", "chainage", "off reach 'r1'"]),
    ("inverts_above_the_road_crest", lambda tmp, v: culvert(invert_up=53.0, invert_down=52.9),
     ["'pipe'", "above the road crest"]),
    ("culvert_wider_than_the_valley", lambda tmp, v: culvert(barrels=60, diameter=2.0),
     ["'pipe'", "wider than the valley"]),
    ("low_chord_above_high_chord", lambda tmp, v: bridge(low_chord=55.0), ["'span'", "high_chord", "low_chord"]),
    ("unknown_type", lambda tmp, v: culvert(type='"culvret"'), ["type", "did you mean 'culvert'"]),
    ("unknown_inlet", lambda tmp, v: culvert(inlet='"concrete_square_edge"'),
     ["'pipe'", "inlet", "did you mean 'concrete_square_edge_headwall'"]),
    ("unknown_key", lambda tmp, v: culvert(diametre=1.2), ["'pipe'", "diametre", "did you mean 'diameter'"]),
    ("reach_that_does_not_exist", lambda tmp, v: culvert(reach='"r2"'), ["'pipe'", "'r2'", "not a reach"]),
    ("two_at_the_same_place", lambda tmp, v: culvert() + culvert(id='"pipe2"', chainage=210.0),
     ["'pipe2'", "same place", "'pipe'"]),
    ("same_id_twice", lambda tmp, v: culvert() + culvert(chainage=320.0), ["'pipe'", "another structure"]),
    ("unsafe_id", lambda tmp, v: culvert(id='"a/b"'), ["id", "'a/b'"]),
    ("road_coefficient_without_crest", lambda tmp, v: culvert(crest=None, crest_length=None, coefficient=1.5),
     ["'pipe' coefficient", "needs crest"]),
    ("no_user_section_downstream", lambda tmp, v: _user_lines(tmp, v) + culvert(chainage=300.0),
     ["'pipe'", "no section downstream"]),
    ("low_chord_below_the_opening_ground", lambda tmp, v: bridge(low_chord=50.0, high_chord=54.0),
     ["'span'", "low_chord"]),
]


@pytest.mark.parametrize("make,words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_structure_is_one_line_exit_2_at_check_and_run(tmp_path, capsys, make, words):
    v = make_valley(tmp_path, length=400.0, half_width=60.0)
    text = make(tmp_path, v)
    lines = ""
    if text.startswith("lines"):
        lines, text = text.split("\n", 1)
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, extra=text)
    if lines:
        cfg.write_text(cfg.read_text().replace("width = 120.0\n", f"width = 120.0\n{lines}\n"))
    before = snapshot(tmp_path)
    for command in (["check", str(cfg)], ["run", str(cfg), "--quiet"]):
        code = main(command)
        err = capsys.readouterr().err.strip()
        assert code == 2, (command[0], err)
        assert len(err.splitlines()) == 1 and err.startswith("geoflow: error: "), err
        assert "Traceback" not in err and "internal error" not in err
        for w in words:
            assert w in err, (command[0], w, err)
        assert snapshot(tmp_path) == before


def test_faces_are_cut_either_side_and_parallel(tmp_path):
    # a bent centreline: the automatic sections turn with it, the two faces share the direction at the structure
    v = make_valley(tmp_path, length=400.0, half_width=60.0)
    bent = LineString([(v.x0, v.yc - 5.0), (v.x0 + 200.0, v.yc + 5.0), (v.x0 + 400.0, v.yc - 5.0)])
    gpd.GeoDataFrame({"reach_id": ["r1"]}, geometry=[bent], crs="EPSG:32630").to_file(v.centrelines,
                                                                                       layer="centrelines")
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, width=80.0, extra=culvert(chainage=170.0))
    geom = check(cfg).geometries["r1"]
    chain = np.array([s.chainage for s in geom.sections])
    assert np.isin([160.0, 180.0], chain).all()
    assert not ((chain > 160.0) & (chain < 180.0)).any()
    assert not ((chain > 155.0) & (chain < 160.0)).any() and not ((chain > 180.0) & (chain < 185.0)).any()
    k = int(np.flatnonzero(chain == 160.0)[0])
    up, down = geom.sections[k], geom.sections[k + 1]
    assert "structure_upstream_face" in up.flags and "structure_downstream_face" in down.flags
    d_up = np.diff(shapely.get_coordinates(up.line), axis=0)[0]
    d_down = np.diff(shapely.get_coordinates(down.line), axis=0)[0]
    cross = d_up[0] * d_down[1] - d_up[1] * d_down[0]
    assert abs(cross) / (np.hypot(*d_up) * np.hypot(*d_down)) < 1e-9          # parallel (shapely coordinates)
    (place,) = geom.structures
    assert place.upstream == k and place.chainage == 170.0
    assert geom.structure_markers() == [(170.0, "culvert pipe")]


def test_user_section_lines_nearest_either_side_are_the_faces(tmp_path):
    v = make_valley(tmp_path, length=400.0, half_width=60.0)
    lines = [LineString([(v.x0 + c, v.yc + 50), (v.x0 + c, v.yc - 50)]) for c in (10.0, 120.0, 190.0, 260.0, 390.0)]
    gpd.GeoDataFrame({"reach_id": ["r1"] * 5}, geometry=lines, crs="EPSG:32630").to_file(tmp_path / "lines.gpkg")
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, extra=culvert(chainage=230.0))
    cfg.write_text(cfg.read_text().replace("width = 120.0\n", 'width = 120.0\nlines = "lines.gpkg"\n'))
    geom = check(cfg).geometries["r1"]
    assert [s.chainage for s in geom.sections] == pytest.approx([10.0, 120.0, 190.0, 260.0, 390.0])
    assert "structure_upstream_face" in geom.sections[2].flags
    assert "structure_downstream_face" in geom.sections[3].flags
    assert geom.structures[0].upstream == 2


def test_structures_parse_with_defaults(tmp_path):
    v = make_valley(tmp_path, length=400.0, half_width=60.0)
    extra = bridge(piers='{ count = 2, width = 0.8, shape = "semicircular" }', opening="{ left = 20.0, right = 25.0 }")
    extra += '\n[[structures]]\nreach = "r1"\nchainage = 300.0\ntype = "weir"\ncrest = 51.0\ncrest_length = 10.0\n'
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, extra=extra)
    result = check(cfg)
    span, weir = result.config.structures
    assert (span.id, span.type, span.faces, span.opening) == ("span", "bridge", (195.0, 205.0), (20.0, 25.0))
    assert span.hydraulics.piers.count == 2 and span.hydraulics.low_flow_method == "highest"
    assert (weir.id, weir.faces, weir.hydraulics.kind) == ("weir_2", (299.0, 301.0), "broad_crested")
    with pytest.raises(ConfigError, match="coefficient rule"):
        check(write_config(tmp_path, v, discharge=20.0, n=0.03, extra=extra.replace(
            "crest_length = 10.0", 'crest_length = 10.0\ncoefficient = "rehbok"')))


def test_demo_bridge_sits_on_the_road_crossing_with_the_dem_opening():
    # sample_gis/README.md: the road crosses the valley at E 302985 (its crest 1.3 m above the floodplain)
    # with an opening over the river; make_demo.py lowers the road by (30 m - distance from the river
    # centreline) / 2 near the river, so the ground along the road reaches the deck soffit (48.40 m, about
    # 0.37 m below the crest there) at 30 - 2 x 0.37 = 29.3 m either side of the centreline
    from geoflow.batch.reach import build_tables
    from geoflow.batch.structures import bridge_setup
    root = Path(__file__).resolve().parents[1]
    result = check(root / "configs" / "demo.toml")
    geom = result.geometries["main"]
    road = LineString([(302985.0, 5200000.0), (302985.0, 5201400.0)])
    assert geom.centreline.project(geom.centreline.intersection(road)) == pytest.approx(3193.0, abs=0.5)
    (place,) = geom.structures
    up, down = geom.sections[place.upstream], geom.sections[place.upstream + 1]
    assert (up.chainage, down.chainage) == (3184.0, 3202.0)
    assert shapely.distance(up.line, road) > 6.75 and shapely.distance(down.line, road) > 6.75   # off the embankment
    bridge, _, _ = bridge_setup(result.config.structures[0], place, build_tables(geom, result.config))
    assert -bridge.opening_left == pytest.approx(29.3, abs=1.0) and bridge.opening_right == pytest.approx(29.3, abs=1.0)
