"""Generated (never committed) inputs for the throughput benchmark: many meandering valleys.

Each reach runs in its own straight valley strip ``STRIP_M`` wide, laid out in a grid of
columns and rows on one DEM. In local coordinates (u along the valley from its upstream end,
v across from the valley axis, left = +v) the channel follows the sine meander
v = A sin(2 pi u / wavelength) (amplitude 40 m, wavelength 800 m: sinuosity ~1.025, smallest
bend radius 405 m, wider than the 150 m half-width of the sections). The ground is invented:

- trapezoidal channel, bottom 12 m, 2.5 m deep, side slopes 2:1 (top width 22 m);
- floodplain rising 0.3 % away from the channel, valley walls rising 5 % beyond 160 m from
  the axis, valley floor falling ``VALLEY_SLOPE`` downstream, +-5 cm of seeded noise.

Land cover: the channel polygon (the centreline buffered by the 11 m half top width) and
floodplain patches 250 m x 100 m of four classes (seeded), with the channel cut out, covering
every strip without gaps. The DEM is written block by block (tiled 512, DEFLATE, float predictor).
"""
from __future__ import annotations

import textwrap
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import rasterio
import shapely
from affine import Affine
from rasterio.crs import CRS
from rasterio.windows import Window

EPSG = 32630
X0, Y0 = 300000.0, 5200000.0
STRIP_M = 400.0               # valley strip width (m)
MARGIN_M = 60.0               # DEM beyond each end of a reach (m): end sections lean 17 deg
AMPLITUDE, WAVELENGTH = 40.0, 800.0
VALLEY_SLOPE = 0.001
BOTTOM, DEPTH, SIDE = 12.0, 2.5, 2.0
TOP_HALF = BOTTOM / 2 + SIDE * DEPTH
CLASSES = {"channel": 0.040, "grassland": 0.035, "crops": 0.040, "woodland": 0.100, "built_up": 0.120}
PATCH_U, PATCH_V = 250.0, 100.0


@dataclass(frozen=True)
class Network:
    folder: Path
    config: Path
    dem: Path
    reaches: int
    reach_length_m: float          # centreline length of each reach
    valley_length_m: float         # straight valley length of each reach
    columns: int
    rows: int
    cell: float
    events: int

    @property
    def total_km(self) -> float:
        return self.reaches * self.reach_length_m / 1000.0


def meander_length(valley_length: float) -> float:
    """Arc length of v = A sin(k u) over 0..valley_length (dense trapezoid sum)."""
    u = np.linspace(0.0, valley_length, int(valley_length) * 2 + 2)
    v = AMPLITUDE * np.sin(2 * np.pi * u / WAVELENGTH)
    return float(np.sum(np.hypot(np.diff(u), np.diff(v))))


def valley_length_for(reach_length: float) -> float:
    """Straight valley length whose meander is ``reach_length`` long (secant iterations)."""
    lo = reach_length / 1.03
    for _ in range(4):
        lo *= reach_length / meander_length(lo)
    return lo


def _origin(k: int, columns: int, valley: float) -> tuple[float, float]:
    """Map coordinates of the upstream end of valley k's axis."""
    col, row = k % columns, k // columns
    return X0 + MARGIN_M + col * (valley + 2 * MARGIN_M), Y0 + (row + 0.5) * STRIP_M


def centreline(k: int, columns: int, valley: float) -> shapely.LineString:
    x0, y0 = _origin(k, columns, valley)
    u = np.linspace(0.0, valley, int(valley / 2.0) + 1)          # a vertex every ~2 m
    return shapely.LineString(np.column_stack([x0 + u, y0 + AMPLITUDE * np.sin(2 * np.pi * u / WAVELENGTH)]))


def ground_block(r0: int, c0: int, h: int, w: int, transform: Affine, columns: int, valley: float,
                 cell: float) -> np.ndarray:
    """Invented ground (float32) on a DEM block; see the module docstring."""
    rows, cols = np.mgrid[r0:r0 + h, c0:c0 + w]
    x = transform.c + (cols + 0.5) * cell
    y = transform.f - (rows + 0.5) * cell
    col = np.floor((x - X0) / (valley + 2 * MARGIN_M))
    row = np.floor((y - Y0) / STRIP_M)
    u = x - (X0 + MARGIN_M + col * (valley + 2 * MARGIN_M))
    v = y - (Y0 + (row + 0.5) * STRIP_M)
    k = 2 * np.pi / WAVELENGTH
    uc = np.clip(u, 0.0, valley)
    d = np.abs(v - AMPLITUDE * np.sin(k * uc)) / np.sqrt(1.0 + (AMPLITUDE * k * np.cos(k * uc)) ** 2)
    bed = 100.0 - VALLEY_SLOPE * u
    channel = np.clip((d - BOTTOM / 2) / SIDE, 0.0, DEPTH)
    flood = 0.003 * np.clip(d - TOP_HALF, 0.0, None)
    walls = 0.05 * np.clip(np.abs(v) - 160.0, 0.0, None)
    noise = np.random.default_rng(r0 * 100003 + c0).uniform(-0.05, 0.05, (h, w)) * (d > TOP_HALF)
    return (bed + channel + flood + walls + noise).astype(np.float32)


def write_dem(path: Path, width: int, height: int, transform: Affine, columns: int, valley: float,
              cell: float) -> None:
    tmp = path.with_suffix(".partial.tif")
    with rasterio.Env(GDAL_CACHEMAX=256 * 1024 * 1024), rasterio.open(
            tmp, "w", driver="GTiff", width=width, height=height, count=1, dtype="float32",
            crs=CRS.from_epsg(EPSG), transform=transform, nodata=-9999.0, tiled=True, blockxsize=512,
            blockysize=512, compress="DEFLATE", predictor=3, BIGTIFF="IF_SAFER") as ds:
        for r0 in range(0, height, 1024):
            for c0 in range(0, width, 2048):
                h, w = min(1024, height - r0), min(2048, width - c0)
                ds.write(ground_block(r0, c0, h, w, transform, columns, valley, cell), 1,
                         window=Window(c0, r0, w, h))
    tmp.rename(path)


def landcover(lines: list, columns: int, valley: float, seed: int) -> gpd.GeoDataFrame:
    """Channel polygons and floodplain patches (channel cut out) covering every strip."""
    rng = np.random.default_rng(seed)
    names = [c for c in CLASSES if c != "channel"]
    geoms, classes = [], []
    for k, line in enumerate(lines):
        chan = shapely.buffer(line, TOP_HALF, cap_style="flat")
        x0, y0 = _origin(k, columns, valley)
        left, right = x0 - MARGIN_M, x0 + valley + MARGIN_M
        u_edges = np.append(np.arange(left, right, PATCH_U), right)
        boxes = [shapely.box(a, y0 - STRIP_M / 2 + j * PATCH_V, b, y0 - STRIP_M / 2 + (j + 1) * PATCH_V)
                 for j in range(int(STRIP_M / PATCH_V)) for a, b in zip(u_edges[:-1], u_edges[1:])]
        # the channel may leave the strip's end boxes: clip it to the strip
        strip = shapely.box(left, y0 - STRIP_M / 2, right, y0 + STRIP_M / 2)
        chan = shapely.intersection(chan, strip)
        patches = shapely.difference(np.array(boxes, dtype=object), chan)
        keep = ~shapely.is_empty(patches)
        geoms += [chan] + list(patches[keep])
        classes += ["channel"] + list(rng.choice(names, int(keep.sum())))
    return gpd.GeoDataFrame({"cover": classes}, geometry=geoms, crs=f"EPSG:{EPSG}")


def make_network(folder: Path, reaches: int, reach_length_m: float, events: int = 5, cell: float = 2.0,
                 columns: int | None = None, outputs=("wse", "depth", "extent", "report"),
                 seed: int = 14) -> Network:
    """Write dem.tif, centrelines.gpkg, landcover.gpkg and network.toml into ``folder`` (once)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    valley = valley_length_for(reach_length_m)
    if columns is None:       # a roughly square DEM
        columns = max(1, int(round(np.sqrt(reaches * STRIP_M / (valley + 2 * MARGIN_M)))))
    rows = int(np.ceil(reaches / columns))
    width = int(np.ceil(columns * (valley + 2 * MARGIN_M) / cell))
    height = int(np.ceil(rows * STRIP_M / cell))
    transform = Affine(cell, 0.0, X0, 0.0, -cell, Y0 + height * cell)
    dem = folder / "dem.tif"
    lines = [centreline(k, columns, valley) for k in range(reaches)]
    if not dem.exists():
        write_dem(dem, width, height, transform, columns, valley, cell)
        gpd.GeoDataFrame({"reach_id": [f"v{k + 1:04d}" for k in range(reaches)]}, geometry=lines,
                         crs=f"EPSG:{EPSG}").to_file(folder / "centrelines.gpkg", layer="centrelines", driver="GPKG")
        landcover(lines, columns, valley, seed).to_file(folder / "landcover.gpkg", layer="landcover", driver="GPKG")
    config = folder / "network.toml"
    config.write_text(config_text(events, cell, outputs))
    return Network(folder=folder, config=config, dem=dem, reaches=reaches, reach_length_m=float(lines[0].length),
                   valley_length_m=valley, columns=columns, rows=rows, cell=cell, events=events)


def config_text(events: int, cell: float, outputs, output_dir: str = "out") -> str:
    flows = np.linspace(20.0, 150.0, events) if events > 1 else np.array([60.0])
    ev = "".join(f'[[events]]\nname = "q{k + 1}"\ndischarge = {q:.1f}\n\n' for k, q in enumerate(flows))
    cls = "".join(f"[roughness.classes.{c}]\nn = {n}\n" for c, n in CLASSES.items())
    slope = VALLEY_SLOPE / 1.0247
    return textwrap.dedent(f"""\
        [run]
        name = "network"
        output_dir = "{output_dir}"

        [terrain]
        dem = "dem.tif"

        [reaches]
        centrelines = "centrelines.gpkg"
        layer = "centrelines"

        [sections]
        spacing = 50.0
        width = 300.0
        sample_step = {cell}

        [roughness]
        landcover = "landcover.gpkg"
        layer = "landcover"
        class_field = "cover"
        channel_class = "channel"

        [boundary]
        regime = "subcritical"
        downstream = {{ type = "normal_depth", slope = {slope:.6f} }}

        [mapping]
        outputs = [{", ".join(f'"{o}"' for o in outputs)}]

        """) + cls + "\n" + ev
