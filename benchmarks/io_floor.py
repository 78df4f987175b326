"""The I/O floor of a finished run: the DEM windows it read and the rasters it wrote, redone bare.

For every reach of the run (its geometry rebuilt and its profile read back outside the timed
part): read the DEM window its sections sample (one read when the box is at most
``ONE_READ_CELLS`` cells, else one per section, as section sampling does), then per event read
the DEM blocks the mapping reads (those a section quad touches) and write each raster the run
wrote with the same writer (``geoflow.outputs.block_raster_writer``: same tiles, creation
options, COG copy), the same blocks, the run's own values (read from its output file outside
the timed part). Mosaic patches are rewritten the same way. Vector and table files and reports
are not part of the floor. The DEM is kept open, as the run keeps it.
"""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
import rasterio
from rasterio.windows import Window

from geoflow import outputs
from geoflow.batch import reach
from geoflow.batch.inputs import open_inputs
from geoflow.config import load_config
from geoflow.mapping.blocks import block_bounds
from geoflow.mapping.engine import GDAL_CACHE_MB, PAD_CELLS, _prepare
from geoflow.naming import safe_name
from geoflow.sections.common import ONE_READ_CELLS


class Clock:
    """Wall time and CPU time (this process) of the timed parts only."""

    def __init__(self):
        self.seconds = self.cpu_seconds = 0.0

    def __enter__(self):
        self._t0, self._c0 = time.perf_counter(), time.process_time()

    def __exit__(self, *exc):
        self.seconds += time.perf_counter() - self._t0
        self.cpu_seconds += time.process_time() - self._c0


def io_floor(config_path: Path) -> dict:
    cfg = load_config(config_path)
    inputs = open_inputs(cfg)
    out = cfg.run.output_dir
    profile = pd.read_csv(out / "profile.csv", dtype={"reach_id": str, "event": str})
    clock, cells_read, rasters = Clock(), 0, 0
    with rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB * 1024 * 1024), inputs.dem.kept_open():
        for rid, line in inputs.reaches:
            geom = reach.build_geometry(cfg, inputs, rid, line)
            cells_read += _section_reads(inputs.dem, geom, clock)
            seen: set = set()                      # DEM blocks read for this reach
            for ev in cfg.events:
                rows = profile[(profile.reach_id == rid) & (profile.event == ev.name)].sort_values("section_id")
                if len(rows) != len(geom.sections):
                    continue
                n, k = _event_io(cfg, inputs.dem, geom, rows["wse_m"].to_numpy(), rid, ev.name, clock, seen)
                cells_read, rasters = cells_read + n, rasters + k
        for tif in sorted((out / "mosaic").rglob("*.tif")) if (out / "mosaic").is_dir() else []:
            _rewrite(tif, None, clock)
            rasters += 1
    return {"seconds": clock.seconds, "cpu_s": clock.cpu_seconds, "dem_cells_read": cells_read,
            "rasters_written": rasters}


def _section_reads(dem, geom, clock: Clock) -> int:
    xy = np.concatenate([np.asarray(s.line.coords) for s in geom.sections])
    box = (xy[:, 0].min(), xy[:, 1].min(), xy[:, 0].max(), xy[:, 1].max())
    cells = (np.ptp(xy[:, 0]) / dem.cell_size + 2) * (np.ptp(xy[:, 1]) / dem.cell_size + 2)
    wins = [dem.window_for(box, pad=1)] if cells <= ONE_READ_CELLS else \
        [dem.window_for(tuple(np.asarray(s.line.bounds)), pad=1) for s in geom.sections]
    with clock:
        for w in wins:
            dem.read(w)
    return int(sum(w.width * w.height for w in wins))


def _event_io(cfg, dem, geom, wse, rid: str, event: str, clock: Clock, seen: set) -> tuple[int, int]:
    """Read the DEM blocks the mapping of one event reads (those not in ``seen``, the blocks already
    read for this reach); rewrite its rasters. -> (cells read, rasters)."""
    ctx, grid = _prepare(dem, geom, wse, cfg.mapping.cell_size, PAD_CELLS, 2048, None)
    touched = [win for _, _, win in grid.blocks()
               if ctx.surface.touching(*block_bounds(grid.transform, win.row_off, win.col_off,
                                                     (int(win.height), int(win.width)))).size]
    fresh = [win for win in touched if (win.row_off, win.col_off) not in seen]
    seen.update((win.row_off, win.col_off) for win in fresh)
    with clock:
        for win in fresh:
            grid.read_ground(dem, win)
    tifs = [cfg.run.output_dir / "rasters" / safe_name(rid) / f"{safe_name(event)}_{kind}.tif"
            for kind in ("wse", "depth", "velocity") if kind in cfg.mapping.outputs]
    for tif in tifs:
        _rewrite(tif, touched, clock)
    f = grid.factor
    return int(sum(w.width * w.height for w in fresh)) * f * f, len(tifs)


def _rewrite(tif: Path, windows, clock: Clock) -> None:
    """Write ``tif``'s values again with the run's writer, window by window (values read untimed)."""
    with rasterio.open(tif) as src:
        rows, cols, transform, crs = src.height, src.width, src.transform, src.crs
        tile = src.block_shapes[0][0]
        if windows is None:
            windows = [Window(c, r, min(2048, cols - c), min(2048, rows - r))
                       for r in range(0, rows, 2048) for c in range(0, cols, 2048)]
        values = [src.read(1, window=w, masked=True).filled(np.nan) for w in windows]
    keep = [k for k, v in enumerate(values) if np.isfinite(v).any()]     # the run writes only blocks with data
    windows, values = [windows[k] for k in keep], [values[k] for k in keep]
    target = tif.with_name(f"floor_{tif.name}")
    with clock:
        with outputs.block_raster_writer(target, cols, rows, transform, crs, blocksize=tile) as write:
            for w, v in zip(windows, values):
                write(v, w)
    target.unlink()
