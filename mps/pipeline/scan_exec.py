"""Where the points of a scan run: an embedded local process pool, or an existing Dask cluster.

Both executors take :class:`~mps.pipeline.scan_point.PointTask` records and hand back futures with
``done()`` and ``result()``; the scan driver polls them, so it treats both alike. The local pool
starts its workers with the ``spawn`` method (fresh interpreters: no BLAS or numba thread state
copied from the driver by ``fork``), and gives each point cores / workers BLAS threads. On a Dask
cluster each point limits its BLAS threads to the worker's cores divided by its task threads; the
project must be installed in the workers' environment and ``output.dir`` must be a file system the
workers and the driver share (as on every batch cluster).
"""

from __future__ import annotations

import multiprocessing
import os
import uuid
from concurrent.futures import ProcessPoolExecutor
from dataclasses import replace

from mps.pipeline.errors import InputError
from mps.pipeline.scan_point import PointTask, ignore_interrupts, run_point


class LocalPool:
    """``workers`` processes on this machine (default: one per core)."""

    def __init__(self, workers: int | None = None):
        cores = os.cpu_count() or 1
        self.workers = workers or cores
        self.blas_threads = max(1, cores // self.workers)
        self.pool = ProcessPoolExecutor(self.workers, mp_context=multiprocessing.get_context("spawn"),
                                        initializer=ignore_interrupts)
        self.where = f"{self.workers} local worker{'s' if self.workers > 1 else ''}"

    def capacity(self) -> int:
        return self.workers

    def submit(self, task: PointTask):
        return self.pool.submit(run_point, replace(task, blas_threads=self.blas_threads))

    def close(self, futures=(), wait: bool = True) -> None:
        """Shut the pool down; without ``wait`` (a second stop request) the workers are killed at
        once, each point keeping its last checkpoint."""
        if not wait:
            for process in list(getattr(self.pool, "_processes", {}).values()):
                process.kill()   # the executor has no public way before Python 3.14
        self.pool.shutdown(wait=wait, cancel_futures=True)


class DaskPool:
    """The workers of a running dask.distributed scheduler at ``address``."""

    def __init__(self, address: str, workers: int | None = None):
        try:
            from distributed import Client
        except ImportError:
            raise InputError("--scheduler needs dask.distributed: pip install 'chargewise[cluster]'") from None
        try:
            self.client = Client(address, timeout="20s", set_as_default=False)
        except (OSError, TimeoutError, ValueError, TypeError) as exc:
            raise InputError(f"--scheduler {address}: cannot reach a Dask scheduler there ({exc})") from None
        self.limit = workers
        self.tag = uuid.uuid4().hex[:8]
        threads = sum(self.client.nthreads().values())
        self.where = f"the Dask scheduler at {address} ({threads} worker threads now)"

    def capacity(self) -> int:
        """Points in flight: --workers if given, else the cluster's task threads (it may grow)."""
        if self.limit:
            return self.limit
        return max(1, sum(self.client.nthreads().values()))

    def submit(self, task: PointTask):
        return self.client.submit(run_point, task, key=f"chargewise-{self.tag}-{task.index}", pure=False)

    def close(self, futures=(), wait: bool = True) -> None:
        if not wait and futures:
            self.client.cancel(list(futures))
        self.client.close()


def open_pool(workers: int | None, scheduler: str | None):
    return DaskPool(scheduler, workers) if scheduler else LocalPool(workers)
