"""Per-sector factorisations side by side on the cores the BLAS may use.

A block-diagonal matrix factorises sector by sector and the sectors do not talk to each other.
OpenBLAS parallelises a single LAPACK factorisation poorly at the sector sizes of a sweep (half of
the work is matrix-vector products): measured on the 2-core development machine, five 256 x 128
sector blocks took 27 ms through gesdd with two BLAS threads, 16 ms with one, and 10 ms with one
BLAS thread per block and the blocks shared out over two Python threads (numpy's LAPACK calls
release the interpreter lock). Below ~48 rows or columns there is nothing to gain and the small
calls stay on the caller's thread (thresholds: :data:`mps.blocks.decompose.SIDE_BY_SIDE`).

The BLAS thread count is a property of the whole process: while the blocks run side by side it is
one, and it is restored afterwards. A lock makes those phases one at a time, so two threads that
each factorise (Dask workers run scan points in threads) cannot restore each other's setting in
the wrong order. With one BLAS thread configured (a scan worker's share of the cores) everything
runs on the caller's thread. A child made by ``fork`` has none of its parent's threads, so it
starts its own pool and lock.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from functools import cache
from typing import Callable, Sequence

import numpy as np

_PHASE = threading.Lock()


@cache
def _blas():
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController().select(user_api="blas")


@cache
def _workers(count: int) -> ThreadPoolExecutor:
    return ThreadPoolExecutor(count, thread_name_prefix="chargewise-sector")


def _after_fork_in_child() -> None:
    global _PHASE
    _workers.cache_clear()
    _PHASE = threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork_in_child)


def blas_threads() -> int:
    """Threads the BLAS libraries loaded in this process are set to use (1 if none is found)."""
    return max((lib.num_threads for lib in _blas().lib_controllers), default=1)


def _work(m: np.ndarray) -> int:
    rows, cols = m.shape[-2:]
    return rows * cols * min(rows, cols)


def map_sectors(fn: Callable, mats: Sequence[np.ndarray], min_dim: int) -> list:
    """``[fn(m) for m in mats]``, with the BLAS on one thread per block and the blocks shared out
    over the BLAS's cores (largest first) when some block has at least ``min_dim`` rows and
    columns; results in the order of ``mats``."""
    if not any(min(m.shape[-2:]) >= min_dim for m in mats):
        return [fn(m) for m in mats]
    cores = blas_threads()
    if cores <= 1:
        return [fn(m) for m in mats]
    order = sorted(range(len(mats)), key=lambda i: -_work(mats[i]))
    with _PHASE, _blas().limit(limits=1):
        if len(mats) == 1:
            return [fn(mats[0])]
        done = list(_workers(cores).map(lambda i: fn(mats[i]), order))
    out: list = [None] * len(mats)
    for i, result in zip(order, done):
        out[i] = result
    return out

