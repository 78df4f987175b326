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


@dataclass(frozen=True)
class CompoundValley:
    """A straight valley whose section is a main channel with steep walls between two flat floodplains
    and steeper valley walls; ``ground`` is the analytic ground line (offset from the centreline m,
    height above the channel bed m) that the DEM represents exactly along a cross-section."""

    dem: Path
    centrelines: Path
    landcover: Path
    length: float
    slope: float
    x0: float
    z_down: float
    ground: tuple
    channel_edge: float     # offset of the channel-cover edge (top of the channel walls), m
    half_width: float       # offset of the DEM edge, m

    def bed_at(self, x):
        return self.z_down + (self.x0 + self.length - np.asarray(x)) * self.slope

    def parts(self, depth, n_channel, n_floodplain):
        """(A_i, P_i, K_i) of the left floodplain, the channel and the right floodplain at ``depth`` above
        the bed: vertical interfaces at the channel edges carry no perimeter (subdivided conveyance,
        Chow 1959 ch. 6); areas and wetted perimeters from the ground line with shapely."""
        line = LineString(self.ground)
        left, right = self.ground[0][0], self.ground[-1][0]
        water = box(left, 0.0, right, depth)
        below = shapely.Polygon(list(self.ground) + [(right, -1e3), (left, -1e3)])
        wet = water.difference(below)
        out = []
        edge = self.channel_edge
        for lo, hi, n in ((-1e9, -edge, n_floodplain), (-edge, edge, n_channel), (edge, 1e9, n_floodplain)):
            strip = box(lo, -1.0, hi, 1e3)
            a = wet.intersection(strip).area
            p = line.intersection(strip).intersection(water.buffer(1e-9)).length
            out.append((a, p, a * (a / p) ** (2 / 3) / n if a > 0 else 0.0))
        return np.array(out)

    def normal_depth(self, q, n_channel, n_floodplain):
        """Manning normal depth with subdivided conveyance, Q = sum K_i S^(1/2), by scipy brentq."""
        f = lambda y: self.parts(y, n_channel, n_floodplain)[:, 2].sum() * np.sqrt(self.slope) - q
        return brentq(f, 1e-4, self.ground[-1][1] - 1e-3, xtol=1e-10)


def make_compound_valley(folder: Path, channel_width=10.0, wall_height=2.0, wall_run=1.0, floodplain=50.0,
                         valley_wall_run=4.0, valley_wall_height=8.0, length=600.0, slope=0.001) -> CompoundValley:
    """DEM (1 m cells), centreline and land cover ("channel" between the tops of the channel walls,
    "floodplain" elsewhere) of a compound valley shaped like the textbook compound section: main channel
    ``channel_width`` wide at the bed with walls ``wall_height`` high (over a horizontal run ``wall_run``,
    since a DEM cannot hold a vertical wall), two floodplains ``floodplain`` wide, valley walls beyond.
    The centreline runs along a row of cell centres, so every break of the ground line falls on a cell
    centre and the bilinear DEM surface reproduces the ground line exactly across the valley."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    b2 = channel_width / 2
    edge = b2 + wall_run
    outer = edge + floodplain
    half = outer + valley_wall_run + 6.0
    offs = [0.0, b2, edge, outer, outer + valley_wall_run, half]
    rel = [0.0, 0.0, wall_height, wall_height, wall_height + valley_wall_height, wall_height + valley_wall_height]
    x0, y0, z_down = 700000.0, 4200000.0, 40.0
    nrow, ncol = int(2 * half) + 1, int(length) + 40
    top = y0 + 2 * half + 0.5
    transform = from_origin(x0 - 20.0, top, 1.0, 1.0)
    cols, rows = np.meshgrid(np.arange(ncol) + 0.5, np.arange(nrow) + 0.5)
    x, y = x0 - 20.0 + cols, top - rows
    yc = y0 + half                       # a row of cell centres
    z = z_down + (x0 + length - x) * slope + np.interp(np.abs(y - yc), offs, rel)
    v = CompoundValley(folder / "dem.tif", folder / "centrelines.gpkg", folder / "landcover.gpkg", length, slope,
                       x0, z_down, tuple((-o, h) for o, h in zip(offs[::-1], rel[::-1]))[:-1]
                       + tuple((o, h) for o, h in zip(offs, rel)), edge, half)
    with rasterio.open(v.dem, "w", driver="GTiff", width=ncol, height=nrow, count=1, dtype="float64", crs=CRS,
                       transform=transform) as ds:
        ds.write(z, 1)
    gpd.GeoDataFrame({"reach_id": ["c1"]}, geometry=[LineString([(x0, yc), (x0 + length, yc)])],
                     crs=CRS).to_file(v.centrelines, driver="GPKG")
    full = box(x0 - 20.0, top - nrow, x0 + length + 20.0, top)
    chan = box(x0 - 20.0, yc - edge, x0 + length + 20.0, yc + edge)
    gpd.GeoDataFrame({"cover": ["channel", "floodplain"]}, geometry=[chan, full.difference(chan)],
                     crs=CRS).to_file(v.landcover, driver="GPKG")
    return v


def compound_config(folder: Path, valley: CompoundValley, classes: str, events: dict, extra: str = "",
                    spacing: float = 50.0) -> Path:
    """geoflow.toml for a compound valley: ``classes`` is the [roughness.classes.*] TOML text, ``events``
    {name: discharge}, a normal-depth downstream boundary at the bed slope; ``extra`` appended."""
    ev = "".join(f'[[events]]\nname = "{k}"\ndischarge = {q}\n' for k, q in events.items())
    path = Path(folder) / "geoflow.toml"
    path.write_text(f"""[run]
name = "compound"
output_dir = "out"
[terrain]
dem = "dem.tif"
[reaches]
centrelines = "centrelines.gpkg"
[sections]
spacing = {spacing}
width = {2 * (valley.half_width - 2.0)}
[roughness]
landcover = "landcover.gpkg"
class_field = "cover"
channel_class = "channel"
{classes}
{ev}[boundary]
downstream = {{ type = "normal_depth", slope = {valley.slope} }}
{extra}""")
    return path
