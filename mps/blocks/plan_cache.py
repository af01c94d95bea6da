"""A least-recently-used cache of contraction plans, bounded by the memory of their arrays."""

from __future__ import annotations

import time
from collections import OrderedDict
from typing import NamedTuple


class CacheInfo(NamedTuple):
    hits: int
    misses: int
    plans: int
    nbytes: int
    build_seconds: float


class PlanCache:
    """Least-recently-used contraction plans, bounded by the memory of their arrays.

    A plan holds a few numbers per block, so many thousands are kept and sweeps that revisit the
    same block structures (a converged stage) plan nothing.
    """

    def __init__(self, build, max_bytes: int):
        self.build, self.max_bytes = build, max_bytes
        self.plans: OrderedDict = OrderedDict()
        self.nbytes = self.hits = self.misses = 0
        self.build_seconds = 0.0      # wall time spent building plans (the bench's planning share)

    @staticmethod
    def weight(plan) -> int:
        return plan.nbytes

    def _evict(self) -> None:
        while self.nbytes > self.max_bytes and len(self.plans) > 1:
            try:
                _, old = self.plans.popitem(last=False)
            except KeyError:    # emptied meanwhile by another thread
                break
            self.nbytes -= self.weight(old)

    def __call__(self, *key):
        return self.lookup(key, *key)

    def lookup(self, key, *args):
        """The plan stored under ``key``, built from ``args`` if missing (for plans whose
        arguments are not hashable themselves)."""
        plan = self.plans.get(key)
        if plan is not None:
            self.hits += 1
            try:
                self.plans.move_to_end(key)
            except KeyError:    # evicted meanwhile by another thread (Dask workers run points in threads)
                pass
            return plan
        self.misses += 1
        t0 = time.perf_counter()
        plan = self.build(*args)
        self.build_seconds += time.perf_counter() - t0
        self.plans[key] = plan
        self.nbytes += self.weight(plan)
        self._evict()
        return plan

    def cache_info(self) -> CacheInfo:
        return CacheInfo(self.hits, self.misses, len(self.plans), self.nbytes, self.build_seconds)

    def cache_clear(self) -> None:
        self.plans.clear()
        self.nbytes = 0
