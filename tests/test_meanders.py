"""Meandering and bent channels carved in a DEM, end to end.

References:
- Centreline: a sine-generated curve, direction theta(s) = w sin(2 pi s / M) (Langbein & Leopold
  1966, USGS Prof. Paper 422-H), integrated here with numpy; its tangent at any chainage is
  analytic, so section angles are checked against it.
- Channel: a trapezoid perpendicular to the centreline everywhere, bed falling at slope S along the
  channel; in-bank uniform flow has the Manning normal depth (Chow 1959, ch. 6; scipy brentq).
- Crossings: shapely's intersects between every pair of section lines.
"""
import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin
from scipy.spatial import cKDTree
from shapely.geometry import LineString, box
from valleys import CRS, Valley, plain_config, sine_generated

from geoflow.batch import run

B, Z, H, S, N, Q = 10.0, 2.0, 4.0, 0.001, 0.03, 25.0


def carve(folder, length=1500.0, wavelength=500.0, omega=1.0, margin=90.0):
    s, x, y, theta = sine_generated(length, wavelength, omega)
    x0, y0 = 700000.0, 4200000.0
    line = LineString(np.column_stack([x0 + x, y0 + y]))
    minx, miny, maxx, maxy = line.bounds
    left, top = np.floor(minx - margin), np.ceil(maxy + margin)
    ncol, nrow = int(np.ceil(maxx + margin - left)), int(np.ceil(top - (miny - margin)))
    transform = from_origin(left, top, 1.0, 1.0)
    cols, rows = np.meshgrid(np.arange(ncol) + 0.5, np.arange(nrow) + 0.5)
    # distance and chainage from the nearest of densely spaced centreline points (0.1 m apart;
    # scipy cKDTree) - within 1 mm of the exact distance on the bank slopes
    fine = np.arange(0.0, line.length, 0.1)
    ref = shapely.get_coordinates(shapely.line_interpolate_point(line, fine))
    dist, idx = cKDTree(ref).query(np.column_stack([left + cols.ravel(), top - rows.ravel()]))
    chain = fine[idx]
    rel = np.clip((dist - B / 2) / Z, 0.0, H) + np.clip(dist - B / 2 - Z * H, 0, None) * 0.01
    z = 40.0 + (length - chain) * S + rel
    with rasterio.open(folder / "dem.tif", "w", driver="GTiff", width=ncol, height=nrow, count=1,
                       dtype="float32", crs=CRS, transform=transform) as ds:
        ds.write(z.reshape(nrow, ncol).astype("float32"), 1)
    gpd.GeoDataFrame({"reach_id": ["m1"]}, geometry=[line], crs=CRS).to_file(folder / "centrelines.gpkg",
                                                                              driver="GPKG")
    gpd.GeoDataFrame({"cover": ["channel"]}, geometry=[box(left, miny - margin, maxx + margin, top)],
                     crs=CRS).to_file(folder / "landcover.gpkg", driver="GPKG")
    return line, s, theta, x0, y0


def config(folder, width, spacing=20.0):
    return plain_config(folder, "meander", width=width, spacing=spacing, classes={"channel": N}, event="inbank",
                        discharge=Q, slope=S)


@pytest.mark.parametrize("omega,width", [(0.6, 60.0), (1.2, 90.0)])
def test_meander_sections_perpendicular_uncrossed_and_normal_depth(tmp_path, omega, width):
    line, s, theta, x0, y0 = carve(tmp_path, omega=omega)
    res = run(config(tmp_path, width))
    assert not res.failed, res.reaches
    secs = gpd.read_file(res.paths["sections"], layer="sections")
    geoms = np.array(secs.geometry)
    hits = shapely.intersects(geoms[:, None], geoms[None, :])
    np.fill_diagonal(hits, False)
    assert not hits.any(), "sections cross"
    # angle between each section and the analytic normal of the centreline at its chainage
    t_sec = np.interp(secs["chainage_m"], s, theta)
    coords = np.array([np.array(g.coords)[[0, -1]] for g in geoms])
    d = coords[:, 1] - coords[:, 0]
    ang = np.arctan2(d[:, 1], d[:, 0])
    normal = t_sec - np.pi / 2                 # left -> right looking downstream
    err = np.degrees(np.abs(np.angle(np.exp(1j * (ang - normal)))))
    assert np.max(err) < 5.0, np.max(err)
    yn = Valley(None, None, None, 0, B, Z, H, S, 0, 0, 0).normal_depth(Q, N)
    p = res.profile
    bed = 40.0 + (1500.0 - p["chainage_m"]) * S
    depth = p["wse_m"] - bed
    print(f"omega {omega}: max angle error {np.max(err):.2f} deg, depth error "
          f"{np.max(np.abs(depth / yn - 1)) * 100:.2f} %")
    assert np.all(np.abs(depth / yn - 1) < 0.03), (yn, depth.describe())
