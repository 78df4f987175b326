"""Where reach tasks run: in this process, in a local process pool, or on a Dask cluster."""
from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import threading

from .tasks import compute_reach


def engine(workers: int, scheduler: str | None):
    """(submit, as_completed, close) for the chosen engine."""
    if scheduler:
        from distributed import Client, as_completed
        client = Client(scheduler, timeout="30s")
        return (lambda *a: client.submit(compute_reach, *a, pure=False)), as_completed, client.close
    if workers > 1:
        pool = cf.ProcessPoolExecutor(max_workers=workers, mp_context=pool_context())
        return (lambda *a: pool.submit(compute_reach, *a)), cf.as_completed, pool.shutdown
    return (lambda *a: _Deferred(a)), iter, lambda: None


class _Deferred:
    """In-process engine: the task runs when its result is asked for (so progress stays live)."""

    def __init__(self, args):
        self.args = args

    def result(self):
        return compute_reach(*self.args)


def pool_context():
    """'fork' when it is safe (POSIX, no other threads: workers start without re-importing the GIS
    stack, which dominates start-up); otherwise 'spawn'. Tasks open their own files either way."""
    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")
