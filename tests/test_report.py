"""Tests for geoflow.report on a small synthetic reach: the HTML is parsed with the standard-library
html.parser (reference reader) and each embedded PNG is decoded with matplotlib's image reader.

No outside numbers are needed: the checks are that what the page claims to show is there (a map
image, one figure per flagged section, every flag word explained with geoflow.flags' own text,
the run facts, readable headers with units).
"""
from __future__ import annotations

import base64
import io
from html.parser import HTMLParser

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import LineString, box

from geoflow.constants import CAUTION
from geoflow.flags import describe
from geoflow.outputs import PROFILE_COLUMNS
from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN, ReachGeometry, Section
from geoflow.report import MapLayers, ReachContext, event_summary, write_report
from geoflow.report.facts import markers, split_flagged
from geoflow.report.figures import wet_window
from geoflow.report.tables import id_ranges, side_by_side

EVENTS = ["q10", "q100"]
FLAGGED = {2: "not_contained;critical_fallback", 4: "boundary"}      # (q100) section -> flags


def make_geom(n_sections: int = 5) -> ReachGeometry:
    """Straight reach along +x; each section a trapezoidal channel with two floodplains."""
    station = np.array([0.0, 20.0, 40.0, 44.0, 56.0, 60.0, 80.0, 100.0])
    shape = np.array([3.0, 2.8, 2.5, 0.0, 0.0, 2.5, 2.9, 3.2])
    n = np.array([0.06, 0.05, 0.05, 0.035, 0.05, 0.05, 0.08])
    part = np.array([LEFT_FLOODPLAIN] * 3 + [CHANNEL] + [RIGHT_FLOODPLAIN] * 3, dtype=np.int8)
    secs = []
    for i in range(n_sections):
        x = 100.0 * i
        secs.append(Section(reach_id="demo-01", section_id=i, chainage=x,
                            line=LineString([(x, 100.0), (x, 0.0)]), station=station,
                            elevation=shape + 10.0 - 0.002 * x, n=n, landcover=None, part=part))
    return ReachGeometry(reach_id="demo-01", centreline=LineString([(0, 50), (100.0 * (n_sections - 1), 50)]),
                         sections=tuple(secs), lengths=np.full((n_sections - 1, 3), 100.0))


def make_profile(geom) -> pd.DataFrame:
    rows = []
    for k, event in enumerate(EVENTS):
        for s in geom.sections:
            bed = s.bed_elevation
            depth = 1.5 + k + 0.1 * s.section_id
            rows.append({"reach_id": "demo-01", "event": event, "section_id": s.section_id,
                         "chainage_m": s.chainage, "discharge_m3s": 50.0 * (k + 1), "regime": "subcritical",
                         "bed_m": bed, "wse_m": bed + depth, "depth_m": depth, "energy_m": bed + depth + 0.15,
                         "critical_wse_m": bed + 0.9 + 0.5 * k, "critical_depth_m": 0.9 + 0.5 * k,
                         "velocity_ms": 1.2 + 0.1 * k, "froude": 0.3 + 0.01 * s.section_id, "alpha": 1.1,
                         "area_m2": 40.0, "top_width_m": 20.0, "friction_slope": 0.001402,
                         "q_channel_m3s": 40.0, "q_floodplain_left_m3s": 5.0, "q_floodplain_right_m3s": 5.0,
                         "flags": FLAGGED.get(s.section_id, "") if k == 1 else ""})
    return pd.DataFrame(rows, columns=list(PROFILE_COLUMNS))


def make_context(geom) -> ReachContext:
    x = np.linspace(-20, 420, 111)
    y = np.linspace(110, -10, 31)
    dem = (np.abs(y - 50)[:, None] / 10 + 10 - 0.002 * x[None, :], (-20.0, -10.0, 420.0, 110.0))
    depth = {e: (np.where(np.abs(y - 50)[:, None] < 8 + 4 * k, 1.0 + k, np.nan) * np.ones((31, 111)),
                 (-20.0, -10.0, 420.0, 110.0)) for k, e in enumerate(EVENTS)}
    layers = MapLayers(dem=dem, depth=depth, outlines={e: [box(0, 42 - 4 * k, 400, 58 + 4 * k)]
                                                        for k, e in enumerate(EVENTS)})
    facts = [("run name", "t1"), ("program", "geoflow 9.9"), ("config SHA-256", "abc123"), ("CRS", "EPSG:32633"),
             ("DEM cell size (m)", "2"), ("DEM vertical unit", "m")]
    events = pd.DataFrame({"event": EVENTS, "downstream boundary": ["normal depth, slope 0.001"] * 2})
    return ReachContext(run_facts=facts, events_table=events, layers=layers, markers=((150.0, "trib joins"),),
                        index="index.html")


class Page(HTMLParser):
    """Collects images (with the id of the enclosing figure), text, table cells and ids."""

    def __init__(self):
        super().__init__()
        self.imgs, self.text, self.title, self.ids, self.cells = [], [], [], set(), []
        self._figure, self._in_title, self._cell = None, False, None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "figure":
            self._figure = a.get("id")
        if tag == "img":
            self.imgs.append(dict(a, figure=self._figure))
        if tag in ("td", "th"):
            self._cell = []
        self._in_title = tag == "title"

    def handle_endtag(self, tag):
        if tag == "figure":
            self._figure = None
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)
        if self._in_title:
            self.title.append(data)


def parse(path) -> Page:
    p = Page()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def png(img) -> np.ndarray:
    assert img["src"].startswith("data:image/png;base64,")
    return matplotlib.image.imread(io.BytesIO(base64.b64decode(img["src"].split(",", 1)[1])), format="png")


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    geom = make_geom()
    path = tmp_path_factory.mktemp("rep") / "report" / "demo-01.html"
    write_report(path, "demo-01", geom, make_profile(geom), EVENTS, context=make_context(geom))
    return path, parse(path)


def test_caution_and_reach_id(report):
    path, page = report
    assert CAUTION in " ".join(page.text)
    assert "demo-01" in "".join(page.title)
    assert not any(".tmp-" in p.name for p in path.parent.iterdir())


def test_map_image_and_every_flagged_section_plotted(report):
    _, page = report
    maps = [i for i in page.imgs if i["alt"].startswith("map")]
    assert len(maps) == 1 and png(maps[0]).shape[1] > 800
    review, notes = [2], [4]              # 4 carries an info flag only: drawn as a tile
    for sid in review:
        figs = [i for i in page.imgs if i["figure"] == f"section-{sid}"]
        assert len(figs) == 1 and f"cross-section {sid}" in figs[0]["alt"], sid
        assert png(figs[0]).shape[0] > 200
    assert {i["figure"] for i in page.imgs if (i["figure"] or "").startswith("section-")} == \
        {f"section-{s}" for s in review}
    tiles = [i for i in page.imgs if i["figure"] == "sections-noted-more"]
    assert len(tiles) == 1 and tiles[0]["alt"] == "cross-sections " + ", ".join(map(str, notes))
    assert png(tiles[0]).shape[0] > 150
    assert any(i["alt"] == "all cross-sections" for i in page.imgs)


def test_every_flag_word_explained_with_its_entry(report):
    _, page = report
    words = {w for f in FLAGGED.values() for w in f.split(";")}
    for w in words:
        entry = describe(w)
        assert w in page.cells and entry.meaning in page.cells and entry.action in page.cells, w


def test_run_facts_and_readable_headers(report):
    _, page = report
    for item, value in make_context(make_geom()).run_facts:
        i = page.cells.index(item)
        assert page.cells[i + 1] == value
    text = " ".join(page.text)
    assert "normal depth, slope 0.001" in text and "trib joins at 150 m" in text
    for header in ("mean velocity (m/s)", "friction slope (m/m)", "water level (m)", "depth (m)"):
        assert header in page.cells
    assert "0.001402" in page.cells                      # 4 significant digits, not 0.0014
    assert '<a href="index.html">' in report[0].read_text(encoding="utf-8")


def test_side_by_side_has_one_row_per_section_and_events_as_column_groups():
    geom = make_geom()
    t = side_by_side(make_profile(geom), EVENTS)
    assert len(t) == len(geom.sections)
    assert set(t.columns.get_level_values(0)) == {"", *EVENTS}
    assert t[("q100", "water level (m)")].iloc[0] == f"{geom.sections[0].bed_elevation + 2.5:.3f}"


def test_event_summary_values():
    # Values computed by hand from make_profile (plain arithmetic, no source needed).
    s = event_summary(make_profile(make_geom()), EVENTS).set_index("event")
    assert s.loc["q10", "largest depth (m)"] == pytest.approx(1.5 + 0.4)
    assert s.loc["q100", "largest depth (m)"] == pytest.approx(2.5 + 0.4)
    assert s.loc["q100", "mean velocity (m/s)"] == pytest.approx(1.3)
    assert s.loc["q10", "largest Froude number"] == pytest.approx(0.34)
    assert s.loc["q10", "flags to review (sections)"] == "none"
    assert s.loc["q100", "flags to review (sections)"] == "not_contained: 2; critical_fallback: 2"
    assert s.loc["q100", "notes (sections)"] == "boundary: 4"       # an info flag: described, not to review


def test_id_ranges_and_split_of_flagged_sections():
    # Plain bookkeeping (no source needed): runs of consecutive ids; kinds from geoflow.flags.
    assert id_ranges([5, 3, 6, 7, 12, 8]) == "3, 5-8, 12"
    flagged = {1: {"storage": []}, 2: {"storage": [], "critical_fallback": ["q100"]}, 3: {"ground_gap_filled": []},
               4: {"boundary": ["q2"]}}
    review, notes = split_flagged(flagged)
    assert list(review) == [2, 3] and list(notes) == [1, 4]


def test_section_zoom_is_the_wet_part_not_the_valley():
    """Hand geometry: ground 3 m up at 0-20 m, the channel 40-60 m; water at 11.0 m wets 40.4-59.6 m."""
    s = make_geom().sections[0]
    x0, x1, y0, y1 = wet_window(s, [11.0])
    assert 20.0 - 1e-9 <= x0 < 40.0 and 60.0 < x1 <= 80.0 + 1e-9
    assert y1 < 12.0 and y0 > 9.0 - 1.0


def test_short_reach_and_no_context(tmp_path):
    geom = make_geom(2)
    path = write_report(tmp_path / "r.html", "demo-01", geom, make_profile(geom), EVENTS)
    page = parse(path)
    assert not any(i["alt"].startswith("map") for i in page.imgs)      # no layers: no map
    assert any(i["alt"] == "long profile" for i in page.imgs)


def test_markers_merge_a_confluence_and_a_flow_change_at_one_place():
    from types import SimpleNamespace as NS

    from geoflow.config.model import BoundarySpec, Event, FlowChange
    bound = {"t": BoundarySpec("junction", reach="m"), "m": BoundarySpec("normal_depth", slope=0.001)}
    cfg = NS(boundary=NS(for_reach=lambda rid: (bound[rid], None)),
             events=(Event("q", {"m": 1.0, "t": 1.0}, (FlowChange(100.0, 2.0, "m"),)),))
    lines = {"m": LineString([(0, 0), (200, 0)]), "t": LineString([(100, 80), (100, 0)])}
    assert markers(cfg, "m", lines) == [(100.0, "t joins; flow change")]
    assert markers(cfg, "t", lines) == [(80.0, "joins m")]
