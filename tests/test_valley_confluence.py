"""Two valleys meeting at a right angle, end to end: reaches that meet without overlap.

References:
- Geometry by construction: the main valley runs along +x with a straight trapezoidal channel on
  y = YC; the tributary valley runs north along x = XT and its channel crosses the main floodplain
  to the main channel. Both channels are trapezoids carved below their floors (analytic), and the
  tributary's bed meets the main bed at the junction (a concordant junction).
- Crossings and containment: shapely predicates.
- In-bank flows below each channel's capacity by Manning's equation (Chow 1959 ch. 6): the
  capacities are computed below with scipy brentq-free closed forms of the bankfull trapezoid.
- Junction: the tributary's downstream boundary is the main river's level where it meets the main
  channel (a stage boundary, common practice for a junction in steady 1D models), so the two levels
  agree there; the mapped tributary surface beside its last section agrees with it too.
"""
import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from shapely.geometry import LineString, box
from valleys import grid, trapezoid_depth, valley_config, write_cover, write_dem, write_reaches

from geoflow.batch import run

CELL = 2.0
YC = 700.0                         # main channel line (the tributary joins at x = xt)
S_MAIN = 0.0012
MAIN = dict(bottom_half=5.0, side=1.5, depth=2.2, floor=220.0)
TRIB = dict(bottom_half=2.0, side=1.5, depth=1.2, floor=55.0)
S_TRIB = (MAIN["depth"] - TRIB["depth"]) / MAIN["floor"]      # its banks meet the main floodplain at the mouth
N_CH = 0.035


def capacity(spec, slope, n=N_CH):
    """Bankfull Manning discharge of a trapezoid: Q = (1/n) A R^(2/3) S^(1/2) (Chow 1959, ch. 6)."""
    b, z, y = 2 * spec["bottom_half"], spec["side"], spec["depth"]
    area, perim = (b + z * y) * y, b + 2 * y * np.hypot(1.0, z)
    return area * (area / perim) ** (2 / 3) * np.sqrt(slope) / n


def confluence(folder, XT):
    X, Y, transform = grid(0.0, 0.0, 1800.0, 1400.0, CELL)
    fp_main = 40.0 - S_MAIN * X                                    # main floodplain
    bed_trib = (40.0 - S_MAIN * XT - MAIN["depth"]) + S_TRIB * (YC - Y)   # meets the main bed at (XT, YC)
    mouth = YC - MAIN["floor"]                                     # the side valley opens here
    fp_trib = np.where(Y < mouth, bed_trib + TRIB["depth"], fp_main)
    walls_main = 0.2 * np.clip(np.abs(Y - YC) - MAIN["floor"], 0.0, None)
    side_valley = fp_trib + 0.25 * np.clip(np.abs(X - XT) - TRIB["floor"], 0.0, None)
    ground = np.minimum(fp_main + walls_main, np.where(Y < YC, side_valley, np.inf))
    cut = trapezoid_depth(np.abs(Y - YC), MAIN["bottom_half"], MAIN["side"], MAIN["depth"])
    main_ch = np.where(cut > 0, fp_main - cut, np.inf)
    banks = np.clip((np.abs(X - XT) - TRIB["bottom_half"]) / TRIB["side"], 0.0, None)
    trib_ch = np.where(Y <= YC, bed_trib + banks, np.inf)           # trapezoid up to the local ground
    z = np.minimum(np.minimum(ground, main_ch), trib_ch)
    write_dem(folder / "dem.tif", z, transform)
    main = LineString([(40.0, YC), (1760.0, YC)])
    trib = LineString([(XT, 60.0), (XT, YC)])
    write_reaches(folder / "centrelines.gpkg", {"main": main, "trib": trib})
    top_m = MAIN["bottom_half"] + MAIN["side"] * MAIN["depth"]
    top_t = TRIB["bottom_half"] + TRIB["side"] * TRIB["depth"]
    chan_main = main.buffer(top_m, cap_style="flat")
    write_cover(folder / "landcover.gpkg", [(box(0, 0, 1800, 1400), "meadow"),
                                            (trib.buffer(top_t, cap_style="flat"), "channel"), (chan_main, "channel")])
    return main, trib, chan_main


@pytest.fixture(scope="module", params=[900.0, 880.0])
def confluence_run(tmp_path_factory, request):
    """Junction between two main sections (x = 900) and on one (x = 880: chainage 840 = 21 x 40)."""
    XT = request.param
    folder = tmp_path_factory.mktemp("confluence")
    main, trib, chan_main = confluence(folder, XT)
    q_main, q_trib = 0.45 * capacity(MAIN, S_MAIN), 0.45 * capacity(TRIB, S_TRIB)
    junction = main.project(shapely.Point(XT, YC))

    def event(k, k_trib):
        return (f"{{ main = {k * q_main:.3f}, trib = {k_trib * q_trib:.3f} }}\nchanges = [{{ reach = \"main\", "
                f"chainage = {junction:.3f}, discharge = {k * q_main + k_trib * q_trib:.3f} }}]")

    extra = '[boundary.reaches.trib]\ndownstream = { type = "junction", reach = "main" }\n'
    cfg = valley_config(folder, {"main": (40.0, 520.0), "trib": (20.0, 150.0)}, [("inbank", event(1, 1)),
                        ("flood", event(3, 2))], f'{{ type = "normal_depth", slope = {S_MAIN} }}',
                        {"channel": N_CH, "meadow": 0.05}, extra)
    res = run(cfg)
    assert not res.failed, res.reaches
    return res, main, trib, chan_main, junction, XT


def test_reaches_meet_without_crossing(confluence_run):
    res, main, trib, chan_main, _, XT = confluence_run
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    a = np.asarray(secs[secs.reach_id == "main"].geometry.values, dtype=object)
    b = np.asarray(secs[secs.reach_id == "trib"].geometry.values, dtype=object)
    assert not shapely.intersects(a[:, None], b[None, :]).any()
    assert res.crossings == []
    inner = chan_main.buffer(-0.01)
    assert not shapely.intersects(b, inner).any(), "a tributary section enters the receiving channel"
    # the main river's sections stop at the side valley: none reaches its floor 200 m up
    assert not shapely.intersects(a, box(XT - 40, 0, XT + 40, YC - MAIN["floor"] - 100)).any()


def test_in_bank_flows_stay_in_their_sections_and_levels_meet(confluence_run):
    res, main, trib, chan_main, junction, _ = confluence_run
    p = res.profile
    inb = p[p.event == "inbank"]
    assert not inb["flags"].str.contains("not_contained|spills").any(), inb[inb["flags"] != ""][["reach_id", "flags"]]
    m, t = inb[inb.reach_id == "main"], inb[inb.reach_id == "trib"]
    for ev in ("inbank", "flood"):
        pm, pt = p[(p.event == ev) & (p.reach_id == "main")], p[(p.event == ev) & (p.reach_id == "trib")]
        at_junction = float(np.interp(junction, pm.chainage_m, pm.wse_m))
        print(f"{ev}: tributary last section {pt.wse_m.iloc[-1]:.3f} m, main at the junction {at_junction:.3f} m")
        assert abs(pt.wse_m.iloc[-1] - at_junction) < 0.02
    assert len(m) and len(t)


def test_maps_keep_to_their_reach(confluence_run):
    res, main, trib, chan_main, junction, _ = confluence_run
    with rasterio.open(res.output_dir / "rasters" / "trib" / "flood_wse.tif") as ds:
        wse = ds.read(1, masked=True).filled(np.nan)
        t = ds.transform
    rows, cols = np.nonzero(np.isfinite(wse))
    x = t.c + (cols + 0.5) * t.a
    y = t.f + (rows + 0.5) * t.e
    inside = shapely.contains_xy(chan_main, x, y)
    assert not inside.any(), "the tributary's water surface is mapped over the main channel"
