"""DEM access at the edge of the pipeline: metadata, windows, bilinear sampling, CRS.

Only this module (and outputs.py) opens raster files. Everything returned is plain numpy
in metres of the DEM's vertical datum, with NaN where the DEM has no data.

A :class:`Dem` holds no open handle (it pickles to Dask workers). ``with dem.kept_open():``
keeps one dataset open for the calling thread of this process while the block runs, so the
hundreds of window reads of a reach task share one handle and GDAL's block cache (opening the
file costs about as much as reading a small window), with the cache held to
``KEPT_OPEN_CACHE_MB``; outside such a block each read opens and closes the file.
"""
from __future__ import annotations

import contextlib
import math
import os
import threading
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import rasterio
import rasterio.enums
from affine import Affine
from rasterio.crs import CRS
from rasterio.windows import Window

from . import timing
from .errors import InputDataError

_LOCAL = threading.local()      # per thread: {path: [dataset, depth]} of DEMs kept open
SAMPLE_TILE_CELLS = 1024        # points spread over more than this squared are sampled tile by tile
KEPT_OPEN_CACHE_MB = 16         # GDAL block cache while a DEM is kept open (bounds memory on long reaches)

VERTICAL_UNITS = {"m": 1.0, "metre": 1.0, "meter": 1.0, "ft": 0.3048, "foot": 0.3048, "us_ft": 1200.0 / 3937.0}


@dataclass(frozen=True)
class Dem:
    """A DEM on disk: its grid, CRS and vertical scale. Cheap to pickle (no open handle)."""

    path: Path
    crs: CRS
    transform: Affine
    width: int
    height: int
    nodata: float | None
    z_factor: float = 1.0      # multiply stored values by this to get metres

    @property
    def cell_size(self) -> float:
        """Cell size (m), the larger of the two axes."""
        return max(abs(self.transform.a), abs(self.transform.e))

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(left, bottom, right, top) in DEM CRS units."""
        return _bounds(self.transform, self.width, self.height)

    def window_for(self, bounds: tuple[float, float, float, float], pad: int = 2) -> Window:
        """Integer window of the DEM grid covering ``bounds`` plus ``pad`` cells, clipped to the DEM."""
        left, bottom, right, top = bounds
        inv = ~self.transform
        cols, rows = apply_affine(inv, np.array([left, right, left, right]), np.array([top, top, bottom, bottom]))
        c0 = max(int(math.floor(np.min(cols))) - pad, 0)
        r0 = max(int(math.floor(np.min(rows))) - pad, 0)
        c1 = min(int(math.ceil(np.max(cols))) + pad, self.width)
        r1 = min(int(math.ceil(np.max(rows))) + pad, self.height)
        if c1 <= c0 or r1 <= r0:
            return Window(0, 0, 0, 0)
        return Window(c0, r0, c1 - c0, r1 - r0)

    def window_transform(self, window: Window) -> Affine:
        return rasterio.windows.transform(window, self.transform)

    @contextlib.contextmanager
    def kept_open(self):
        """Keep the DEM open for reads from this thread while the block runs (re-entrant).

        The file is opened by the first read inside the block and closed when the outermost
        block ends.
        """
        handles, key = _handles(), str(self.path)
        entry = handles.setdefault(key, [None, 0])
        entry[1] += 1
        try:
            if entry[1] == 1:       # GDAL's block cache would otherwise keep every DEM tile read
                with rasterio.Env(GDAL_CACHEMAX=KEPT_OPEN_CACHE_MB * 1024 * 1024):
                    yield self
            else:
                yield self
        finally:
            entry[1] -= 1
            if entry[1] == 0:
                handles.pop(key, None)
                if entry[0] is not None:
                    entry[0].close()

    def read(self, window: Window | None = None) -> np.ndarray:
        """Elevations (m, float64) in ``window`` (whole DEM if None), NaN where nodata."""
        entry = _handles().get(str(self.path))
        try:
            with timing.stage("io_read"):
                arr = self._read_masked(entry, window)
        except rasterio.errors.RasterioError as exc:
            raise _read_error(self.path, exc) from None
        out = np.asarray(arr.filled(np.nan), dtype=np.float64)
        if self.z_factor != 1.0:
            out *= self.z_factor
        return out

    def read_preview(self, bounds: tuple[float, float, float, float], max_cells: int = 1200):
        """(elevations m with NaN for no data, their (left, bottom, right, top)) of the window
        covering ``bounds``, averaged down so neither side exceeds ``max_cells`` (read from the
        DEM's overviews when it has them). For figures, not for computation."""
        win = self.window_for(bounds, pad=0)
        if win.width == 0 or win.height == 0:
            return None
        scale = max(1.0, max(win.width, win.height) / max_cells)
        shape = (max(1, round(win.height / scale)), max(1, round(win.width / scale)))
        try:
            with rasterio.open(self.path) as ds:
                arr = ds.read(1, window=win, out_shape=shape, masked=True,
                              resampling=rasterio.enums.Resampling.average)
        except rasterio.errors.RasterioError as exc:
            raise InputDataError(f"{self.path}: cannot read the DEM's cells ({exc}); check it opens in a GIS") from None
        out = np.asarray(arr.astype(np.float64).filled(np.nan)) * self.z_factor
        return out, _bounds(self.window_transform(win), int(win.width), int(win.height))
    def _read_masked(self, entry, window):
        if entry is not None:
            if entry[0] is None:
                entry[0] = rasterio.open(self.path)
            return entry[0].read(1, window=window, masked=True)
        with rasterio.open(self.path) as ds:
            return ds.read(1, window=window, masked=True)

    def sample(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Bilinear interpolation of elevation (m) at points (x, y) in DEM CRS.

        Cell values sit at cell centres; a point is interpolated from its four surrounding
        centres. Points outside the DEM or touching a nodata cell give NaN. Only the
        window covering the points is read from disk, or, when they spread over more than
        ``SAMPLE_TILE_CELLS`` squared cells (a long valley's sections), the tiles of that size
        they fall in, one at a time: the same values, in memory and time that grow with the
        points, not with the box around them.
        """
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        out = np.full(x.shape, np.nan)
        if x.size == 0:
            return out
        inv = ~self.transform
        col_f, row_f = apply_affine(inv, x.ravel(), y.ravel())
        col_f = np.asarray(col_f) - 0.5
        row_f = np.asarray(row_f) - 0.5
        ok = np.isfinite(col_f) & np.isfinite(row_f)
        ok &= (col_f >= -0.5) & (col_f <= self.width - 0.5) & (row_f >= -0.5) & (row_f <= self.height - 0.5)
        if not np.any(ok):
            return out
        # Clamp half a cell at the raster edge (edge value extends to the border).
        cf = np.clip(col_f[ok], 0.0, self.width - 1.0)
        rf = np.clip(row_f[ok], 0.0, self.height - 1.0)
        c0 = np.floor(cf).astype(np.int64)
        r0 = np.floor(rf).astype(np.int64)
        span = (int(c0.max()) - int(c0.min()) + 2) * (int(r0.max()) - int(r0.min()) + 2)
        if span <= SAMPLE_TILE_CELLS ** 2:
            val = self._bilinear(cf, rf, c0, r0)
        else:                      # points spread over a large box: read only the tiles they fall in
            tile = (r0 // SAMPLE_TILE_CELLS) * (self.width // SAMPLE_TILE_CELLS + 1) + c0 // SAMPLE_TILE_CELLS
            order = np.argsort(tile, kind="stable")
            cuts = np.flatnonzero(np.diff(tile[order])) + 1
            val = np.empty(cf.size)
            for part in np.split(order, cuts):
                val[part] = self._bilinear(cf[part], rf[part], c0[part], r0[part])
        flat = out.ravel()
        flat[np.flatnonzero(ok)] = val
        return flat.reshape(x.shape)

    def _bilinear(self, cf, rf, c0, r0) -> np.ndarray:
        """Bilinear values at fractional cell positions (cf, rf) with floors (c0, r0), from one
        window read covering them (the same formula and cells whatever the window)."""
        wc0, wr0 = int(c0.min()), int(r0.min())
        wc1 = min(int(c0.max()) + 2, self.width)
        wr1 = min(int(r0.max()) + 2, self.height)
        z = self.read(Window(wc0, wr0, wc1 - wc0, wr1 - wr0))
        c1 = np.minimum(c0 + 1, self.width - 1)
        r1 = np.minimum(r0 + 1, self.height - 1)
        fx = cf - c0
        fy = rf - r0
        lc0, lc1, lr0, lr1 = c0 - wc0, c1 - wc0, r0 - wr0, r1 - wr0
        return (
            z[lr0, lc0] * (1 - fx) * (1 - fy)
            + z[lr0, lc1] * fx * (1 - fy)
            + z[lr1, lc0] * (1 - fx) * fy
            + z[lr1, lc1] * fx * fy
        )


def _handles() -> dict:
    """This thread's DEMs kept open; a forked child starts with none of its parent's handles."""
    if getattr(_LOCAL, "pid", None) != os.getpid():
        _LOCAL.handles, _LOCAL.pid = {}, os.getpid()
    return _LOCAL.handles


def _read_error(path: Path, exc: Exception) -> InputDataError:
    text = " ".join(str(exc).replace("See previous exception for details.", "").split())
    return InputDataError(f"{path}: cannot read the DEM's cells ({text}); the file may be truncated or "
                          "damaged - check it opens in a GIS, or export it again")


def kept_open(dem):
    """``dem.kept_open()``, or a no-op for stand-ins that read without it (tests' duck-typed DEMs)."""
    keep = getattr(dem, "kept_open", None)
    return keep() if keep is not None else contextlib.nullcontext(dem)


def apply_affine(t: Affine, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(x', y') = t applied to arrays (x, y); plain numpy, independent of the affine operator API."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    return t.a * x + t.b * y + t.c, t.d * x + t.e * y + t.f


def _bounds(transform: Affine, width: int, height: int) -> tuple[float, float, float, float]:
    xs, ys = apply_affine(transform, np.array([0, width, 0, width]), np.array([0, 0, height, height]))
    return float(np.min(xs)), float(np.min(ys)), float(np.max(xs)), float(np.max(ys))


def open_dem(path: str | Path, vertical_unit: str = "m") -> Dem:
    """Open a DEM's metadata; refuse what geoflow cannot use, with a message saying what to do."""
    path = Path(path)
    if not path.exists():
        raise InputDataError(f"{path}: DEM file not found; check [terrain] dem in the config")
    unit = vertical_unit.lower()
    if unit not in VERTICAL_UNITS:
        raise InputDataError(
            f"[terrain] vertical_unit = {vertical_unit!r} is not known; use one of {sorted(set(VERTICAL_UNITS))}"
        )
    try:
        with rasterio.open(path) as ds:
            crs, transform, width, height, nodata = ds.crs, ds.transform, ds.width, ds.height, ds.nodata
            count = ds.count
    except rasterio.errors.RasterioError as exc:
        raise InputDataError(f"{path}: cannot open as a raster ({exc}); give a GeoTIFF DEM") from None
    if count < 1:
        raise InputDataError(f"{path}: raster has no bands; give a single-band DEM")
    if crs is None:
        raise InputDataError(f"{path}: DEM has no coordinate reference system; assign a projected CRS (e.g. with gdal_edit -a_srs)")
    if crs.is_geographic:
        raise InputDataError(
            f"{path}: DEM is in a geographic CRS ({crs.to_string()}); reproject it to a projected CRS in metres or feet first"
        )
    if transform.b != 0 or transform.d != 0:
        raise InputDataError(f"{path}: DEM grid is rotated; warp it to a north-up grid first")
    return Dem(path=path, crs=crs, transform=transform, width=width, height=height, nodata=nodata,
               z_factor=VERTICAL_UNITS[unit])
