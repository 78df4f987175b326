"""A meandering channel in a wide straight valley, end to end: dog-leg sections and a level flood.

References:
- Centreline: a sine-generated curve, theta(s) = omega sin(2 pi s / M) (Langbein & Leopold 1966,
  USGS Prof. Paper 422-H), integrated with numpy. The valley is straight along +x by construction
  (the floodplain z = z0 - S x is flat across it), so its normal is the y axis exactly.
- Channel: a trapezoid perpendicular to the centreline, carved below the floodplain by distance to
  the centreline (scipy cKDTree over points 0.25 m apart).
- Crossings: shapely intersects between every pair of section lines.
- A flood over a wide, uniform, straight floodplain flows down the valley at uniform depth, so its
  surface is level across the valley and parallel to the floodplain (uniform flow, Chow 1959 ch. 6;
  common practice, no source for the tolerances, which are the issue's).
"""
import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from scipy.spatial import cKDTree
from shapely.geometry import LineString, box
from valleys import grid, sine_generated, trapezoid_depth, valley_config, write_cover, write_dem, write_reaches

from geoflow.batch import run

CELL = 2.0
Z0, SLOPE = 30.0, 0.0008          # floodplain level at x = 0, valley slope
HALF_FLOOR = 260.0                 # floodplain half-width; walls beyond rise 1 in 4
B_HALF, SIDE, DEPTH = 5.0, 2.0, 2.0  # channel: bottom half-width, side slope (H:V), depth below the floodplain


def meander_valley(folder, wavelength, omega, waves=3):
    s, x, y, _ = sine_generated(waves * wavelength, wavelength, omega, step=0.25)
    y = y - 0.5 * (y.max() + y.min())
    x0, yc = 80.0, 500.0
    line = LineString(np.column_stack((x0 + x, yc + y))[::4])
    width = float(x0 + x[-1] + 80.0)
    X, Y, transform = grid(0.0, 0.0, width, 1000.0, CELL)
    dist, _ = cKDTree(np.column_stack((x0 + x, yc + y))).query(np.column_stack((X.ravel(), Y.ravel())))
    channel = trapezoid_depth(dist.reshape(X.shape), B_HALF, SIDE, DEPTH)
    walls = 0.25 * np.clip(np.abs(Y - yc) - HALF_FLOOR, 0.0, None)
    z = Z0 - SLOPE * X - channel + walls
    write_dem(folder / "dem.tif", z, transform)
    write_reaches(folder / "centrelines.gpkg", {"m": line})
    top = B_HALF + SIDE * DEPTH
    write_cover(folder / "landcover.gpkg", [(box(0, 0, width, 1000.0), "meadow"), (line.buffer(top), "channel")])
    return line, yc, top


@pytest.mark.parametrize("wavelength, omega, spacing", [(700.0, 0.95, 40.0), (520.0, 0.6, 30.0)])
def test_meander_in_a_wide_valley(tmp_path, wavelength, omega, spacing):
    line, yc, top = meander_valley(tmp_path, wavelength, omega)
    cfg = valley_config(tmp_path, {"m": (spacing, 560.0)}, [("flood", 220.0)],
                        f'{{ type = "normal_depth", slope = {SLOPE} }}', {"channel": 0.035, "meadow": 0.045})
    res = run(cfg)
    assert not res.failed, res.reaches
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    geoms = np.asarray(secs.geometry.values)
    hits = shapely.intersects(geoms[:, None], geoms[None, :])
    np.fill_diagonal(hits, False)
    assert not hits.any(), "sections cross"

    # floodplain legs (pieces whose mid-point lies outside the channel) against the valley normal (y axis)
    chan = line.buffer(top)
    angles, lefts, rights = [], [], []
    for g in geoms:
        c = np.asarray(g.coords)
        mids = shapely.points(0.5 * (c[:-1] + c[1:]))
        d = np.diff(c, axis=0)
        fp = ~shapely.within(mids, chan)
        angles += list(np.degrees(np.arctan2(np.abs(d[fp, 0]), np.abs(d[fp, 1]))))
        lefts.append(c[0, 0])
        rights.append(c[-1, 0])
    assert max(angles) < 10.0, max(angles)
    assert sum(len(g.coords) > 2 for g in geoms) > len(geoms) / 3      # the meander does bend them

    # no fans: along each valley side the ends keep their order and a spacing within a factor 3 of
    # the mean along-valley spacing of the sections
    for ends in (np.array(lefts), np.array(rights)):
        gap = np.diff(ends)
        mean = (ends[-1] - ends[0]) / (ends.size - 1)
        assert gap.min() > mean / 3 and gap.max() < 3 * mean, (gap.min(), gap.max(), mean)

    # the mapped flood: level across the valley, parallel to the floodplain
    with rasterio.open(res.output_dir / "rasters" / "m" / "flood_wse.tif") as ds:
        wse = ds.read(1, masked=True).filled(np.nan)
        t = ds.transform
    xs = t.c + (np.arange(wse.shape[1]) + 0.5) * t.a
    ys = t.f + (np.arange(wse.shape[0]) + 0.5) * t.e
    x_lo, x_hi = line.coords[0][0] + 300.0, line.coords[-1][0] - 300.0
    floor = np.abs(ys - yc) < HALF_FLOOR - 20.0
    cols = np.flatnonzero((xs > x_lo) & (xs < x_hi))[::10]
    spread = [np.nanmax(wse[floor, c]) - np.nanmin(wse[floor, c]) for c in cols]
    level = np.array([np.nanmedian(wse[floor, c]) for c in cols])
    assert np.all(np.isfinite(level)) and np.isfinite(spread).all()
    depth = level - (Z0 - SLOPE * xs[cols])
    slope = -np.polyfit(xs[cols], level, 1)[0]
    print(f"M {wavelength:g} omega {omega}: legs max {max(angles):.2f} deg off the valley normal, WSE spread "
          f"across the valley max {max(spread) * 100:.1f} cm, WSE slope / valley slope {slope / SLOPE:.3f}, "
          f"floodplain depth {depth.min():.3f}-{depth.max():.3f} m")
    assert max(spread) < 0.03
    assert abs(slope / SLOPE - 1.0) < 0.05
    assert depth.min() > 0.3 and depth.max() - depth.min() < 0.04


def test_irregular_meander_whose_belt_bends(tmp_path):
    """Meanders of several lengths mixed (random phases, seeded) whose belt bends gently, carved in
    a plain falling along x: no two sections cross (shapely) and, along each side, section ends keep
    a spacing within a factor 3 of the mean (no fans), also where the channel runs across the belt."""
    rng = np.random.default_rng(5)
    s = np.arange(0, 3200, 0.5)
    theta = 0.25 * np.sin(2 * np.pi * s / 3000)
    for _ in range(4):
        theta += rng.uniform(0.2, 0.5) * np.sin(2 * np.pi * s / rng.uniform(300, 900) + rng.uniform(0, 6))
    x = 300 + np.concatenate([[0], np.cumsum(np.cos(theta[:-1]) * 0.5)])
    y = np.concatenate([[0], np.cumsum(np.sin(theta[:-1]) * 0.5)])
    y += 1300 - y.mean()
    line = LineString(np.column_stack((x, y))[::4])
    X, Y, transform = grid(0.0, 0.0, x.max() + 300, 2600.0, CELL)
    d_ch, _ = cKDTree(np.column_stack((x, y))).query(np.column_stack((X.ravel(), Y.ravel())))
    z = Z0 - SLOPE * X - trapezoid_depth(d_ch.reshape(X.shape), B_HALF, SIDE, DEPTH)
    write_dem(tmp_path / "dem.tif", z, transform)
    write_reaches(tmp_path / "centrelines.gpkg", {"m": line})
    write_cover(tmp_path / "landcover.gpkg", [(box(0, 0, x.max() + 300, 2600.0), "meadow"),
                                             (line.buffer(B_HALF + SIDE * DEPTH), "channel")])
    cfg = valley_config(tmp_path, {"m": (40.0, 700.0)}, [("flood", 300.0)],
                        f'{{ type = "normal_depth", slope = {SLOPE} }}', {"channel": 0.035, "meadow": 0.045})
    res = run(cfg)
    assert not res.failed
    geoms = np.asarray(gpd.read_file(res.paths["sections"], layer="sections").geometry.values, dtype=object)
    hits = shapely.intersects(geoms[:, None], geoms[None, :])
    np.fill_diagonal(hits, False)
    assert not hits.any()
    for k in (0, -1):
        ends = np.array([np.asarray(g.coords)[k] for g in geoms])
        gap = np.hypot(*np.diff(ends, axis=0).T)
        mean = gap.mean()
        assert gap.min() > mean / 3 and gap.max() < 3 * mean, (gap.min(), gap.max(), mean)
