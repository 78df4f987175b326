"""Where a process spends its time, by pipeline stage (pure: standard library only).

``with stage("overlay"): ...`` adds the block's wall time to that stage, minus the time spent in
stages nested inside it (a DEM read inside the mapping counts as ``io_read``, not as
``mapping``), so the totals add up to the time measured. Totals are per process and per thread
(a Dask worker's threads keep their own); :func:`snapshot` and :func:`since` give what one piece
of work (a reach task, a validation) spent. Reach tasks record it in the manifest (``timings_s``)
and the throughput benchmark adds it up.

Stages used: ``sections`` (cutting and sampling), ``overlay`` (land cover -> n), ``hydraulics``,
``mapping``, ``report``, ``io_read`` (DEM windows), ``io_write`` (rasters, tables, GeoPackages,
reports and manifests written), ``assemble`` (run-level outputs, not counting their I/O).
"""
from __future__ import annotations

import contextlib
import threading
import time

_LOCAL = threading.local()


def _state():
    if not hasattr(_LOCAL, "totals"):
        _LOCAL.totals, _LOCAL.stack = {}, []
    return _LOCAL.totals, _LOCAL.stack


@contextlib.contextmanager
def stage(name: str):
    """Count the block's wall time (s) under ``name``, less that of stages nested in it."""
    totals, stack = _state()
    t0 = time.perf_counter()
    stack.append(0.0)
    try:
        yield
    finally:
        spent = time.perf_counter() - t0
        inner = stack.pop()
        totals[name] = totals.get(name, 0.0) + spent - inner
        if stack:
            stack[-1] += spent


def snapshot() -> dict[str, float]:
    """Totals so far (s) by stage, in this thread."""
    return dict(_state()[0])


def since(before: dict[str, float]) -> dict[str, float]:
    """Seconds by stage spent since ``before`` (a :func:`snapshot`), stages with none left out."""
    now = _state()[0]
    return {k: v - before.get(k, 0.0) for k, v in now.items() if v - before.get(k, 0.0) > 0.0}
