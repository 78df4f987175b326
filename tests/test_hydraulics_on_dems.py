"""Hydraulics through carved DEMs, end to end (DEM -> sections -> n -> profile).

References:
- M1 backwater: the gradually-varied-flow equation dy/dx = (S0 - Sf)/(1 - Fr^2) for a prismatic
  trapezoid (Chow 1959, ch. 9, eq. 9-13, with alpha = 1), integrated independently with
  scipy.integrate.solve_ivp from the same downstream stage.
- Compound channel: uniform flow with subdivided conveyance, K = sum (1/n_i) A_i R_i^(2/3) with
  vertical interfaces at the banks not counted in the wetted perimeter, and
  alpha = (A_t^2 sum K_i^3/A_i^2) / K_t^3 (Chow 1959, ch. 2 and 6). Subdivision areas and wetted
  perimeters are computed here from the analytic ground line with shapely (polygon intersection
  and line length), and normal depth with scipy brentq.
"""
from __future__ import annotations

import geopandas as gpd
import numpy as np
import rasterio
import shapely
from rasterio.transform import from_origin
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from shapely.geometry import LineString, box
from valleys import CRS, make_valley, plain_config, write_config

from geoflow.batch import run

G = 9.80665


def test_m1_backwater_through_dem_matches_gvf_ode(tmp_path):
    q, n, s0 = 40.0, 0.03, 0.001
    v = make_valley(tmp_path, length=2000.0, bottom_width=10.0, side_slope=2.0, bank_height=6.0, slope=s0,
                    half_width=60.0)
    yn = v.normal_depth(q, n)
    y_down = 1.8 * yn
    wse_down = v.z_down + y_down
    cfg = write_config(tmp_path, v, discharge=q, n=n, width=100.0, spacing=50.0,
                       boundary=f'{{ type = "stage", wse = {wse_down} }}')
    res = run(cfg)
    assert not res.failed
    prof = res.profile.sort_values("chainage_m")
    x_up = prof["chainage_m"].to_numpy()          # chainage from the upstream end

    def rhs(xi, y):  # xi = distance upstream from the downstream end
        a, t, p = v.area(y[0]), v.top_width(y[0]), v.perimeter(y[0])
        sf = (q * n / (a * (a / p) ** (2 / 3))) ** 2
        fr2 = q * q * t / (G * a**3)
        return [-(s0 - sf) / (1 - fr2)]           # dy/dxi = -dy/dx

    xi = v.length - x_up
    sol = solve_ivp(rhs, (0.0, v.length), [y_down], t_eval=np.sort(xi), rtol=1e-10, atol=1e-12)
    y_ref = np.interp(xi, sol.t, sol.y[0])
    y_model = prof["wse_m"].to_numpy() - v.bed_at(v.x0 + x_up)
    assert y_model[0] > 1.05 * yn                  # still backwater at the top: a real M1 test
    print(f"M1: max |y - y_ode| = {np.max(np.abs(y_model - y_ref)) * 1000:.1f} mm")
    assert np.max(np.abs(y_model - y_ref)) < 0.03, np.max(np.abs(y_model - y_ref))


def compound_valley(folder, b=12.0, z=1.5, h_bank=2.0, fp=60.0, wall=0.5, length=1000.0, slope=0.001):
    """DEM of a trapezoidal channel with flat floodplains (width fp each side) and sloped walls.

    Returns the paths and the analytic ground line across the valley (offsets from the centre)."""
    cell = 1.0
    half = b / 2 + z * h_bank + fp + 8.0
    x0, y0 = 600000.0, 4100000.0
    ncol, nrow = int(length) + 40, int(2 * half / cell)
    transform = from_origin(x0 - 20, y0 + 2 * half, cell, cell)
    cols, rows = np.meshgrid(np.arange(ncol) + 0.5, np.arange(nrow) + 0.5)
    x, y = x0 - 20 + cols * cell, y0 + 2 * half - rows * cell
    off = np.abs(y - (y0 + half))
    rel = np.interp(off, [0, b / 2, b / 2 + z * h_bank, b / 2 + z * h_bank + fp, half],
                    [0, 0, h_bank, h_bank, h_bank + (half - b / 2 - z * h_bank - fp) / wall])
    zdown = 30.0
    bed = zdown + (x0 + length - x) * slope
    with rasterio.open(folder / "dem.tif", "w", driver="GTiff", width=ncol, height=nrow, count=1,
                       dtype="float32", crs=CRS, transform=transform) as ds:
        ds.write((bed + rel).astype("float32"), 1)
    yc = y0 + half
    gpd.GeoDataFrame({"reach_id": ["c1"]}, geometry=[LineString([(x0, yc), (x0 + length, yc)])],
                     crs=CRS).to_file(folder / "centrelines.gpkg", driver="GPKG")
    top = b / 2 + z * h_bank
    full = box(x0 - 20, y0, x0 + length + 20, y0 + 2 * half)
    chan = box(x0 - 20, yc - top, x0 + length + 20, yc + top)
    gpd.GeoDataFrame({"cover": ["channel", "floodplain"]}, geometry=[chan, full.difference(chan)],
                     crs=CRS).to_file(folder / "landcover.gpkg", driver="GPKG")
    ground = [(-half, h_bank + (half - top - fp) / wall), (-top - fp, h_bank), (-top, h_bank), (-b / 2, 0.0),
              (b / 2, 0.0), (top, h_bank), (top + fp, h_bank), (half, h_bank + (half - top - fp) / wall)]
    return ground, top, zdown, x0, length, slope, half


def subdivided(ground, top, depth, n_ch, n_fp):
    """(A_i, P_i, K_i) of left floodplain, channel, right floodplain at ``depth`` above the bed."""
    line = LineString(ground)
    water = box(ground[0][0], 0.0, ground[-1][0], depth)
    below = shapely.Polygon(ground + [(ground[-1][0], -1e3), (ground[0][0], -1e3)])   # the ground solid
    wet = water.difference(below)
    out = []
    for lo, hi, n in ((-1e9, -top, n_fp), (-top, top, n_ch), (top, 1e9, n_fp)):
        strip = box(lo, -1.0, hi, 1e3)
        a = wet.intersection(strip).area
        p = line.intersection(strip).intersection(water.buffer(1e-9)).length
        k = a * (a / p) ** (2 / 3) / n if a > 0 else 0.0
        out.append((a, p, k))
    return np.array(out)


def test_compound_channel_depth_and_alpha_vs_subdivided_conveyance(tmp_path):
    n_ch, n_fp, q = 0.03, 0.06, 120.0
    ground, top, zdown, x0, length, slope, half = compound_valley(tmp_path)
    path = plain_config(tmp_path, "compound", width=2 * half - 4.0, spacing=50.0,
                        classes={"channel": n_ch, "floodplain": n_fp}, event="flood", discharge=q, slope=slope)
    res = run(path)
    assert not res.failed
    f = lambda d: subdivided(ground, top, d, n_ch, n_fp)[:, 2].sum() * np.sqrt(slope) - q
    yn = brentq(f, 2.05, 10.0, xtol=1e-9)
    parts = subdivided(ground, top, yn, n_ch, n_fp)
    a, k = parts[:, 0], parts[:, 2]
    alpha = a.sum() ** 2 * np.sum(k**3 / a**2) / k.sum() ** 3
    prof = res.profile
    depth = prof["wse_m"] - (zdown + (length - prof["chainage_m"]) * slope)
    assert yn > 2.3                                   # well over the banks: the floodplains carry flow
    assert np.all(np.abs(depth / yn - 1) < 0.03), (yn, depth.describe())
    assert np.all(np.abs(prof["alpha"] / alpha - 1) < 0.08), (alpha, prof["alpha"].describe())
    print(f"compound: yn {yn:.4f}, depth err {np.max(np.abs(depth / yn - 1)) * 100:.2f} %, alpha {alpha:.4f}, "
          f"alpha err {np.max(np.abs(prof['alpha'] / alpha - 1)) * 100:.2f} %")
    assert alpha > 1.3
