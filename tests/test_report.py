"""Tests for geoflow.report: the HTML is parsed with the standard-library html.parser
(reference reader) and each embedded PNG is decoded with matplotlib's image reader."""
from __future__ import annotations

import base64
import io
from html.parser import HTMLParser

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from shapely.geometry import LineString

from geoflow.constants import CAUTION
from geoflow.outputs import PROFILE_COLUMNS
from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN, ReachGeometry, Section
from geoflow.report import event_summary, write_report

EVENTS = ["q10", "q100"]


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
                         "chainage_m": s.chainage, "discharge_m3s": 50.0 * (k + 1), "bed_m": bed,
                         "wse_m": bed + depth, "energy_m": bed + depth + 0.15, "critical_wse_m": bed + 0.9 + 0.5 * k,
                         "velocity_ms": 1.2 + 0.1 * k, "froude": 0.3 + 0.01 * s.section_id, "alpha": 1.1,
                         "area_m2": 40.0, "top_width_m": 20.0, "friction_slope": 2e-3,
                         "flags": "extended;near_critical" if (k == 1 and s.section_id == 2) else ""})
    return pd.DataFrame(rows, columns=list(PROFILE_COLUMNS))


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.imgs, self.text, self.title = [], [], []
        self._in_title = False

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.imgs.append(dict(attrs))
        self._in_title = tag == "title"

    def handle_data(self, data):
        self.text.append(data)
        if self._in_title:
            self.title.append(data)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    geom = make_geom()
    path = tmp_path_factory.mktemp("rep") / "report" / "demo-01.html"
    write_report(path, "demo-01", geom, make_profile(geom), EVENTS)
    parser = _Collector()
    parser.feed(path.read_text(encoding="utf-8"))
    return path, parser


def test_caution_and_reach_id(report):
    path, parser = report
    text = " ".join(parser.text)
    assert CAUTION in text
    assert "demo-01" in "".join(parser.title)
    assert "qualified engineer" in CAUTION and not any(".tmp-" in p.name for p in path.parent.iterdir())


def test_one_image_per_figure_and_self_contained(report):
    _, parser = report
    # 1 long profile + 3 cross-sections (upstream, middle, downstream).
    assert len(parser.imgs) == 4
    for img in parser.imgs:
        assert img["src"].startswith("data:image/png;base64,")
        pixels = matplotlib.image.imread(io.BytesIO(base64.b64decode(img["src"].split(",", 1)[1])), format="png")
        assert pixels.ndim == 3 and pixels.shape[0] > 200 and pixels.shape[1] > 500


def test_tables_present(report):
    _, parser = report
    text = " ".join(parser.text)
    assert "Summary by event" in text and "Full profile table" in text
    assert "2 (extended, near_critical)" in text        # flagged section and why


def test_event_summary_values():
    # Values computed by hand from make_profile (plain arithmetic, no source needed).
    geom = make_geom()
    s = event_summary(make_profile(geom), EVENTS).set_index("event")
    assert s.loc["q10", "largest depth (m)"] == pytest.approx(1.5 + 0.4)
    assert s.loc["q100", "largest depth (m)"] == pytest.approx(2.5 + 0.4)
    assert s.loc["q100", "mean velocity (m/s)"] == pytest.approx(1.3)
    assert s.loc["q10", "largest Froude number"] == pytest.approx(0.34)
    assert s.loc["q10", "flagged sections"] == "none"


def test_short_reach_two_sections(tmp_path):
    geom = make_geom(2)
    path = write_report(tmp_path / "r.html", "demo-01", geom, make_profile(geom), EVENTS)
    parser = _Collector()
    parser.feed(path.read_text(encoding="utf-8"))
    assert len(parser.imgs) == 1 + 2
