"""Where reach tasks run: in this process, in a local process pool, or on a Dask cluster.

Each engine has the same small interface: ``submit(spec, fn=compute_reach) -> handle`` (``fn`` may
also be :func:`geoflow.batch.tasks.check_reach`, to validate reaches where they run),
``wait(handles) -> handle``
(the next one done, in constant time however many are in flight: handles report themselves done
to a queue, so a batch of N reaches costs O(N), not O(N^2), to schedule) and ``result(handle) ->
info dict``; ``close()`` frees it. A worker that dies
(killed, out of memory) never raises into the batch: its reach comes back failed with a message
that says to run again with ``--resume``.
"""
from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import queue
import threading

from ..errors import GeoflowError
from .tasks import TaskSpec, compute_reach

SCHEDULER_TIMEOUT_S = 5
WORKER_DIED = ("the worker process computing this reach died (killed, or out of memory){where}; "
               "run again with --resume to compute the reaches left")


class InProcess:
    """Tasks run in this process when their result is asked for (so progress stays live)."""

    parallel = False

    def submit(self, spec: TaskSpec, fn=None):
        return (fn or compute_reach, spec)

    def wait(self, handles):
        return next(iter(handles))

    def result(self, handle) -> dict:
        fn, spec = handle
        return fn(spec)

    def close(self) -> None:
        pass


class Pool:
    """A local process pool; a dead worker fails the reaches in flight and the pool is started anew."""

    def __init__(self, workers: int):
        self.workers = workers
        self.pool = self._new()
        self.done: queue.SimpleQueue = queue.SimpleQueue()

    def _new(self):
        return cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=pool_context())

    parallel = True

    def submit(self, spec: TaskSpec, fn=None):
        fn = fn or compute_reach
        try:
            fut = self.pool.submit(fn, spec)
        except cf.process.BrokenProcessPool:
            self.pool.shutdown(wait=False, cancel_futures=True)
            self.pool = self._new()
            fut = self.pool.submit(fn, spec)
        fut.add_done_callback(self.done.put)
        return fut

    def wait(self, handles):
        return self.done.get()

    def result(self, fut) -> dict:
        try:
            return fut.result()
        except cf.process.BrokenProcessPool:
            return {"status": "failed", "error": WORKER_DIED.format(where=""), "events": {}}

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)


class DaskCluster:
    """Tasks on a Dask distributed cluster (workers must see the same file system)."""

    def __init__(self, address: str):
        from distributed import Client
        try:
            self.client = Client(address, timeout=f"{SCHEDULER_TIMEOUT_S}s")
        except (OSError, TimeoutError, ValueError) as exc:
            text = " ".join(str(exc).split())[:160]
            raise GeoflowError(f"--scheduler {address}: cannot reach the Dask scheduler within "
                               f"{SCHEDULER_TIMEOUT_S} s ({text}); check the address and that the scheduler "
                               "is running") from None
        from distributed import as_completed
        self.done = as_completed()

    parallel = True

    def submit(self, spec: TaskSpec, fn=None):
        fut = self.client.submit(fn or compute_reach, spec, pure=False)
        self.done.add(fut)
        return fut

    def wait(self, handles):
        return next(self.done)

    def result(self, fut) -> dict:
        try:
            return fut.result()
        except Exception as exc:       # KilledWorker, CommClosedError: the worker (or its machine) went away
            return {"status": "failed", "error": WORKER_DIED.format(where=f" on the cluster ({type(exc).__name__})"),
                    "events": {}}

    def close(self) -> None:
        self.client.close()


def engine(workers: int, scheduler: str | None):
    """The engine for ``--workers`` / ``--scheduler``; connects (and may fail) before anything is written."""
    if scheduler:
        return DaskCluster(scheduler)
    if workers > 1:
        return Pool(workers)
    return InProcess()


def pool_context():
    """'fork' when it is safe (POSIX, no other threads: workers start without re-importing the GIS
    stack, which dominates start-up, and share the geometry built while validating); otherwise
    'spawn'. Tasks open their own files either way."""
    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")
