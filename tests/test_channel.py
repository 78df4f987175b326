"""The channel below the DEM surface, unit by unit (geoflow.sections.burn, .survey, .stations, .channel).

References named beside each check:
- Manning's equation Q = (1/n) A R^(2/3) S^(1/2) and trapezoid geometry A = (b + z h) h,
  P = b + 2 h sqrt(1 + z^2) (Chow 1959, Open-Channel Hydraulics, ch. 6);
- bankfull trapezoid holding A = W D: h = [W - sqrt(W^2 - 4 z W D)] / (2 z), b = W - 2 z h, with
  W, D from the nationwide regional curves of Bieger, Rathjens, Allen & Arnold (2015, JAWRA,
  supplementary Table 1): W = 2.70 DA^0.352, D = 0.30 DA^0.213 (DA in km2; units from memory);
  the numbers h = 0.9255 m, b = 9.9553 m and the rectangle burn depth 0.6015 m are computed
  (numpy / scipy brentq), not read from a publication;
- the burn-depth recipe (depth at which the flown-water channel carries the flow of the flight
  day) of Corum, Ball & Hubbard (2015, SEDHYD);
- channel-fitted interpolation between surveyed sections at equal normalised station
  (Merwade, Maidment & Goff 2006; from memory): checked against a channel that moves across.
Areas of cut channels are measured independently with shapely polygons.
"""
from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy.optimize import brentq
from shapely.geometry import LineString, Polygon

from geoflow.config.model import ChannelShape
from geoflow.errors import GeometryError
from geoflow.records import CHANNEL, LEFT_FLOODPLAIN, RIGHT_FLOODPLAIN, ReachGeometry, Section, SurveyPoints
from geoflow.sections import fit_channel
from geoflow.sections.burn import (
    cut_trapezoid,
    depth_for_flow,
    flown_water,
    manning_discharge,
    trapezoid_area,
    trapezoid_from_bankfull,
    trapezoid_perimeter,
)
from geoflow.sections.stations import insert_stations
from geoflow.sections.survey import assign_points, datum_summary, merge_profiles, surveyed_sections


# ------------------------------------------------------------------------------ shape functions
def test_bankfull_trapezoid_check_values():
    """Bieger et al. (2015) nationwide curves at DA = 100 km2 -> W 13.657 m, D 0.800 m (computed);
    the z = 2 trapezoid holding A = W D: h = 0.9255 m, b = 9.9553 m (computed)."""
    w, d = 2.70 * 100 ** 0.352, 0.30 * 100 ** 0.213
    assert w == pytest.approx(13.657, abs=5e-4) and d == pytest.approx(0.800, abs=5e-4)
    h, b = trapezoid_from_bankfull(w, d, 2.0)
    assert h == pytest.approx(0.9255, abs=5e-5)
    assert b == pytest.approx(9.9553, abs=5e-5)
    assert trapezoid_area(b, 2.0, h) == pytest.approx(w * d, rel=1e-12)       # it holds A = W D
    assert b + 2 * 2.0 * h == pytest.approx(w, rel=1e-12)                    # under the top width W
    assert trapezoid_from_bankfull(10.0, 0.8, 0.0) == (0.8, 10.0)            # rectangle: h = D
    with pytest.raises(GeometryError, match="side slope"):
        trapezoid_from_bankfull(4.0, 2.0, 2.0)                                # 4 z D > W: no trapezoid


def test_burn_depth_check_value_rectangle():
    """Depth to burn for a rectangle 13.66 m wide, n 0.035, S 0.001, Q_L = 5 m3/s: 0.6015 m (computed,
    Manning, Chow 1959 ch. 6; the recipe of Corum, Ball & Hubbard 2015)."""
    assert depth_for_flow(5.0, 13.66, 0.0, 0.035, 0.001) == pytest.approx(0.6015, abs=5e-5)


@pytest.mark.parametrize("q,b,z,n,s", [(18.0, 12.0, 2.0, 0.03, 0.001), (0.5, 2.0, 1.0, 0.05, 0.004)])
def test_depth_for_flow_is_manning_normal_depth(q, b, z, n, s):
    """Against Manning's equation written out here (Chow 1959, ch. 6), solved by brentq."""
    def f(y):
        a, p = (b + z * y) * y, b + 2 * y * np.sqrt(1 + z * z)
        return a * (a / p) ** (2 / 3) * np.sqrt(s) / n - q
    assert depth_for_flow(q, b, z, n, s) == pytest.approx(brentq(f, 1e-6, 20.0, xtol=1e-12), rel=1e-9)
    h = depth_for_flow(q, b, z, n, s)
    assert manning_discharge(trapezoid_area(b, z, h), trapezoid_perimeter(b, z, h), n, s) == pytest.approx(q)
    assert depth_for_flow(1e6, b, z, n, s) is None                           # no depth within 30 m carries it


# ------------------------------------------------------------------------------ sections
def lidar_section(flat_from=44.0, flat_to=56.0, level=10.0, bank=13.0, step=0.5, edges=(40.0, 60.0)):
    """A 100 m section: floodplain at ``bank``, channel banks down to a flat water strip at ``level``
    (a LiDAR DEM's flown water surface); channel part between ``edges``."""
    st = np.arange(0.0, 100.0 + 1e-9, step)
    z = np.interp(st, [0, edges[0], flat_from, flat_to, edges[1], 100], [bank, bank, level, level, bank, bank])
    mid = 0.5 * (st[:-1] + st[1:])
    part = np.where(mid < edges[0], LEFT_FLOODPLAIN, np.where(mid > edges[1], RIGHT_FLOODPLAIN, CHANNEL)).astype(np.int8)
    return Section(reach_id="r", section_id=0, chainage=0.0, line=LineString([(0, 50), (0, -50)]), station=st,
                   elevation=z, n=np.full(st.size - 1, 0.03), landcover=np.full(st.size - 1, "c"), part=part)


def cut_area(sec: Section, level: float) -> float:
    """Area (m2) between the DEM ground and the ground used, below ``level`` (shapely polygons)."""
    lower = Polygon(list(zip(sec.station, sec.elevation)) + [(sec.station[-1], level + 50), (0, level + 50)])
    upper = Polygon(list(zip(sec.station, sec.dem_ground)) + [(sec.station[-1], level + 50), (0, level + 50)])
    return float(shapely.difference(lower, upper).area)


def test_flown_water_strip():
    w = flown_water(lidar_section(44.0, 58.0))
    assert (w.level, w.centre, w.width) == (10.0, 51.0, 14.0)


def test_cut_trapezoid_matches_the_shape():
    """The cut region is the trapezoid A = (b + z h) h (area by shapely), centred on the flown water strip,
    corners at stations; ground is only lowered; DEM ground kept."""
    sec = lidar_section()
    cut = cut_trapezoid(sec, bottom_width=6.0, side_slope=2.0, depth=1.5)
    assert cut.bed_source == "shape" and np.array_equal(np.interp(cut.station, sec.station, sec.elevation),
                                                         cut.dem_elevation)
    assert cut_area(cut, 10.0) == pytest.approx(trapezoid_area(6.0, 2.0, 1.5), rel=1e-9)
    assert cut.bed_elevation == pytest.approx(8.5)
    for s in (47.0, 53.0, 44.0, 56.0):                                    # toes and top corners
        assert np.any(np.isclose(cut.station, s))
    assert np.all(cut.elevation <= cut.dem_elevation + 1e-12)
    assert np.array_equal(cut.part[cut.station[:-1] < 40.0], sec.part[sec.station[:-1] < 40.0])
    assert "channel_shape_clipped" not in cut.flags


def test_cut_rectangle_and_clipping():
    rect = cut_trapezoid(lidar_section(), bottom_width=8.0, side_slope=0.0, depth=1.0)
    assert cut_area(rect, 10.0) == pytest.approx(8.0 * 1.0, rel=1e-3)     # walls 1 mm wide
    wide = cut_trapezoid(lidar_section(), bottom_width=18.0, side_slope=2.0, depth=2.0)
    assert "channel_shape_clipped" in wide.flags
    left, right = wide.channel_edges
    outside = (wide.station < left) | (wide.station > right)
    assert np.array_equal(wide.elevation[outside], wide.dem_elevation[outside])   # floodplain untouched


def test_insert_stations_keeps_ground_and_segments():
    sec = lidar_section()
    new = insert_stations(sec, [40.25, 50.1, 50.10005, 99.99995, 150.0])
    assert new.station.size == sec.station.size + 2                        # 0.05 mm apart and off the end skipped
    assert np.allclose(np.interp(sec.station, new.station, new.elevation), sec.elevation)
    assert np.interp(40.25, new.station, new.elevation) == pytest.approx(np.interp(40.25, sec.station, sec.elevation))
    k = int(np.flatnonzero(np.isclose(new.station, 40.25))[0])
    assert new.part[k - 1] == new.part[k] == sec.part[80]                  # split segment keeps its part
    assert new.n.size == new.landcover.size == new.station.size - 1


# ------------------------------------------------------------------------------ survey
def straight_reach(sections_z, chainages, width=100.0):
    """A reach along +x: sections across it (left end north), each with its channel edges at 40-60 m."""
    secs = []
    for k, (c, z) in enumerate(zip(chainages, sections_z)):
        base = lidar_section()
        secs.append(Section(reach_id="r", section_id=k, chainage=float(c), line=LineString([(c, 50), (c, -50)]),
                            station=base.station, elevation=np.asarray(z, dtype=float), n=base.n,
                            landcover=base.landcover, part=base.part))
    return ReachGeometry(reach_id="r", centreline=LineString([(0, 0), (chainages[-1], 0)]), sections=tuple(secs),
                         lengths=np.zeros((len(secs) - 1, 3)))


def moving_channel(c, offset_per_m=0.02, depth=2.0):
    """True bed: a V of ``depth`` m below 10 m whose thalweg sits at y = -offset_per_m * c (moves south)."""
    def ground(y):
        return 10.0 - np.clip(depth - np.abs(y + offset_per_m * c) * depth / 6.0, 0.0, None)
    return ground


def survey_at(c, ground, ys):
    x = np.full(ys.size, float(c))
    return x, ys, ground(ys)


def test_channel_fitted_interpolation_follows_a_moving_thalweg():
    """Surveys at chainage 0 and 200 of a V whose thalweg moves 4 m across, channel edges moving with it:
    the section at chainage 100 gets the V at its own place (Merwade et al. 2006), within 1 mm, where
    plain interpolation at equal station would give two half-deep notches."""
    ys = np.arange(-9.0, 9.01, 0.25)
    pts = [survey_at(c, moving_channel(c), ys - 0.02 * c) for c in (0.0, 200.0)]
    x, y, z = (np.concatenate(a) for a in zip(*pts))
    survey = SurveyPoints(x, y, z, np.full(z.size, np.nan), np.arange(z.size))
    flat = np.full(lidar_section().station.size, 10.0)
    geom = straight_reach([flat] * 3, [0.0, 100.0, 200.0])
    # channel edges follow the channel: shift the part codes of each section by its offset (stations from the north)
    secs = []
    for s in geom.sections:
        mid = 0.5 * (s.station[:-1] + s.station[1:])
        shift = 0.02 * s.chainage
        part = np.where(mid < 41 + shift, 0, np.where(mid > 59 + shift, 2, 1)).astype(np.int8)
        secs.append(Section(**{**s.__dict__, "part": part}))
    geom = ReachGeometry(reach_id="r", centreline=geom.centreline, sections=tuple(secs), lengths=geom.lengths)
    surveyed, dry, notes, _ = surveyed_sections(geom, survey, spacing=100.0)
    assert [s.section_id for s in surveyed] == [0, 2] and not notes
    mid = merge_profiles(geom.sections, surveyed)[1]
    truth = moving_channel(100.0)(50.0 - mid.station)              # station s is y = 50 - s
    left, right = mid.channel_edges
    inside = (mid.station >= left) & (mid.station <= right)
    assert mid.bed_source == "survey"
    np.testing.assert_allclose(mid.elevation[inside], truth[inside], atol=1e-3)
    assert mid.bed_elevation == pytest.approx(8.0, abs=1e-3)
    assert np.array_equal(mid.elevation[~inside], mid.dem_elevation[~inside])


def test_datum_offset_is_reported():
    info, notes = datum_summary(np.array([0.41, 0.39, 0.40, 0.42, 0.38]), "s.gpkg", "r")
    assert info == {"points": 5, "median_m": 0.4, "mad_m": 0.01}
    assert notes and "another vertical datum" in notes[0] and "+0.40 m" in notes[0]
    assert datum_summary(np.array([0.02, -0.01, 0.0]), "s.gpkg", "r")[1] == []


def test_assign_points_to_the_nearest_reach():
    reaches = [("a", LineString([(0, 0), (100, 0)])), ("b", LineString([(0, 40), (100, 40)]))]
    pts = SurveyPoints(np.array([10.0, 10.0, 50.0, 300.0]), np.array([5.0, 30.0, 21.0, 0.0]), np.zeros(4),
                       np.zeros(4), np.arange(4))
    by_reach, lost = assign_points(pts, reaches, {"a": 30.0, "b": 10.0})
    assert list(by_reach["a"]) == [0] and list(by_reach["b"]) == [1] and list(lost) == [2, 3]


def test_survey_above_dem_and_too_few_points_are_reported():
    geom = straight_reach([lidar_section().elevation] * 2, [0.0, 100.0])
    ys = np.array([5.0, 0.0, -5.0])                                        # inside the edges (stations 45-55)
    pts = SurveyPoints(np.r_[0.0, 0.0, 0.0, 100.0], np.r_[ys, 0.0], np.r_[10.5, 10.4, 10.5, 9.0],
                       np.full(4, np.nan), np.arange(4))
    surveyed, _, notes, flags = surveyed_sections(geom, pts, spacing=100.0)
    assert len(surveyed) == 1 and flags == {0: ["survey_above_dem"]}
    assert any("above the DEM's lowest channel ground" in w for w in notes)
    assert any("1 point(s) between the channel edges" in w for w in notes)


# ------------------------------------------------------------------------------ the reach stage
def test_fit_channel_flow_at_survey_recovers_the_flown_depth():
    """Sections whose flat water strip falls 0.1 m per 100 m over a true 6 m, z = 2 trapezoid flown 1.5 m deep:
    flow_at_survey = Manning's Q of that channel (Chow 1959, ch. 6) gives back 1.5 m, slope fitted 0.001."""
    chain = np.array([0.0, 100.0, 200.0, 300.0])
    secs = [lidar_section(level=10.0 - 0.001 * c).elevation for c in chain]
    geom = straight_reach(secs, chain)
    q = manning_discharge(trapezoid_area(6.0, 2.0, 1.5), trapezoid_perimeter(6.0, 2.0, 1.5), 0.03, 0.001)
    out = fit_channel(geom, ChannelShape(bottom_width=6.0, side_slope=2.0, flow_at_survey=q), None, 100.0,
                      [0.03] * 4)
    assert out.channel["shape"]["depth_m"] == pytest.approx(1.5, abs=1e-4)
    assert out.channel["shape"]["slope"] == pytest.approx(0.001, rel=1e-9)
    assert out.channel["bed_source"] == {"shape": 4}
    assert [s.bed_elevation for s in out.sections] == pytest.approx(list(10.0 - 0.001 * chain - 1.5), abs=1e-6)
    with pytest.raises(GeometryError, match="does not fall"):
        fit_channel(straight_reach([secs[0]] * 4, chain),
                    ChannelShape(bottom_width=6.0, side_slope=2.0, flow_at_survey=q), None, 100.0, [0.03] * 4)


# ------------------------------------------------------------------------------ config
def channel_config(tmp_path, text):
    """A valley config with a [channel] table (the documented config contract, README)."""
    from valleys import make_valley, write_config, write_survey

    from geoflow.config import load_config
    v = make_valley(tmp_path, length=400.0, half_width=60.0, classes=("channel", "grass"))
    write_survey(tmp_path, v, [100.0])
    path = write_config(tmp_path, v, discharge=20.0, n=0.03, classes={"channel": 0.03, "grass": 0.04},
                        extra="[channel]\n" + text)
    return load_config(path)


def test_per_reach_shape_overrides_keys_of_the_default(tmp_path):
    cfg = channel_config(tmp_path, 'survey = "survey.gpkg"\n'
                                   "shape = { bottom_width = 8.0, side_slope = 2.0, flow_at_survey = 5.0 }\n"
                                   "[channel.reaches.r1]\nshape = { depth = 0.5 }\nuse_survey = false\n")
    own = cfg.channel.for_reach("r1")
    assert own.shape == ChannelShape(bottom_width=8.0, side_slope=2.0, depth=0.5) and not own.use_survey
    assert cfg.channel.for_reach("r2").shape.flow_at_survey == 5.0
    assert cfg.input_files()["[channel] survey"] == (tmp_path / "survey.gpkg").resolve()


def test_unknown_channel_key_gets_a_suggestion(tmp_path):
    from geoflow.errors import ConfigError
    with pytest.raises(ConfigError, match=r"\[channel\] shape botom_width: unknown key; did you mean 'bottom_width'"):
        channel_config(tmp_path, "shape = { botom_width = 8.0, side_slope = 2.0, depth = 1.0 }\n")


def test_survey_first_shape_elsewhere():
    """Surveyed sections take the survey, the sections beyond the surveyed stretch the shape; the survey
    points lie on the true 6 m, z = 2 trapezoid 1.5 m below the flat water, so both beds agree (analytic)."""
    chain = np.array([0.0, 100.0, 200.0, 300.0, 400.0])
    geom = straight_reach([lidar_section().elevation] * 5, chain)
    ys = np.arange(-9.5, 9.51, 0.5)                                        # y = 50 - station
    def true_bed(y):
        return np.minimum(13.0, 8.5 + np.maximum(np.abs(y) - 3.0, 0.0) / 2.0)
    x = np.repeat([100.0, 300.0], ys.size)
    y = np.tile(ys, 2)
    pts = SurveyPoints(x, y, true_bed(y), np.full(x.size, np.nan), np.arange(x.size))
    out = fit_channel(geom, ChannelShape(bottom_width=6.0, side_slope=2.0, depth=1.5), pts, 100.0, [0.03] * 5)
    assert [s.bed_source for s in out.sections] == ["shape", "survey", "survey", "survey", "shape"]
    assert out.channel["bed_source"] == {"shape": 2, "survey": 3}
    for s in out.sections:
        left, right = s.channel_edges
        inside = (s.station >= left + 4.0) & (s.station <= right - 4.0)   # away from the 13 m bank tops
        np.testing.assert_allclose(s.elevation[inside], np.minimum(true_bed(50.0 - s.station[inside]), 10.0),
                                   atol=1e-9)
