"""A valley with a raised road along it and one across it, end to end: sections kept off the roads.

References:
- Ground by construction (analytic): a straight trapezoidal channel on a flat floodplain falling at
  S down the valley; a road embankment along the valley on the left floodplain; a road embankment
  across the valley with an opening over the channel. Shapely measures how much of each section
  runs inside a road's footprint.
- Without the cross road the valley is prismatic, so the flow is uniform: its depth is the normal
  depth of the cross-section by subdivided Manning conveyance (channel and each floodplain one
  subdivision; Chow 1959 ch. 6), computed here on the analytic profile with scipy brentq.
- With the cross road the opening constricts the flood, which can only raise the levels upstream
  (energy equation with added losses; Chow 1959 ch. 10): levels upstream are not lower.
"""
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from scipy.optimize import brentq
from shapely.geometry import LineString, box
from valleys import grid, trapezoid_depth, valley_config, write_cover, write_dem, write_reaches

from geoflow.batch import run

CELL = 2.0
LENGTH, HEIGHT, YC = 1700.0, 520.0, 260.0
Z0, SLOPE = 25.0, 0.0009
FLOOR = 165.0                                         # floodplain half-width; walls 1 in 3 beyond
B_HALF, SIDE, DEPTH = 4.0, 2.0, 1.8
ALONG = dict(y=YC + 85.0, crest_half=3.5, height=1.2, side=2.0)      # road along the valley (left)
ACROSS = dict(x=900.0, crest_half=3.0, height=1.5, side=2.5, gap_half=26.0)
N = {"channel": 0.035, "meadow": 0.04, "road": 0.02}
Q = 120.0


def embankment(offset, spec):
    """Height of a road embankment above the ground at distance ``offset`` from its centre line."""
    return np.clip(spec["height"] - (np.abs(offset) - spec["crest_half"]) / spec["side"], 0.0, spec["height"])


def cross_profile(y):
    """Ground across the valley (m above the floodplain level) at offsets y from the channel line."""
    walls = np.clip(np.abs(y) - FLOOR, 0.0, None) / 3.0
    return walls + embankment(YC + y - ALONG["y"], ALONG) - trapezoid_depth(np.abs(y), B_HALF, SIDE, DEPTH)


def roads_valley(folder, across: bool, in_cover: bool):
    X, Y, transform = grid(0.0, 0.0, LENGTH, HEIGHT, CELL)
    z = Z0 - SLOPE * X + cross_profile(Y - YC)
    if across:
        bump = embankment(X - ACROSS["x"], ACROSS) * (np.abs(Y - YC) > ACROSS["gap_half"])
        z = np.where(np.abs(Y - YC) < FLOOR + 5.0, np.maximum(z, Z0 - SLOPE * X + bump), z)
    folder.mkdir(parents=True, exist_ok=True)
    write_dem(folder / "dem.tif", z, transform)
    line = LineString([(60.0, YC), (LENGTH - 60.0, YC)])
    write_reaches(folder / "centrelines.gpkg", {"v": line})
    parts = [(box(0, 0, LENGTH, HEIGHT), "meadow")]
    if in_cover:
        parts.append((box(0, ALONG["y"] - ALONG["crest_half"], LENGTH, ALONG["y"] + ALONG["crest_half"]), "road"))
        if across:
            for lo, hi in ((0.0, YC - ACROSS["gap_half"]), (YC + ACROSS["gap_half"], HEIGHT)):
                parts.append((box(ACROSS["x"] - ACROSS["crest_half"], lo, ACROSS["x"] + ACROSS["crest_half"], hi), "road"))
    parts.append((line.buffer(B_HALF + SIDE * DEPTH, cap_style="flat"), "channel"))
    write_cover(folder / "landcover.gpkg", parts)
    cfg = valley_config(folder, {"v": (50.0, 350.0)}, [("flood", Q)], f'{{ type = "normal_depth", slope = {SLOPE} }}',
                        N)
    return cfg, line


def footprints():
    """Road footprints (crest and side slopes) as shapely polygons."""
    a = ALONG["crest_half"] + ALONG["side"] * ALONG["height"]
    c = ACROSS["crest_half"] + ACROSS["side"] * ACROSS["height"]
    along = box(0, ALONG["y"] - a, LENGTH, ALONG["y"] + a)
    across = box(ACROSS["x"] - c, 0, ACROSS["x"] + c, HEIGHT).difference(
        box(0, YC - ACROSS["gap_half"], LENGTH, YC + ACROSS["gap_half"]))
    return along, across


def normal_wse_without_cross_road(x):
    """Uniform-flow level: subdivided Manning conveyance on the analytic profile, solved with brentq."""
    y = np.linspace(-FLOOR - 10.0, FLOOR + 10.0, 200001)
    ground = cross_profile(y)
    edge = B_HALF + SIDE * DEPTH
    parts = [y < -edge, np.abs(y) <= edge, y > edge]
    n = [N["meadow"], N["channel"], N["meadow"]]
    dy = y[1] - y[0]

    def q(level):
        depth = np.clip(level - ground, 0.0, None)
        total = 0.0
        for mask, nn in zip(parts, n):
            d = depth[mask]
            wet = d > 0
            area = d.sum() * dy
            perim = np.sum(np.hypot(dy, np.diff(ground[mask]))[wet[1:] | wet[:-1]])
            if area > 0:
                total += area * (area / perim) ** (2 / 3) / nn
        return total * np.sqrt(SLOPE) - Q

    return Z0 - SLOPE * np.asarray(x) + brentq(q, -DEPTH + 0.01, 3.0, xtol=1e-6)


@pytest.mark.parametrize("in_cover", [True, False])
def test_sections_kept_off_roads_and_the_embankment_raises_levels(tmp_path, in_cover):
    cfg, line = roads_valley(tmp_path / "with", across=True, in_cover=in_cover)
    res = run(cfg)
    base_cfg, _ = roads_valley(tmp_path / "without", across=False, in_cover=in_cover)
    base = run(base_cfg)
    assert not res.failed and not base.failed

    # no section runs along a road: inside a road's footprint for at most 3 footprint widths
    along, across = footprints()
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    inside = [max(g.intersection(along).length, g.intersection(across).length) for g in secs.geometry]
    print(f"cover={in_cover}: longest stretch of a section on a road footprint {max(inside):.1f} m")
    assert max(inside) < 3 * 2 * (ACROSS["crest_half"] + ACROSS["side"] * ACROSS["height"])

    # without the cross road: uniform flow at the analytic normal depth, no choke anywhere
    p0 = base.profile
    x0 = line.coords[0][0]
    mid = p0[(p0.chainage_m > 200) & (p0.chainage_m < line.length - 200)]
    expected = normal_wse_without_cross_road(x0 + mid.chainage_m.to_numpy())
    err = np.abs(mid.wse_m.to_numpy() - expected)
    print(f"cover={in_cover}: uniform flow without the cross road within {err.max() * 1000:.0f} mm of brentq")
    assert err.max() < 0.02
    assert not p0["flags"].str.contains("critical").any()

    # with it: a choke (if any) only at the crossing, and never lower levels upstream
    p = res.profile
    crossing = ACROSS["x"] - x0
    choked = p[p["flags"].str.contains("critical")].chainage_m
    assert np.all(np.abs(choked - crossing) <= 50.0), list(choked)
    up = p0.chainage_m < crossing - 50.0
    with_road = np.interp(p0.chainage_m[up], p.chainage_m, p.wse_m)
    rise = with_road - p0.wse_m[up].to_numpy()
    print(f"cover={in_cover}: rise upstream of the embankment {rise.min() * 1000:.0f} to {rise.max() * 1000:.0f} mm")
    assert rise.min() > -0.001
    assert rise.max() > 0.01                       # the embankment is seen at all


def test_a_bridge_at_the_cross_road_has_one_pair_of_faces(tmp_path):
    """A bridge where the road crosses the valley ([[structures]] at the crossing, faces just outside
    the embankment's foot): the dog-leg layout keeps exactly its two face sections at chainage -/+
    half its length, parallel (same direction, common practice for a structure's faces), with no
    section between them or within spacing/10 of them, and no second pair of embankment faces from
    the road rule (geometry by construction; chainages exact)."""
    cfg, line = roads_valley(tmp_path / "bridge", across=True, in_cover=True)
    crossing = ACROSS["x"] - line.coords[0][0]
    foot = ACROSS["crest_half"] + ACROSS["side"] * ACROSS["height"]
    length = 2.0 * (foot + 1.0)
    crest = Z0 - SLOPE * ACROSS["x"] + ACROSS["height"]
    with open(cfg, "a", encoding="utf-8") as f:
        f.write(f'[[structures]]\nreach = "v"\nchainage = {crossing}\ntype = "bridge"\nid = "b1"\n'
                f'low_chord = {crest - 0.2:.3f}\nhigh_chord = {crest + 0.1:.3f}\nlength = {length}\n')
    res = run(cfg)
    assert not res.failed
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    chain = secs.chainage_m.to_numpy()
    up, down = crossing - length / 2, crossing + length / 2
    near = secs[np.abs(chain - crossing) < length / 2 + 5.0]
    assert sorted(near.chainage_m) == pytest.approx([up, down], abs=1e-6)
    near = near.sort_values("chainage_m")
    assert list(near["flags"].str.contains("structure_upstream_face")) == [True, False]
    assert list(near["flags"].str.contains("structure_downstream_face")) == [False, True]
    assert not secs["flags"].str.contains("at_embankment_face|moved_off_strip").any()
    a, b = (np.asarray(g.coords) for g in near.geometry)
    da, db = a[-1] - a[0], b[-1] - b[0]
    assert abs(da[0] * db[1] - da[1] * db[0]) / (np.hypot(*da) * np.hypot(*db)) < 1e-9   # parallel
    rows = pd.read_csv(res.output_dir / "structures.csv")
    assert list(rows.structure_id) == ["b1"] and np.isfinite(rows.headwater_m).all()
    print(f"bridge at the cross road: faces {up:.2f} / {down:.2f} m, headwater {rows.headwater_m.iloc[0]:.3f} m")
