"""Spread of the water surface between two roughness cases: WSE_high - WSE_low on the reach grid.

Both cases are mapped on the same grid (the reach window depends only on the section lines). The
spread is interpolated between sections exactly as the WSE is (:class:`geoflow.mapping.blocks.Surface`):
the interpolation is linear in the section values with weights set by the geometry alone, so the
interpolated difference equals the difference of the two interpolated surfaces, also where only one
case is wet (there the other case's surface lies below the ground). It is kept on the cells where
either case's WSE raster holds a value (wet and connected to the channel) and written block by
block as a Cloud-Optimised GeoTIFF, so memory stays bounded by the block size.
"""
from __future__ import annotations

import contextlib
from pathlib import Path

import numpy as np
import rasterio
from rasterio.windows import Window

from .. import outputs
from ..errors import GeometryError
from .blocks import Surface


def _read(ds, win: Window) -> np.ndarray:
    return ds.read(1, window=win, masked=True).astype(np.float64).filled(np.nan)


def write_wse_spread(geom, wse_low, wse_high, low_raster, high_raster, out_path, block: int = 2048) -> Path:
    """Write WSE_high - WSE_low (m) where either case is wet; ``wse_*`` (N,) per section, ``*_raster``
    the two cases' WSE rasters of this reach (same grid)."""
    low, high = np.asarray(wse_low, dtype=float), np.asarray(wse_high, dtype=float)
    surface = Surface(geom.sections, np.vstack([low + high, high - low]))
    with rasterio.Env(GDAL_CACHEMAX=96 * 1024 * 1024), contextlib.ExitStack() as stack:
        lo = stack.enter_context(rasterio.open(low_raster))
        hi = stack.enter_context(rasterio.open(high_raster))
        if (lo.width, lo.height, lo.transform) != (hi.width, hi.height, hi.transform):
            raise GeometryError(f"reach {geom.reach_id}: {low_raster} and {high_raster} are not on one grid")
        write = stack.enter_context(outputs.block_raster_writer(out_path, lo.width, lo.height, lo.transform, lo.crs))
        for r0 in range(0, lo.height, block):
            for c0 in range(0, lo.width, block):
                win = Window(c0, r0, min(block, lo.width - c0), min(block, lo.height - r0))
                wet = np.isfinite(_read(lo, win)) | np.isfinite(_read(hi, win))
                if not wet.any():
                    continue
                spread = surface.interpolate(lo.transform, r0, c0, (int(win.height), int(win.width)))[1]
                write(np.where(wet, spread, np.nan), win)
    return Path(out_path)
