"""Synthetic straight valleys with an analytic trapezoidal channel, written to GeoTIFF/GeoPackage.

Used by the end-to-end and config tests. The channel is prismatic, so normal depth and top
width have closed forms (Manning's equation; Chow 1959 ch. 6) solved here with scipy brentq.

LiDAR-like variant (``flown_depth``): the DEM holds the water surface of the flight day, a flat
strip ``flown_depth`` m above the true bed across the channel, as a LiDAR survey records it; the
true channel (``Valley.true_ground``) lies hidden below it. ``write_survey`` writes surveyed
ground points of the true channel across chosen chainages.
"""
from __future__ import annotations

import textwrap
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import rasterio
import shapely
from rasterio.transform import from_origin
from scipy.optimize import brentq
from shapely.geometry import LineString, box

CRS = "EPSG:32630"


@dataclass(frozen=True)
class Valley:
    dem: Path
    centrelines: Path
    landcover: Path
    length: float           # m, along x, flowing towards +x
    bottom_width: float     # m
    side_slope: float       # H:V
    bank_height: float      # m, channel depth up to the floodplain
    slope: float            # bed slope
    x0: float
    yc: float
    z_down: float           # bed elevation at the downstream end
    flown_depth: float | None = None   # LiDAR-like: the DEM shows water this deep above the bed as ground
    half_width: float = 100.0
    cell: float = 1.0                  # DEM cell size, m

    @property
    def top_half(self) -> float:
        """Half the channel's width at the bank tops (m)."""
        return self.bottom_width / 2 + self.side_slope * self.bank_height

    def true_ground(self, x, y):
        """Ground of the true channel and floodplain (before any flattening) at (x, y), reach r1."""
        off = np.abs(np.asarray(y) - self.yc)
        below = np.clip(self.bank_height - (off - self.bottom_width / 2) / self.side_slope, 0.0, self.bank_height)
        z = self.bed_at(x) + self.bank_height - below
        return z + np.clip(off - (self.top_half + 40.0), 0, None) * 0.05

    def bed_at(self, x):
        return self.z_down + (self.x0 + self.length - np.asarray(x)) * self.slope

    def area(self, y):
        return (self.bottom_width + self.side_slope * y) * y

    def top_width(self, y):
        return self.bottom_width + 2 * self.side_slope * y

    def perimeter(self, y):
        return self.bottom_width + 2 * y * np.sqrt(1 + self.side_slope**2)

    def normal_depth(self, q, n):
        """Manning's equation Q = (1/n) A R^(2/3) S^(1/2) (SI) solved for y with scipy brentq."""
        f = lambda y: self.area(y) * (self.area(y) / self.perimeter(y)) ** (2 / 3) * np.sqrt(self.slope) / n - q
        return brentq(f, 1e-6, 50.0, xtol=1e-10)


def make_valley(folder: Path, length=1200.0, bottom_width=12.0, side_slope=2.0, bank_height=4.0,
                slope=0.001, half_width=100.0, cell=1.0, crs=CRS, centreline_crs=None,
                classes=("channel",), z_down=50.0, n_reaches=1, flown_depth=None) -> Valley:
    """Write dem.tif, centrelines.gpkg and landcover.gpkg for a straight trapezoidal valley.

    With ``n_reaches`` > 1 the DEM holds that many identical parallel valleys (strips of
    2*half_width, stacked northwards), with reaches "r1", "r2", ...; the Valley describes r1.
    With ``flown_depth`` the DEM is LiDAR-like: ground below bed + flown_depth inside the channel
    is raised to that level (the flat water surface of the flight day).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    x0, y0 = 500000.0, 4000000.0
    ncol, nrow = int(length / cell) + 40, int(2 * half_width * n_reaches / cell)
    yc = y0 + half_width
    top_y = y0 + 2 * half_width * n_reaches
    transform = from_origin(x0 - 20 * cell, top_y, cell, cell)
    cols, rows = np.meshgrid(np.arange(ncol) + 0.5, np.arange(nrow) + 0.5)
    x, y = x0 - 20 * cell + cols * cell, top_y - rows * cell
    v = Valley(folder / "dem.tif", folder / "centrelines.gpkg", folder / "landcover.gpkg", length,
               bottom_width, side_slope, bank_height, slope, x0, yc, z_down, flown_depth, half_width, cell)
    off = np.abs(np.mod(y - y0, 2 * half_width) - half_width)
    depth_below_bank = np.clip(bank_height - (off - bottom_width / 2) / side_slope, 0.0, bank_height)
    z = v.bed_at(x) + bank_height - depth_below_bank
    z += np.clip(off - (bottom_width / 2 + side_slope * bank_height + 40.0), 0, None) * 0.05  # valley walls
    if flown_depth is not None:
        water = v.bed_at(x) + flown_depth
        z = np.where((off < v.top_half) & (z < water), water, z)
    with rasterio.open(v.dem, "w", driver="GTiff", width=ncol, height=nrow, count=1, dtype="float32",
                       crs=crs, transform=transform, nodata=-9999.0) as ds:
        ds.write(z.astype("float32"), 1)
    lines = [LineString([(x0, yc + 2 * half_width * k), (x0 + length, yc + 2 * half_width * k)])
             for k in range(n_reaches)]
    cl = gpd.GeoDataFrame({"reach_id": [f"r{k + 1}" for k in range(n_reaches)]}, geometry=lines, crs=crs)
    if centreline_crs:
        cl = cl.to_crs(centreline_crs)
    cl.to_file(v.centrelines, layer="centrelines", driver="GPKG")
    top = bottom_width / 2 + side_slope * bank_height
    full = box(x0 - 20 * cell, y0, x0 + length + 20 * cell, top_y)
    chan = shapely.union_all([box(x0 - 20 * cell, yc + 2 * half_width * k - top, x0 + length + 20 * cell,
                                  yc + 2 * half_width * k + top) for k in range(n_reaches)])
    polys, names = [chan if len(classes) > 1 else full], [classes[0]]
    if len(classes) > 1:
        polys.append(full.difference(chan))
        names.append(classes[1])
    gpd.GeoDataFrame({"cover": names}, geometry=polys, crs=crs).to_file(v.landcover, layer="landcover",
                                                                         driver="GPKG")
    return v


def write_survey(folder: Path, valley: Valley, chainages, step: float = 0.5, beyond: float = 4.0,
                 z_offset: float = 0.0, name: str = "survey.gpkg", extra_xy=()) -> Path:
    """Surveyed ground points (field z_m) of the true channel across the reach at ``chainages``.

    Points every ``step`` m from ``beyond`` m outside one bank top to as far outside the other
    (the outer ones are dry overlap points on the floodplain); z_m is the true ground (analytic)
    plus ``z_offset`` (a survey on another datum). ``extra_xy`` adds points at those places.
    """
    offsets = np.arange(-(valley.top_half + beyond), valley.top_half + beyond + 1e-9, step)
    xs = np.concatenate([np.full(offsets.size, valley.x0 + c) for c in chainages])
    ys = np.tile(valley.yc + offsets, len(chainages))
    z = valley.true_ground(xs, ys) + z_offset
    if len(extra_xy):
        ex = np.asarray(extra_xy, dtype=float)
        xs, ys = np.concatenate([xs, ex[:, 0]]), np.concatenate([ys, ex[:, 1]])
        z = np.concatenate([z, valley.true_ground(ex[:, 0], ex[:, 1])])
    path = Path(folder) / name
    gpd.GeoDataFrame({"z_m": z}, geometry=gpd.points_from_xy(xs, ys), crs=CRS).to_file(path, layer="survey",
                                                                                       driver="GPKG")
    return path


def write_config(folder: Path, valley: Valley, discharge: float, n: float, extra: str = "",
                 boundary: str | None = None, classes: dict | None = None, spacing=50.0, width=120.0) -> Path:
    """A config for the valley; ``extra`` is appended verbatim."""
    classes = classes or {"channel": n}
    cls = "\n".join(f"[roughness.classes.{k}]\nn = {val}\n" for k, val in classes.items())
    boundary = boundary or f'{{ type = "normal_depth", slope = {valley.slope} }}'
    text = textwrap.dedent(f"""\
        [run]
        name = "valley"
        output_dir = "out"

        [terrain]
        dem = "{valley.dem.name}"

        [reaches]
        centrelines = "{valley.centrelines.name}"

        [sections]
        spacing = {spacing}
        width = {width}

        [roughness]
        landcover = "{valley.landcover.name}"
        class_field = "cover"
        channel_class = "channel"

        [[events]]
        name = "design"
        discharge = {discharge}

        [boundary]
        regime = "subcritical"
        downstream = {boundary}
        """) + "\n" + cls + "\n" + extra
    path = Path(folder) / "geoflow.toml"
    path.write_text(text)
    return path


def plain_config(folder: Path, name: str, width: float, spacing: float, classes: dict, event: str,
                 discharge: float, slope: float) -> Path:
    """geoflow.toml for dem.tif / centrelines.gpkg / landcover.gpkg (field "cover", channel class
    "channel") in ``folder``: one event and a normal-depth downstream boundary."""
    cls = "".join(f"[roughness.classes.{k}]\nn = {v}\n" for k, v in classes.items())
    path = Path(folder) / "geoflow.toml"
    path.write_text(f"""
[run]
name = "{name}"
output_dir = "out"
[terrain]
dem = "dem.tif"
[reaches]
centrelines = "centrelines.gpkg"
[sections]
spacing = {spacing}
width = {width}
[roughness]
landcover = "landcover.gpkg"
class_field = "cover"
channel_class = "channel"
{cls}[[events]]
name = "{event}"
discharge = {discharge}
[boundary]
downstream = {{ type = "normal_depth", slope = {slope} }}
""")
    return path
