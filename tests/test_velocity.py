"""Velocity raster (geoflow.mapping.VelocityInputs) on an analytic trapezoidal channel.

DEM 0.5 m cells, 40 m (x, flow direction) x 100 m (y): bottom width b = 60 m at 0 m centred
on y = 50, side slopes m = 2 (H:V) up to 2 m. Uniform WSE h = 1 m. Reference: Manning's
equation Q = (1/n) A R^(2/3) S^(1/2) with A = (b + m h) h, P = b + 2 h sqrt(1 + m^2)
(Chow 1959, Open-Channel Hydraulics, ch. 5-6), and the closed-form strip integral
(1/n) S^(1/2) (b h^(5/3) + 2 m h^(8/3) / (8/3)).
"""
from __future__ import annotations

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS
from shapely.geometry import LineString, box

from geoflow.errors import RoughnessError
from geoflow.mapping import VelocityInputs, map_reach, write_reach_maps
from geoflow.records import ReachGeometry, Section
from geoflow.terrain import open_dem

X0, Y0, CELL = 300000.0, 6000000.0, 0.5
LX, LY = 40.0, 100.0
B, M, H, N, S = 60.0, 2.0, 1.0, 0.03, 0.001


def ground(yl):
    return np.clip((np.abs(yl - 50.0) - B / 2) / M, 0.0, 2.0)


@pytest.fixture(scope="module")
def dem(tmp_path_factory):
    path = tmp_path_factory.mktemp("vdem") / "dem.tif"
    rows, cols = int(LY / CELL), int(LX / CELL)
    yl = LY - (np.arange(rows) + 0.5) * CELL
    z = np.repeat(ground(yl)[:, None], cols, axis=1).astype(np.float32)
    with rasterio.open(path, "w", driver="GTiff", width=cols, height=rows, count=1, dtype="float32",
                       crs=CRS.from_epsg(32633), transform=Affine(CELL, 0, X0, 0, -CELL, Y0 + LY),
                       nodata=-9999.0) as ds:
        ds.write(z, 1)
    return open_dem(path)


def geom(xs=(2.0, 38.0)) -> ReachGeometry:
    lines = [LineString([(X0 + x, Y0 + 99.0), (X0 + x, Y0 + 1.0)]) for x in xs]
    secs = tuple(Section(reach_id="v1", section_id=i, chainage=x - xs[0], line=ln, station=np.array([0.0, 98.0]),
                         elevation=np.array([2.0, 2.0])) for i, (x, ln) in enumerate(zip(xs, lines)))
    centre = LineString([(X0 + 1, Y0 + 50), (X0 + 39, Y0 + 50)])
    return ReachGeometry(reach_id="v1", centreline=centre, sections=secs, lengths=np.zeros((len(xs) - 1, 3)))


def column_discharge(m) -> np.ndarray:
    """Integral of v * d across each wet column (m3/s), one value per column."""
    q = np.nansum(m.velocity.astype(np.float64) * m.depth, axis=0) * CELL
    return q[np.isfinite(m.depth).any(axis=0)]


def test_integral_matches_manning_discharge(dem):
    m = map_reach(dem, geom(), np.array([H, H]), velocity=VelocityInputs(np.array([S, S]), default_n=N))
    area = (B + M * H) * H
    radius = area / (B + 2 * H * np.sqrt(1 + M * M))
    q_manning = area * radius ** (2 / 3) * np.sqrt(S) / N                 # Chow (1959)
    q_strips = (B * H ** (5 / 3) + 2 * M * H ** (8 / 3) / (8 / 3)) * np.sqrt(S) / N
    q = column_discharge(m)
    assert q.size > 50
    np.testing.assert_allclose(q, q_strips, rtol=5e-3)      # midpoint rule on the closed form
    np.testing.assert_allclose(q, q_manning, rtol=0.03)     # wide section: within a few %


def test_friction_slope_interpolated_like_wse(dem):
    xs, sf = (2.0, 38.0), np.array([0.001, 0.004])
    m = map_reach(dem, geom(xs), np.array([H, H]), velocity=VelocityInputs(sf, default_n=N))
    rows, cols = np.indices(m.depth.shape)
    x, _ = m.transform @ (cols + 0.5, rows + 0.5)
    wet = np.isfinite(m.depth)
    sf_x = np.interp(np.asarray(x)[wet] - X0, xs, sf)                      # numpy.interp reference
    expected = m.depth[wet].astype(np.float64) ** (2 / 3) * np.sqrt(sf_x) / N
    np.testing.assert_allclose(m.velocity[wet], expected, rtol=1e-5)
    assert np.all(np.isnan(m.velocity[~wet]))


def test_manning_n_from_landcover_and_callable(dem, tmp_path):
    cover = ([box(X0, Y0, X0 + 20, Y0 + LY), box(X0 + 20, Y0, X0 + LX, Y0 + LY)], [0.03, 0.06])
    m = map_reach(dem, geom(), np.array([H, H]), velocity=VelocityInputs(np.array([S, S]), landcover=cover))
    rows, cols = np.indices(m.depth.shape)
    x, _ = m.transform @ (cols + 0.5, rows + 0.5)
    x = np.asarray(x) - X0
    wet = np.isfinite(m.depth)
    n_ref = np.where(x < 20, 0.03, 0.06)[wet]
    np.testing.assert_allclose(m.velocity[wet], m.depth[wet] ** (2 / 3) * np.sqrt(S) / n_ref, rtol=1e-5)
    calls = []

    def n_grid(window, transform):
        calls.append((window, transform))
        return np.full((int(window.height), int(window.width)), 0.05)

    paths = {"depth": tmp_path / "d.tif", "velocity": tmp_path / "v.tif"}
    write_reach_maps(dem, geom(), np.array([H, H]), paths, block=64,
                     velocity=VelocityInputs(np.array([S, S]), n_grid=n_grid))
    ref = map_reach(dem, geom(), np.array([H, H]), velocity=VelocityInputs(np.array([S, S]), default_n=0.05))
    with rasterio.open(paths["velocity"]) as ds:
        np.testing.assert_array_equal(ds.read(1, masked=True).filled(np.nan), ref.velocity)
    assert len(calls) > 1 and all(w.width <= 64 and w.height <= 64 for w, _ in calls)


def test_missing_n_is_an_error(dem):
    with pytest.raises(RoughnessError, match="v1.*Manning's n"):
        map_reach(dem, geom(), np.array([H, H]), velocity=VelocityInputs(np.array([S, S])))
