"""Synthetic straight valleys with an analytic trapezoidal channel, written to GeoTIFF/GeoPackage.

Used by the end-to-end and config tests. The channel is prismatic, so normal depth and top
width have closed forms (Manning's equation; Chow 1959 ch. 6) solved here with scipy brentq.
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
                classes=("channel",), z_down=50.0, n_reaches=1) -> Valley:
    """Write dem.tif, centrelines.gpkg and landcover.gpkg for a straight trapezoidal valley.

    With ``n_reaches`` > 1 the DEM holds that many identical parallel valleys (strips of
    2*half_width, stacked northwards), with reaches "r1", "r2", ...; the Valley describes r1.
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
               bottom_width, side_slope, bank_height, slope, x0, yc, z_down)
    off = np.abs(np.mod(y - y0, 2 * half_width) - half_width)
    depth_below_bank = np.clip(bank_height - (off - bottom_width / 2) / side_slope, 0.0, bank_height)
    z = v.bed_at(x) + bank_height - depth_below_bank
    z += np.clip(off - (bottom_width / 2 + side_slope * bank_height + 40.0), 0, None) * 0.05  # valley walls
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


# ---------------------------------------------------------------- analytic valleys on a grid
def grid(x0: float, y0: float, width: float, height: float, cell: float):
    """Cell-centre coordinates (X, Y) of a north-up grid and its affine transform."""
    ncol, nrow = int(round(width / cell)), int(round(height / cell))
    transform = from_origin(x0, y0 + nrow * cell, cell, cell)
    cols, rows = np.meshgrid(np.arange(ncol) + 0.5, np.arange(nrow) + 0.5)
    return x0 + cols * cell, y0 + nrow * cell - rows * cell, transform


def write_dem(path: Path, z: np.ndarray, transform, crs=CRS) -> Path:
    with rasterio.open(path, "w", driver="GTiff", width=z.shape[1], height=z.shape[0], count=1, dtype="float32",
                       crs=crs, transform=transform, nodata=-9999.0) as ds:
        ds.write(z.astype("float32"), 1)
    return Path(path)


def write_reaches(path: Path, lines: dict, crs=CRS) -> Path:
    gpd.GeoDataFrame({"reach_id": list(lines)}, geometry=list(lines.values()), crs=crs).to_file(
        path, layer="centrelines", driver="GPKG")
    return Path(path)


def write_cover(path: Path, parts: list, crs=CRS) -> Path:
    """Land cover from (polygon, class) pairs; later pairs are cut out of earlier ones (no overlaps)."""
    geoms, names, taken = [], [], None
    for poly, name in reversed(parts):
        piece = poly if taken is None else poly.difference(taken)
        taken = poly if taken is None else taken.union(poly)
        if not piece.is_empty:
            geoms.append(piece)
            names.append(name)
    gpd.GeoDataFrame({"cover": names}, geometry=geoms, crs=crs).to_file(path, layer="landcover", driver="GPKG")
    return Path(path)


def trapezoid_depth(d, bottom_half: float, side_slope: float, depth: float):
    """Depth of a trapezoidal channel below the bank top at distance ``d`` from its centreline."""
    return np.clip(depth - (np.asarray(d) - bottom_half) / side_slope, 0.0, depth)


def valley_config(folder: Path, reaches: dict, events: list, boundary: str, classes: dict, extra: str = "",
                  name: str = "valley", output_dir: str = "out") -> Path:
    """geoflow.toml for dem.tif / centrelines.gpkg / landcover.gpkg in ``folder``.

    ``reaches``: {reach id: (spacing, width)}; the first is the [sections] default. ``events``:
    [(name, discharge TOML value)].
    """
    first = next(iter(reaches.values()))
    per = "".join(f"[sections.reaches.{rid}]\nspacing = {s}\nwidth = {w}\n" for rid, (s, w) in reaches.items())
    cls = "".join(f"[roughness.classes.{k}]\nn = {v}\n" for k, v in classes.items())
    ev = "".join(f'[[events]]\nname = "{n}"\ndischarge = {q}\n' for n, q in events)
    text = (f'[run]\nname = "{name}"\noutput_dir = "{output_dir}"\n[terrain]\ndem = "dem.tif"\n'
            f'[reaches]\ncentrelines = "centrelines.gpkg"\n[sections]\nspacing = {first[0]}\nwidth = {first[1]}\n'
            f'{per}[roughness]\nlandcover = "landcover.gpkg"\nclass_field = "cover"\nchannel_class = "channel"\n'
            f'{cls}{ev}[boundary]\ndownstream = {boundary}\n{extra}')
    path = Path(folder) / "geoflow.toml"
    path.write_text(text)
    return path


def sine_generated(length, wavelength, omega, step=1.0):
    """Sine-generated meander, direction theta(s) = omega sin(2 pi s / wavelength) (Langbein & Leopold
    1966, USGS Prof. Paper 422-H), integrated every ``step`` m of arc: (s, x, y, theta)."""
    s = np.arange(0.0, length + step, step)
    theta = omega * np.sin(2 * np.pi * s / wavelength)
    x = np.concatenate([[0.0], np.cumsum(np.cos(theta[:-1]) * step)])
    y = np.concatenate([[0.0], np.cumsum(np.sin(theta[:-1]) * step)])
    return s, x, y, theta
