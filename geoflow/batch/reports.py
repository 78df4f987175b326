"""Reach reports rendered in a helper process beside an in-process run, off its critical path.

A run in this process (``--workers 1``, the default) uses one core; drawing a report's figures
(matplotlib, Agg) takes about as long as mapping a small reach. With a second core free, a
:class:`ReportProcess` forked when the run starts imports matplotlib there (while this process
validates) and draws each reach's report from the rasters and outlines the reach task has just
written (the helper opens the run's inputs once, for the DEM preview and the other reaches on the
map), while this process goes on with the next reach. A reach is recorded in the manifest only
once its report is on disk (reports are drawn in the order reaches finish, so records keep that
order), exactly as when the report is drawn inline; reaches waiting on a junction start as soon as
the reach they join is computed. The run's index page is drawn there too. matplotlib is never
imported here.

Used only where forking is safe (POSIX, no other threads) and at least two CPUs are available;
otherwise reports are drawn inline by the task. A helper that dies makes the task draw its
report inline.
"""
from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import os
import threading

#: report processes of an in-process run (at most the CPU count): with two, the reports of
#: consecutive reaches are drawn side by side once the run has nothing left to compute (the demo:
#: the tributary's page beside the river's, 1.7 s of 3.3 s)
REPORT_PROCESSES = 2


class ReportProcess:
    """Forked processes that write reach reports on request."""

    def __init__(self, processes: int = 1):
        self.pool = cf.ProcessPoolExecutor(max_workers=processes, mp_context=multiprocessing.get_context("fork"))
        for _ in range(processes):
            self.pool.submit(_warm_up)

    def submit(self, spec, geom) -> cf.Future:
        """Start writing the report of ``geom``'s reach for task ``spec`` (its outputs must be on disk).

        The future's result is (files written, seconds the helper spent on them)."""
        return self.pool.submit(_write, spec, geom)

    def submit_index(self, path, config_path: str, sha256: str, dem, parts: dict) -> cf.Future:
        """Start writing the run's index page (see :func:`geoflow.batch.assemble.write_index_page`)."""
        return self.pool.submit(_write_index, path, config_path, sha256, dem, parts)

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)


def start(workers: int, scheduler, configs) -> ReportProcess | None:
    """A report process for an in-process run of ``configs`` that write reports, when it can help."""
    wanted = any("report" in c.mapping.outputs for c in configs)
    can_fork = "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1
    if workers != 1 or scheduler or not wanted or not can_fork or (os.cpu_count() or 1) < 2:
        return None
    return ReportProcess(min(REPORT_PROCESSES, os.cpu_count() or 1))


def _warm_up() -> None:
    from ..report import page  # noqa: F401  (imports matplotlib in the helper, not in the run)


def _write(spec, geom) -> tuple[list, float]:
    from .tasks import report_in_helper
    return report_in_helper(spec, geom)


def _write_index(path, config_path: str, sha256: str, dem, parts: dict):
    from .assemble import write_index_page
    from .tasks import _config
    return write_index_page(path, _config(config_path, sha256, sha256), dem, parts)
