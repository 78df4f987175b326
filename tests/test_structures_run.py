"""Culverts, weirs and bridges end to end through `geoflow run` on synthetic valleys (tests/valleys.py),
with a road embankment written into the DEM where the case has a road.

References, each named beside its check:
- HDS-5 inlet control (Normann, Houghtalen & Johnston 2001, Hydraulic Design of Highway Culverts, FHWA-NHI-01-020,
  Appendix A): unsubmerged form 1 HW/D = Hc/D + K X^M + Ks S and submerged HW/D = c X^2 + Y + Ks S with
  X = 1.811 Q/(A D^0.5) (SI); constants of a concrete pipe, square edge with headwall, from HDS-5 Table 9:
  K = 0.0098, M = 2.0, c = 0.0398, Y = 0.67, Ks = -0.5. Written out here, not taken from geoflow.
- circular critical depth: Q^2 T/(g A^3) = 1 on the circular segment A = D^2 (t - sin t)/8, T = D sin(t/2),
  t = 2 arccos(1 - 2y/D) (Chow 1959, Open-Channel Hydraulics, ch. 2, from memory), solved with scipy brentq;
- road overtopping Q = C L H^1.5 (HDS-5 2001, Eq 8) with the barrel flow, the split solved here with brentq;
- a free-overfall weir Q = C L H^1.5 (Bos 1989, Discharge Measurement Structures, ch. 1) inverted;
- Belanger's sequent depth and the jump ahead of a weir on a steep reach: tests/hydraulics/test_structure_links.py.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rasterio
from scipy.optimize import brentq
from valleys import make_valley, write_config

from geoflow.cli import main
from geoflow.flags import FLAGS
from geoflow.outputs import STRUCTURE_COLUMNS

G = 9.80665
K, M, C_SUB, Y_SUB, KS = 0.0098, 2.0, 0.0398, 0.67, -0.5      # HDS-5 2001 Table 9, concrete, square edge, headwall
KU = 1.811
D = 1.5                      # culvert diameter, m
ROAD = 30.0                  # culvert length = road embankment footprint along the flow, m
SLOPE = 0.008


def valley(tmp_path, slope=SLOPE, road_at=None, crest=None, gap=None):
    """A 600 m valley (6 m wide channel 1.5 m deep, 2:1 sides); with ``road_at`` (chainage) a road embankment
    across it: crest ``crest`` m above the channel bed there, 8 m wide on top, 1:2 side slopes, and a gap of
    half-width ``gap`` over the channel (a bridge opening) or none (a culvert)."""
    v = make_valley(tmp_path, length=600.0, bottom_width=6.0, side_slope=2.0, bank_height=1.5, slope=slope,
                    half_width=60.0)
    if road_at is not None:
        with rasterio.open(v.dem) as ds:
            prof, z = ds.profile, ds.read(1)
            cols, rows = np.meshgrid(np.arange(ds.width) + 0.5, np.arange(ds.height) + 0.5)
            x, y = ds.transform * (cols, rows)
        top = v.bed_at(v.x0 + road_at) + crest
        down = np.maximum(np.abs(x - (v.x0 + road_at)) - 4.0, 0.0) / 2.0
        if gap is not None:
            down = down + np.maximum(gap + 2.0 * crest - np.abs(y - v.yc), 0.0) / 2.0
        with rasterio.open(v.dem, "w", **prof) as ds:
            ds.write(np.maximum(z, top - down).astype(z.dtype), 1)
    return v


def run_case(tmp_path, v, discharges, structure: str, n=0.035, regime="", upstream="", cases=False):
    cfg = write_config(tmp_path, v, discharge=discharges[0], n=n, width=116.0, extra=structure)
    text = cfg.read_text()
    if cases:
        text = text.replace(f"n = {n}\n", f"n = {n}\nn_low = {n * 0.8:.4f}\nn_high = {n * 1.25:.4f}\n").replace(
            'channel_class = "channel"\n', 'channel_class = "channel"\ncases = ["low", "high"]\n')
    for i, q in enumerate(discharges[1:]):
        text += f'\n[[events]]\nname = "e{i + 1}"\ndischarge = {q}\n'
    if regime:
        text = text.replace('regime = "subcritical"', f'regime = "{regime}"\nupstream = {upstream}')
    cfg.write_text(text)
    assert main(["run", str(cfg), "--quiet"]) == 0
    out = tmp_path / "out"
    table = pd.read_csv(out / "structures.csv", keep_default_na=False, na_values=[""], dtype={"flags": str})
    profile = pd.read_csv(out / "profile.csv", keep_default_na=False, na_values=[""], dtype={"flags": str})
    table["flags"], profile["flags"] = table["flags"].fillna(""), profile["flags"].fillna("")
    words = {w for f in list(table["flags"]) + list(profile["flags"]) for w in f.split(";") if w}
    assert words <= set(FLAGS), sorted(words - set(FLAGS))          # every flag word is documented
    return table, profile, out


def culvert_toml(v, crest=None, crest_length=100.0):
    up, down = v.bed_at(v.x0 + 300.0 - ROAD / 2), v.bed_at(v.x0 + 300.0 + ROAD / 2)
    road = f"crest = {v.bed_at(v.x0 + 300.0) + crest:.4f}\ncrest_length = {crest_length}\n" if crest else ""
    return f"""
[[structures]]
reach = "r1"
chainage = 300.0
type = "culvert"
id = "pipe"
shape = "circular"
diameter = {D}
length = {ROAD}
invert_up = {up:.4f}
invert_down = {down:.4f}
n = 0.013
inlet = "concrete_square_edge_headwall"
{road}"""


def circle(y):
    t = 2.0 * np.arccos(1.0 - 2.0 * y / D)
    return D * D * (t - np.sin(t)) / 8.0, D * np.sin(t / 2.0)


def critical_depth(q):
    """Q^2 T/(g A^3) = 1 in the pipe (it falls from +inf at y = 0 to -1 at y = D: one root), by brentq."""
    return brentq(lambda y: q * q * circle(y)[1] / (G * circle(y)[0] ** 3) - 1.0, 1e-6, D * (1 - 1e-12), xtol=1e-13)


def hds5_form1(q, slope):
    """HW (m above the inlet invert) by HDS-5 unsubmerged form 1, with Hc = dc + Vc^2/2g (brentq)."""
    dc = critical_depth(q)
    a_c = circle(dc)[0]
    hc = dc + (q / a_c) ** 2 / (2 * G)
    x = KU * q / (np.pi * D * D / 4 * np.sqrt(D))
    assert x <= 3.5                                   # the unsubmerged range of the form (HDS-5 Appendix A)
    return D * (hc / D + K * x ** M + KS * slope)


def test_culvert_under_a_road_in_inlet_control_has_the_hds5_form1_headwater(tmp_path):
    v = valley(tmp_path, road_at=300.0, crest=2.5)
    table, profile, _ = run_case(tmp_path, v, [3.0, 2.0], culvert_toml(v, crest=2.5))
    assert tuple(table.columns[:len(STRUCTURE_COLUMNS)]) == STRUCTURE_COLUMNS
    invert = v.bed_at(v.x0 + 300.0 - ROAD / 2)
    for _, row in table.iterrows():
        assert row["control"] == "inlet" and row["q_over_crest_m3s"] == 0.0
        hw = row["headwater_m"] - invert
        ref = hds5_form1(row["discharge_m3s"], SLOPE)     # Normann et al. 2001, Appendix A, form 1
        assert hw == pytest.approx(ref, rel=0.05)
        assert hw == pytest.approx(ref, rel=2e-3)          # what it is measured at (HDS-5 itself)
    # the faces are the sections 15 m either side, flagged, and start / end the profile across the road
    design = profile[profile["event"] == "design"].set_index("chainage_m")
    assert "structure_upstream_face" in design.loc[285.0, "flags"]
    assert "structure_downstream_face" in design.loc[315.0, "flags"]
    assert not ((design.index > 285.0) & (design.index < 315.0)).any()
    assert design.loc[285.0, "wse_m"] == pytest.approx(table.iloc[0]["headwater_m"], abs=1e-4)
    assert design.loc[315.0, "wse_m"] == pytest.approx(table.iloc[0]["tailwater_m"], abs=1e-4)


def barrel_flow_submerged(hw, slope):
    """Barrel discharge for headwater ``hw`` (m above the invert) by HDS-5 submerged inlet control, inverted."""
    x = np.sqrt(max(hw / D - Y_SUB - KS * slope, 0.0) / C_SUB)
    assert x >= 4.0                                    # the submerged range (HDS-5 Appendix A)
    return x * (np.pi * D * D / 4) * np.sqrt(D) / KU


def hds5_outlet(q, tailwater_depth, slope, n=0.013, ke=0.5):
    """HWo (m above the inlet invert), HDS-5 2001 Eqs 5-7: ho + (1 + ke + 19.63 n^2 L / R^1.33) V^2/2g - S L with
    the full-barrel V and R, ho = max(TW, (dc + D)/2); ke = 0.5 for a square edge with headwall (HDS-5 Table 12)."""
    dc = critical_depth(q)
    v = q / (np.pi * D * D / 4)
    losses = (1 + ke + 19.63 * n * n * ROAD / (D / 4) ** 1.33) * v * v / (2 * G)
    return max(tailwater_depth, 0.5 * (dc + D)) + losses - slope * ROAD


def test_overtopped_culvert_splits_the_flow_between_barrel_and_road(tmp_path):
    v = valley(tmp_path, road_at=300.0, crest=2.5)
    crest_length, c_road = 100.0, 1.66
    table, _, _ = run_case(tmp_path, v, [15.0, 25.0], culvert_toml(v, crest=2.5, crest_length=crest_length))
    invert = v.bed_at(v.x0 + 300.0 - ROAD / 2)
    crest = v.bed_at(v.x0 + 300.0) + 2.5
    for _, row in table.iterrows():
        q = row["discharge_m3s"]
        assert row["control"] == "overtopping"
        assert row["q_through_m3s"] + row["q_over_crest_m3s"] == pytest.approx(q, rel=0.01)
        assert row["tailwater_m"] < crest                 # free flow over the road

        def balance(w, q=q):   # barrel (HDS-5 submerged inlet control) + road weir (HDS-5 Eq 8) = Q
            return barrel_flow_submerged(w - invert, SLOPE) + c_road * crest_length * (w - crest) ** 1.5 - q
        ref = brentq(balance, crest + 1e-6, crest + 5.0, xtol=1e-10)
        q_barrel = barrel_flow_submerged(ref - invert, SLOPE)
        outlet = hds5_outlet(q_barrel, row["tailwater_m"] - (invert - SLOPE * ROAD), SLOPE)
        assert outlet < ref - invert                       # inlet control governs the barrel, as assumed
        assert row["headwater_m"] - invert == pytest.approx(ref - invert, rel=0.05)
        assert row["headwater_m"] == pytest.approx(ref, abs=2e-3)
        assert row["q_over_crest_m3s"] == pytest.approx(c_road * crest_length * (ref - crest) ** 1.5, rel=0.01)


def test_free_overfall_weir_headwater_is_the_inverted_weir_equation(tmp_path):
    v = valley(tmp_path)
    crest = v.bed_at(v.x0 + 300.0) + 0.8
    toml = f"""
[[structures]]
reach = "r1"
chainage = 300.0
type = "weir"
crest = {crest:.4f}
crest_length = 8.0
coefficient = 1.70
crest_breadth = 4.0
"""
    table, profile, _ = run_case(tmp_path, v, [4.0, 2.0], toml)
    for _, row in table.iterrows():
        h = (row["discharge_m3s"] / (1.70 * 8.0)) ** (2 / 3)     # Q = C L H^1.5 inverted (Bos 1989)
        assert row["tailwater_m"] < crest and row["flags"] == ""   # a free overfall
        assert row["headwater_m"] - crest == pytest.approx(h, rel=0.02)
        assert row["headwater_m"] - crest == pytest.approx(h, abs=1e-4)      # to the 0.1 mm written
        assert row["structure_id"] == "weir_1" and row["control"] == "weir"
    # with approach_velocity the head over the crest is the energy head at the upstream face
    toml_e = toml.replace("crest_breadth = 4.0", "crest_breadth = 4.0\napproach_velocity = true")
    table_e, profile_e, _ = run_case(tmp_path / "energy", valley(tmp_path / "energy"), [4.0], toml_e)
    face = profile_e[profile_e["flags"].str.contains("structure_upstream_face")].iloc[0]
    velocity_head = face["alpha"] * face["velocity_ms"] ** 2 / (2 * G)
    assert face["wse_m"] + velocity_head - crest == pytest.approx((4.0 / (1.70 * 8.0)) ** (2 / 3), abs=1e-4)
    assert table_e.iloc[0]["headwater_m"] < table.iloc[0]["headwater_m"]


def test_bridge_opening_from_the_dem_and_its_regimes(tmp_path):
    # an embankment 2.2 m above the bed with a gap over the channel; the abutments are where the ground along
    # the road reaches the low chord: the road's 1:2 ramps rise from the bed level at the gap's half-width, so
    # that is gap + 2 x (low chord above the bed) from the centreline
    crest, gap, low = 2.2, 14.0, 1.9
    v = valley(tmp_path, road_at=300.0, crest=crest, gap=gap)
    bed = v.bed_at(v.x0 + 300.0)
    toml = f"""
[[structures]]
reach = "r1"
chainage = 300.0
type = "bridge"
id = "road"
low_chord = {bed + low:.4f}
high_chord = {bed + crest:.4f}
length = 24.0
"""
    from geoflow import check
    from geoflow.batch.reach import build_tables
    from geoflow.batch.structures import bridge_setup
    cfg = write_config(tmp_path, v, discharge=5.0, n=0.035, width=116.0, extra=toml)
    result = check(cfg)
    geom = result.geometries["r1"]
    bridge, up, down = bridge_setup(result.config.structures[0], geom.structures[0], build_tables(geom, result.config))
    expect = gap + 2.0 * low
    assert bridge.opening_left == pytest.approx(-expect, abs=0.5)       # within half a DEM cell
    assert bridge.opening_right == pytest.approx(expect, abs=0.5)
    table, profile, _ = run_case(tmp_path, v, [5.0, 120.0], toml, cases=True)
    normal = table[table["roughness_case"] == "normal"]
    low_q, high_q = normal.iloc[0], normal.iloc[1]
    assert low_q["control"] == "free_surface" and low_q["headwater_m"] >= low_q["tailwater_m"]
    assert high_q["control"] in ("pressure", "overtopping") and high_q["headwater_m"] > bed + low
    # one row per structure x event x roughness case; rougher channels give higher levels at the bridge
    assert sorted(table["roughness_case"].unique()) == ["high", "low", "normal"] and len(table) == 6
    by_case = table[table["event"] == "design"].set_index("roughness_case")
    assert by_case.loc["low", "tailwater_m"] < by_case.loc["normal", "tailwater_m"] < by_case.loc["high", "tailwater_m"]
    assert by_case.loc["low", "headwater_m"] < by_case.loc["high", "headwater_m"]


def test_mixed_regime_places_a_jump_ahead_of_a_weir_on_a_steep_valley(tmp_path):
    v = valley(tmp_path, slope=0.03)
    crest = v.bed_at(v.x0 + 300.0) + 1.2
    toml = f"""
[[structures]]
reach = "r1"
chainage = 300.0
type = "weir"
crest = {crest:.4f}
crest_length = 8.0
"""
    table, profile, _ = run_case(tmp_path, v, [4.0], toml, n=0.025, regime="mixed",
                                 upstream='{ type = "normal_depth", slope = 0.03 }')
    p = profile.sort_values("chainage_m").reset_index(drop=True)
    flags = p["flags"]
    face = int(np.flatnonzero(flags.str.contains("structure_upstream_face"))[0])
    jumps = np.flatnonzero(flags.str.contains("jump_upstream"))
    assert jumps.size == 1 and jumps[0] <= face
    assert (p.loc[:jumps[0] - 1, "regime"] == "supercritical").all()
    assert (p.loc[jumps[0]:face, "regime"] == "subcritical").all()
    h = (4.0 / (1.70 * 8.0)) ** (2 / 3)                   # broad-crested default C = 1.70 (Bos 1989)
    assert p.loc[face, "wse_m"] == pytest.approx(crest + h, abs=1e-4)
    assert table.iloc[0]["headwater_m"] == pytest.approx(crest + h, abs=1e-4)
