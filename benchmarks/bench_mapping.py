"""Benchmark of block-wise flood mapping (geoflow.mapping.write_reach_maps) against raw I/O.

Generates (never committed) a synthetic DEM into benchmarks/data/ (gitignored): ``--size``
square cells of 1 m (default 20000 = 1.6 GB of float32), tiled 512, DEFLATE + float
predictor, written block by block. A meandering channel (sine meander about the diagonal,
length 40 km at the default size, in proportion otherwise) is carved in a valley sloping
0.0005 downstream: trapezoidal channel (bottom 20 m, 3 m deep, side slope 2:1), floodplain
rising 1 %, valley sides 5 %, plus +-0.1 m of noise so the water line leaves many small
pockets (exercising the connectivity join). Sections every 50 m, 300 m wide, are built
directly on the analytic centreline; the WSE is the bed plus a uniform 4 m depth.

Each measurement runs in a fresh subprocess (wall time and ru_maxrss of that process):
  floor-dense  read the reach window block by block (``Dem.read``) and write the DEM values
               into the wse and depth rasters with the same writer (same blocks, creation
               options, COG copy) -- writes dense data, an upper bound of the write cost;
  floor-same   the same, but writes the very rasters the mapping produced (their blocks are
               read from the mapping's output outside the timed part);
  floor-touched  floor-same restricted to the blocks the mapping reads (those a section
               quad touches; the others are left unwritten, as the mapping does);
  map          write_reach_maps(..., {"wse", "depth"}, block=2048).
Ratios map / floor are printed (goal <= 1.5) with the peak RSS of ``map`` (goal < 600 MB).

    .venv/bin/python benchmarks/bench_mapping.py              # full size (20000)
    .venv/bin/python benchmarks/bench_mapping.py --size 4000  # quick mode
    add --clean to delete the generated files afterwards
"""
from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine
from rasterio.crs import CRS
from rasterio.windows import Window
from shapely.geometry import LineString

from geoflow import outputs
from geoflow.mapping.blocks import Surface, block_bounds
from geoflow.mapping.engine import GDAL_CACHE_MB, PAD_CELLS, write_reach_maps
from geoflow.records import ReachGeometry, Section
from geoflow.terrain import open_dem

DATA = Path(__file__).resolve().parent / "data"
X0, Y0 = 400000.0, 5000000.0
SLOPE, DEPTH, SPACING, HALF_WIDTH = 0.0005, 4.0, 50.0, 150.0
WAVELENGTH = 2000.0
BLOCK = 2048


def meander(size: int):
    """Centreline as (u along the diagonal, v across) with v = A sin(2 pi u / wavelength).

    Returns (u samples, v samples, chainage at the samples, rotation helpers); the amplitude
    is chosen so the length is 40 km x size / 20000 (capped so bends stay wider than the
    section half-width).
    """
    margin = 0.05 * size
    length_diag = (size - 2 * margin) * np.sqrt(2.0)
    target = 40000.0 * size / 20000.0
    u = np.linspace(0.0, length_diag, int(length_diag / 2.0) + 1)
    k = 2 * np.pi / WAVELENGTH
    amp_max = 1.0 / (k * k * HALF_WIDTH * 1.2)              # bend radius 1 / (A k^2) > 1.2 half-width
    amps = np.linspace(0.0, amp_max, 400)
    lengths = [np.sum(np.hypot(np.diff(u), np.diff(a * np.sin(k * u)))) for a in amps]
    amp = float(np.interp(target, lengths, amps)) if target > lengths[0] else 0.0
    v = amp * np.sin(k * u)
    s = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(u), np.diff(v)))])
    return u, v, s, margin, amp


def to_xy(u, v, margin):
    """Local (u, v) -> local (x, y) in m from the lower-left corner (u along the diagonal)."""
    c = np.sqrt(0.5)
    return margin + c * (u - v), margin + c * (u + v)


def ground_block(size: int, row0: int, col0: int, h: int, w: int, curve) -> np.ndarray:
    """Synthetic ground (float32) on a block of the DEM (rows from the top)."""
    u_s, v_s, s_s, margin, amp = curve
    k = 2 * np.pi / WAVELENGTH
    rows, cols = np.mgrid[row0:row0 + h, col0:col0 + w]
    x = cols + 0.5 - margin
    y = (size - rows - 0.5) - margin
    c = np.sqrt(0.5)
    u, v = c * (x + y), c * (y - x)
    uc = np.clip(u, 0.0, u_s[-1])
    d = np.abs(v - amp * np.sin(k * uc)) / np.sqrt(1.0 + (amp * k * np.cos(k * uc)) ** 2)
    bed = 100.0 - SLOPE * np.interp(uc, u_s, s_s)
    profile = np.clip((d - 10.0) / 2.0, 0.0, 3.0) + 0.01 * np.clip(d - 16.0, 0.0, 184.0) \
        + 0.05 * np.clip(d - 200.0, 0.0, None)
    noise = np.random.default_rng(row0 * 100003 + col0).uniform(-0.1, 0.1, (h, w)) * (d > 16.0)
    return (bed + profile + noise).astype(np.float32)


def make_dem(size: int) -> Path:
    """Write the synthetic DEM block by block (tiled 512, DEFLATE, float predictor) once."""
    path = DATA / f"dem_{size}.tif"
    if path.exists():
        return path
    DATA.mkdir(parents=True, exist_ok=True)
    curve = meander(size)
    tmp = path.with_suffix(".partial.tif")
    with rasterio.Env(GDAL_CACHEMAX=256 * 1024 * 1024), rasterio.open(
            tmp, "w", driver="GTiff", width=size, height=size, count=1, dtype="float32",
            crs=CRS.from_epsg(32633), transform=Affine(1.0, 0.0, X0, 0.0, -1.0, Y0 + size), nodata=-9999.0,
            tiled=True, blockxsize=512, blockysize=512, compress="DEFLATE", predictor=3,
            BIGTIFF="IF_SAFER", NUM_THREADS="ALL_CPUS") as ds:
        for r0 in range(0, size, 1024):
            for c0 in range(0, size, 1024):
                h, w = min(1024, size - r0), min(1024, size - c0)
                ds.write(ground_block(size, r0, c0, h, w, curve), 1, window=Window(c0, r0, w, h))
    tmp.rename(path)
    return path


def reach(size: int):
    """ReachGeometry (sections every 50 m, 300 m wide) and WSE (bed + 4 m) on the meander."""
    u, v, s, margin, _ = meander(size)
    x, y = to_xy(u, v, margin)
    x, y = x + X0, y + Y0
    chain = np.arange(0.0, s[-1], SPACING)
    px, py = np.interp(chain, s, x), np.interp(chain, s, y)
    tx, ty = np.interp(chain + 1.0, s, x) - np.interp(chain - 1.0, s, x), \
        np.interp(chain + 1.0, s, y) - np.interp(chain - 1.0, s, y)
    norm = np.hypot(tx, ty)
    nx, ny = -ty / norm, tx / norm                      # left normal looking downstream
    secs = tuple(Section(reach_id="bench", section_id=i, chainage=float(c),
                         line=LineString([(px[i] + HALF_WIDTH * nx[i], py[i] + HALF_WIDTH * ny[i]),
                                          (px[i] - HALF_WIDTH * nx[i], py[i] - HALF_WIDTH * ny[i])]),
                         station=np.array([0.0, 2 * HALF_WIDTH]), elevation=np.array([0.0, 0.0]))
                 for i, c in enumerate(chain))
    step = max(1, int(5.0 / (s[1] - s[0])))
    centre = LineString(np.column_stack([x[::step], y[::step]]))
    geom = ReachGeometry(reach_id="bench", centreline=centre, sections=secs,
                         lengths=np.zeros((len(secs) - 1, 3)))
    wse = 100.0 - SLOPE * chain + DEPTH
    return geom, wse, float(s[-1])


def reach_window(dem, geom) -> Window:
    """The DEM window write_reach_maps maps (section bounds + PAD_CELLS)."""
    xy = np.concatenate([np.asarray(sec.line.coords) for sec in geom.sections])
    return dem.window_for((xy[:, 0].min(), xy[:, 1].min(), xy[:, 0].max(), xy[:, 1].max()), pad=PAD_CELLS)


def run_map(size: int, out: Path) -> dict:
    dem = open_dem(make_dem(size))
    geom, wse, _ = reach(size)
    t0 = time.perf_counter()
    s = write_reach_maps(dem, geom, wse, {"wse": out / "map_wse.tif", "depth": out / "map_depth.tif"}, block=BLOCK)
    return {"seconds": time.perf_counter() - t0, "wet_area_km2": s.wet_area_m2 / 1e6, "max_depth": s.max_depth,
            "shape": list(s.shape), "extent_parts": len(s.extent)}


def run_floor(size: int, out: Path, same: bool, touched_only: bool = False) -> dict:
    """Read the reach window block-wise and write two rasters with the same writer
    (``touched_only``: only the blocks a section quad touches, as the mapping does)."""
    dem = open_dem(make_dem(size))
    geom, wse, _ = reach(size)
    win = reach_window(dem, geom)
    surface = Surface(geom.sections, wse)
    rows, cols = int(win.height), int(win.width)
    tile = 512 if min(rows, cols) >= 4096 else 256
    ref = {k: rasterio.open(out / f"map_{k}.tif") for k in ("wse", "depth")} if same else {}
    excluded = 0.0
    t0 = time.perf_counter()
    with rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB * 1024 * 1024), \
            outputs.block_raster_writer(out / "floor_wse.tif", cols, rows, dem.window_transform(win), dem.crs,
                                        blocksize=tile) as w_wse, \
            outputs.block_raster_writer(out / "floor_depth.tif", cols, rows, dem.window_transform(win), dem.crs,
                                        blocksize=tile) as w_depth:
        for r0 in range(0, rows, BLOCK):
            for c0 in range(0, cols, BLOCK):
                b = Window(c0, r0, min(BLOCK, cols - c0), min(BLOCK, rows - r0))
                box = block_bounds(dem.window_transform(win), r0, c0, (int(b.height), int(b.width)))
                if touched_only and surface.touching(*box).size == 0:
                    continue
                z = dem.read(Window(win.col_off + c0, win.row_off + r0, b.width, b.height))
                if same:
                    t_ex = time.perf_counter()
                    a_wse, a_depth = (ref[k].read(1, window=b, masked=True).filled(np.nan) for k in ("wse", "depth"))
                    excluded += time.perf_counter() - t_ex
                else:
                    a_wse = a_depth = z
                w_wse(a_wse, b)
                w_depth(a_depth, b)
    for ds in ref.values():
        ds.close()
    return {"seconds": time.perf_counter() - t0 - excluded, "excluded_reference_read_s": excluded}


def child(kind: str, size: int, out: Path) -> dict:
    """Run one measurement in a fresh interpreter; returns its result with peak RSS (MB)."""
    cmd = [sys.executable, __file__, "--size", str(size), "--child", kind, "--out", str(out)]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        sys.exit(f"{kind} failed:\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=20000, help="DEM side in cells (1 m); 4000 = quick mode")
    ap.add_argument("--clean", action="store_true", help="delete the generated DEM and outputs afterwards")
    ap.add_argument("--child", choices=["map", "floor-dense", "floor-same", "floor-touched"], help=argparse.SUPPRESS)
    ap.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        args.out.mkdir(parents=True, exist_ok=True)
        fn = {"map": lambda: run_map(args.size, args.out),
              "floor-dense": lambda: run_floor(args.size, args.out, same=False),
              "floor-same": lambda: run_floor(args.size, args.out, same=True),
              "floor-touched": lambda: run_floor(args.size, args.out, same=True, touched_only=True)}[args.child]
        res = fn()
        res["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        print(json.dumps(res))
        return
    t0 = time.perf_counter()
    dem_path = make_dem(args.size)
    gen = time.perf_counter() - t0
    geom, _, length = reach(args.size)
    dem = open_dem(dem_path)
    win = reach_window(dem, geom)
    out = DATA / f"out_{args.size}"
    print(f"DEM {args.size} x {args.size} cells ({args.size ** 2 * 4 / 1e9:.2f} GB float32, "
          f"{dem_path.stat().st_size / 1e6:.0f} MB on disk; generated in {gen:.0f} s); reach {length / 1000:.1f} km, "
          f"{len(geom.sections)} sections; window {int(win.height)} x {int(win.width)} cells; block {BLOCK}")
    results = {k: child(k, args.size, out) for k in ("floor-dense", "map", "floor-same", "floor-touched")}
    for k, r in results.items():
        print(f"  {k:12s} {r['seconds']:8.1f} s   peak RSS {r['peak_rss_mb']:7.0f} MB")
    m = results["map"]
    print(f"  map: wet area {m['wet_area_km2']:.2f} km2, max depth {m['max_depth']:.2f} m, "
          f"{m['extent_parts']} outline part(s)")
    print(f"ratio map / floor-same  = {m['seconds'] / results['floor-same']['seconds']:.2f}  (goal <= 1.5)")
    print(f"ratio map / floor-touched = {m['seconds'] / results['floor-touched']['seconds']:.2f}  "
          "(strictest: only the DEM blocks the mapping reads)")
    print(f"ratio map / floor-dense = {m['seconds'] / results['floor-dense']['seconds']:.2f}")
    print(f"peak RSS of map = {m['peak_rss_mb']:.0f} MB  (goal < 600 MB)")
    if args.clean:
        shutil.rmtree(out, ignore_errors=True)
        dem_path.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
