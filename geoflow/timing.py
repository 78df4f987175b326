"""Where a process spends its time, by pipeline stage (pure: standard library only).

``with stage("overlay"): ...`` adds the block's wall time (and CPU time) to that stage, minus the time spent in
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
        _LOCAL.totals, _LOCAL.cpu, _LOCAL.stack = {}, {}, []
    return _LOCAL.totals, _LOCAL.cpu, _LOCAL.stack


@contextlib.contextmanager
def stage(name: str):
    """Count the block's wall time and this thread's CPU time (s) under ``name``, less those of
    the stages nested in it."""
    totals, cpu, stack = _state()
    t0, c0 = time.perf_counter(), time.thread_time()
    stack.append([0.0, 0.0])
    try:
        yield
    finally:
        spent, used = time.perf_counter() - t0, time.thread_time() - c0
        inner = stack.pop()
        totals[name] = totals.get(name, 0.0) + spent - inner[0]
        cpu[name] = cpu.get(name, 0.0) + used - inner[1]
        if stack:
            stack[-1][0] += spent
            stack[-1][1] += used


def snapshot(cpu: bool = False) -> dict[str, float]:
    """Totals so far (s) by stage, in this thread: wall time, or CPU time with ``cpu``."""
    return dict(_state()[1 if cpu else 0])


def since(before: dict[str, float], cpu: bool = False) -> dict[str, float]:
    """Seconds by stage spent since ``before`` (a :func:`snapshot` of the same kind), stages with
    none left out."""
    now = _state()[1 if cpu else 0]
    return {k: v - before.get(k, 0.0) for k, v in now.items() if v - before.get(k, 0.0) > 0.0}
