"""Output writers at the edge of the pipeline: COG rasters, GeoPackages, CSV, JSON manifest.

Every writer is atomic: the file is written under a temporary name in the same folder
(``.<stem>.tmp-<pid><suffix>``) and moved over the final name with ``os.replace`` only
when complete. A failed write leaves no temporary file and no new final file (an older
final file, if any, is left as it was). Parent folders are created as needed.
"""
from __future__ import annotations

import contextlib
import json
import math
import os
from pathlib import Path

import numpy as np
import rasterio
import rasterio.enums
import rasterio.shutil
from rasterio.io import MemoryFile

from .. import timing
from ..constants import CAUTION, NODATA
from ..errors import GeoflowError, OutputError, is_disk_full, write_error
from .tables import (
    CALIBRATION_COLUMNS,
    EXTENT_COLUMNS,
    LAYER_MEANING,
    PROFILE_COLUMNS,
    RATING_COLUMNS,
    SECTION_COLUMNS,
    STRUCTURE_COLUMNS,
)

# printf formats per profile column; other float columns use "%.6g".
_PROFILE_FORMATS = {
    "chainage_m": "%.3f", "discharge_m3s": "%.6g", "bed_m": "%.4f", "wse_m": "%.4f", "energy_m": "%.4f",
    "critical_wse_m": "%.4f", "velocity_ms": "%.4f", "froude": "%.4f", "alpha": "%.4f", "area_m2": "%.4f",
    "top_width_m": "%.4f", "friction_slope": "%.6g", "depth_m": "%.4f", "critical_depth_m": "%.4f",
    "observed_wse_m": "%.4f", "computed_wse_m": "%.4f", "residual_m": "%.4f", "backwater_length_m": "%.1f",
    "headwater_m": "%.4f", "tailwater_m": "%.4f", "structure_headwater_m": "%.4f", "q_over_crest_m3s": "%.6g",
    "q_through_m3s": "%.6g",
}


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; on success move it over ``path``, else delete it.

    The temporary name keeps the suffix so format drivers recognise it.
    """
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise write_error(path.parent, exc) from None
    if path.is_dir():
        raise OutputError(f"{path}: a folder is in the way of this output file; move it or change output_dir")
    tmp = path.with_name(f".{path.stem}.tmp-{os.getpid()}{path.suffix}")
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException as exc:
        for leftover in (tmp, *tmp.parent.glob(tmp.name + "-*")):     # incl. SQLite journals
            with contextlib.suppress(OSError):
                leftover.unlink()
        if isinstance(exc, GeoflowError):
            raise
        if isinstance(exc, OSError) or is_disk_full(exc):
            raise write_error(path, exc) from None
        raise


def _describe(ds, meta) -> None:
    """Write ``meta`` = (dataset tags, band description, band unit) into an open dataset.

    GDAL metadata items, band description and unit type; the COG driver copies all three.
    """
    if meta is None:
        return
    tags, description, unit = meta
    ds.update_tags(**tags)
    ds.update_tags(1, units=unit)
    ds.set_band_description(1, description)
    ds.set_band_unit(1, unit)


def write_raster(path, array, transform, crs, nodata: float = NODATA, blocksize: int = 256,
                 meta: tuple | None = None) -> Path:
    """Write a 2D array as a float32 Cloud-Optimised GeoTIFF (DEFLATE, float predictor, overviews).

    NaN becomes ``nodata``. Tiles are ``blocksize`` square (256 or 512). Overviews are built by
    averaging; a raster no larger than one tile still gets one overview level. ``meta``:
    (dataset tags, band description, band unit), e.g. from :func:`geoflow.outputs.raster_metadata`.
    """
    arr = np.asarray(array, dtype=np.float32)
    if arr.ndim != 2 or 0 in arr.shape:
        raise OutputError(f"{path}: write_raster array must be 2D and non-empty, got shape {arr.shape}")
    if blocksize not in (256, 512):
        raise OutputError(f"{path}: write_raster blocksize must be 256 or 512, got {blocksize}")
    arr = np.where(np.isnan(arr), np.float32(nodata), arr)
    height, width = arr.shape
    options = cog_options(width, height, blocksize)
    path = Path(path)
    with atomic_path(path) as tmp, timing.stage("io_write"):
        try:
            with MemoryFile() as mem:
                with mem.open(driver="GTiff", width=width, height=height, count=1, dtype="float32",
                              crs=crs, transform=transform, nodata=nodata) as src:
                    src.write(arr, 1)
                    _describe(src, meta)
                with mem.open() as src:
                    rasterio.shutil.copy(src, str(tmp), driver="COG", **options)
        except rasterio.errors.RasterioError as exc:
            raise write_error(path, exc) from None
    return path


def cog_options(width: int, height: int, blocksize: int = 256) -> dict:
    """Creation options of the GDAL COG driver used by every raster writer here.

    DEFLATE with the float predictor, ``blocksize`` tiles, averaged overviews down to one
    tile; a raster no larger than one tile still gets one overview level.
    """
    options = dict(COMPRESS="DEFLATE", PREDICTOR="YES", BLOCKSIZE=blocksize, OVERVIEWS="AUTO",
                   RESAMPLING="AVERAGE", BIGTIFF="IF_SAFER")
    if max(width, height) <= blocksize and min(width, height) >= 2:
        options["OVERVIEW_COUNT"] = 1
    return options


def tiled_gtiff_options(blocksize: int = 256) -> dict:
    """Creation options of the temporary tiled GeoTIFF that block-wise writers fill first.

    Uncompressed and sparse (tiles never written take no space and read as no data): the COG
    copy compresses every tile once anyway, so compressing the temporary too only doubled the
    DEFLATE work. The published COG is byte for byte the same either way (tests/test_outputs.py).
    """
    return dict(driver="GTiff", tiled=True, blockxsize=blocksize, blockysize=blocksize, compress=None,
                SPARSE_OK=True, BIGTIFF="IF_SAFER")


class BlockWriter:
    """Window writer of :func:`block_raster_writer`: call it to write, ``read`` to read back."""

    def __init__(self, dataset, nodata: float):
        self._ds, self._nodata = dataset, np.float32(nodata)

    def __call__(self, array, window) -> None:
        """Write ``array`` (NaN = no data) to ``window``."""
        arr = np.asarray(array, dtype=np.float32)
        arr = np.where(np.isnan(arr), self._nodata, arr)
        with timing.stage("io_write"):
            self._ds.write(arr, 1, window=window)

    def read(self, window) -> np.ndarray:
        """float32 values written so far in ``window`` (NaN = no data)."""
        with timing.stage("io_read"):
            arr = self._ds.read(1, window=window)
        return np.where(arr == self._nodata, np.float32(np.nan), arr)


@contextlib.contextmanager
def block_raster_writer(path, width: int, height: int, transform, crs, nodata: float = NODATA,
                        blocksize: int = 256, meta: tuple | None = None):
    """Write a large float32 raster window by window, then publish it as a COG atomically.

    Yields a :class:`BlockWriter` ``w``: ``w(array, window)`` writes ``array`` (float, NaN =
    no data) to ``window`` (a rasterio Window of this raster) of a temporary tiled GeoTIFF
    (uncompressed, sparse, ``blocksize`` tiles, :func:`tiled_gtiff_options`) beside
    ``path``; a window may be written again (the later data wins) and ``w.read(window)``
    reads back. Windows never written read as no data. On normal exit the temporary file is
    streamed into a Cloud-Optimised GeoTIFF with overviews (``rasterio.shutil.copy``, driver
    "COG", :func:`cog_options`) under a temporary name and moved over ``path``; on error
    nothing new is left behind. Memory is bounded by the window written and GDAL's block
    cache (``GDAL_CACHEMAX``). ``meta`` = (dataset tags, band description, band unit) is written
    into the file's GDAL metadata (it survives the COG copy).
    """
    path = Path(path)
    if blocksize not in (256, 512):
        raise OutputError(f"{path}: block_raster_writer blocksize must be 256 or 512, got {blocksize}")
    if width < 1 or height < 1:
        raise OutputError(f"{path}: block_raster_writer needs a non-empty raster, got {height} x {width}")
    with atomic_path(path) as tmp:
        build = tmp.with_name(tmp.name + "-tiled.tif")
        try:
            with timing.stage("io_write"):
                dst = rasterio.open(build, "w+", width=width, height=height, count=1, dtype="float32", crs=crs,
                                    transform=transform, nodata=nodata, **tiled_gtiff_options(blocksize))
            try:
                _describe(dst, meta)
                yield BlockWriter(dst, nodata)
            finally:
                with timing.stage("io_write"):
                    dst.close()
            with timing.stage("io_write"), rasterio.open(build) as src:
                rasterio.shutil.copy(src, str(tmp), driver="COG", **cog_options(width, height, blocksize))
        except rasterio.errors.RasterioError as exc:
            raise write_error(path, exc) from None
        finally:
            with contextlib.suppress(OSError):
                build.unlink()


def _format_column(values, fmt: str) -> np.ndarray:
    """printf-format a float column; NaN becomes an empty field."""
    v = np.asarray(values, dtype=np.float64)
    out = np.char.mod(fmt, v).astype(object)
    out[~np.isfinite(v)] = ""
    return out


def _join_flags(values) -> list[str]:
    """Flags column to ';'-joined words ('' when none)."""
    def one(f):
        if f is None or (isinstance(f, float) and math.isnan(f)):
            return ""
        if isinstance(f, str):
            return f
        return ";".join(str(w) for w in f)
    return [one(f) for f in values]


def _ordered(df, required, where: Path):
    """Columns ``required`` first (all must exist), then the rest in their given order."""
    missing = [c for c in required if c not in df.columns]
    if missing:
        raise OutputError(f"{where}: columns missing from the table: {', '.join(missing)}")
    return df[list(required) + [c for c in df.columns if c not in required]].copy()


def write_profile_csv(path, df) -> Path:
    """Write the profile table as CSV with the contract column order (extra columns after)."""
    return _write_csv(path, df, PROFILE_COLUMNS)


def write_calibration_csv(path, df) -> Path:
    """Write calibration.csv (observed against computed levels) with its contract columns first."""
    return _write_csv(path, df, CALIBRATION_COLUMNS)


def write_rating_csv(path, df) -> Path:
    """Write rating_curves.csv with its contract columns first."""
    return _write_csv(path, df, RATING_COLUMNS)


def write_structures_csv(path, df) -> Path:
    """Write structures.csv (headwater, tailwater and control of each structure) with its contract columns first."""
    return _write_csv(path, df, STRUCTURE_COLUMNS)


def _write_csv(path, df, columns) -> Path:
    path = Path(path)
    out = _ordered(df, columns, path)
    for col in out.columns:
        if col == "flags":
            out[col] = _join_flags(out[col])
        elif col in _PROFILE_FORMATS or out[col].dtype.kind == "f":
            out[col] = _format_column(out[col], _PROFILE_FORMATS.get(col, "%.6g"))
    with atomic_path(path) as tmp, timing.stage("io_write"):
        out.to_csv(tmp, index=False, lineterminator="\n")
    return path


def read_raster(path, max_cells: int | None = None):
    """(float64 array with NaN for no data, (left, bottom, right, top), metadata tags) of band 1.

    With ``max_cells`` the raster is read decimated (from its overviews when it has them) so
    that neither side exceeds ``max_cells``; for figures, not for computation.
    """
    try:
        with rasterio.open(path) as ds:
            scale = max(1.0, max(ds.width, ds.height) / max_cells) if max_cells else 1.0
            shape = (max(1, round(ds.height / scale)), max(1, round(ds.width / scale)))
            arr = ds.read(1, out_shape=shape, masked=True, resampling=rasterio.enums.Resampling.average)
            return np.asarray(arr.astype(np.float64).filled(np.nan)), tuple(ds.bounds), ds.tags()
    except rasterio.errors.RasterioError as exc:
        raise OutputError(f"{path}: cannot read this raster back ({exc}); run again to rewrite it") from None


def _write_gpkg(path, gdf, layer: str, required, promote_to_multi: bool) -> Path:
    path = Path(path)
    if gdf.crs is None:
        raise OutputError(f"{path}: layer {layer!r} has no CRS; set the DEM CRS on the GeoDataFrame")
    out = _ordered(gdf, list(required) + [gdf.geometry.name], path)
    if "flags" in out.columns:
        out["flags"] = _join_flags(out["flags"])
    with atomic_path(path) as tmp, timing.stage("io_write"):
        try:
            out.to_file(tmp, layer=layer, driver="GPKG", engine="pyogrio", promote_to_multi=promote_to_multi,
                        layer_options={"DESCRIPTION": LAYER_MEANING[layer]},
                        layer_metadata={"description": LAYER_MEANING[layer], "caution": CAUTION})
        except Exception as exc:          # pyogrio/GDAL raise several types
            raise write_error(f"{path} (layer {layer!r})", exc) from None
    return path


def write_sections_gpkg(path, sections_gdf) -> Path:
    """Write section lines to layer "sections" (replacing any existing file whole)."""
    return _write_gpkg(path, sections_gdf, "sections", SECTION_COLUMNS, promote_to_multi=False)


def write_extent_gpkg(path, extent_gdf) -> Path:
    """Write flood-extent polygons (attributes reach_id, event) to layer "extent" as MultiPolygons."""
    return _write_gpkg(path, extent_gdf, "extent", EXTENT_COLUMNS, promote_to_multi=True)


def plain(obj):
    """JSON-safe copy: numpy scalars/arrays to Python, paths to str, NaN/inf to None."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return plain(obj.tolist())
    if isinstance(obj, np.generic):
        return plain(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return str(obj)


def write_manifest(path, manifest: dict) -> Path:
    """Write a JSON manifest (UTF-8, indented, key order kept)."""
    path = Path(path)
    text = json.dumps(plain(manifest), indent=2, allow_nan=False) + "\n"
    with atomic_path(path) as tmp, timing.stage("io_write"):
        tmp.write_text(text, encoding="utf-8")
    return path
