"""Contraction with a small sparse constant (an MPO tensor), entry by entry, straight from one
product's packed layout into the next product's packing.

In the effective Hamiltonian the middle step contracts the large intermediate X with the MPO. As
a group GEMM it has a contracted dimension of a few (w d^2 split by charge), and X must be moved
into that GEMM's packing and the result out into the next one's: three passes over the largest
array of the application, the last a scattered transpose. The MPO has few non-zero entries, so
instead every non-zero entry C[k, g] adds C[k, g] X[f, k] to Y[f, g] for all free indices f of X
at once (a strided AXPY over one block's slab), reading X where the previous group products left
it and writing Y where the next group product reads it: one pass, no intermediate copy.

A :class:`DirectStep` is the list of those AXPYs ("tasks"), grouped by the sectors of X's free
legs (the slabs of one group fit in cache together) and sorted by destination inside a group,
so that the first task of each destination slab writes and the others add; only slabs that no
task reaches are zeroed.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numba import njit

from mps.blocks.charges import Leg, mixed_radix
from mps.blocks.kernels import weights
from mps.blocks.sector_kernel import bisect_left
from mps.blocks.tensor import BlockTensor

DIRECT_REUSE = 4.0
"""A constant is applied entry by entry when it has at most this many non-zero entries per
distinct contracted index (on average): then each entry of X is read a few times at most, and
one pass beats a GEMM between two repacks. Measured on the development machine with the bench's
two-site problem and random pairs of growing density: the two ways cost the same at about 6
entries per index at bond 64, and entry by entry was still 13 % faster at 5.8 at bond 256. The
MPOs of the shipped families have 1.3 (fermions) to 3.2 (complex scalar, nmax 5, merged pair)."""


@dataclass(eq=False)
class DirectStep:
    """The AXPYs of one direct contraction. Row t of ``tasks`` is (src, dst, first, extents...,
    source strides..., destination strides...) over X's free legs: ``values[t]`` times the slab
    of X starting at packed position src is added to the slab of Y starting at dst (written, if
    first). Rows of ``zeros`` (start, extents..., strides...) are the slabs of Y no task reaches,
    cleared before the tasks run. Never changed once built (a plain dataclass, as
    :class:`mps.blocks.tensor.Layout`)."""

    out_legs: tuple[Leg, ...]
    out_charge: tuple[int, ...]
    tasks: np.ndarray
    values: np.ndarray
    zeros: np.ndarray
    flops: int           # real multiply-adds times two of one application
    keep: tuple = ()     # the two placements and the constant's entries, alive for the cache key

    @property
    def nbytes(self) -> int:
        """Memory held by the task arrays (the plan cache's weight)."""
        return self.tasks.nbytes + self.values.nbytes + self.zeros.nbytes + 1024

    def __call__(self, src: np.ndarray, out: np.ndarray) -> np.ndarray:
        return direct_apply(src, out, self.tasks, self.values.astype(out.dtype, copy=False), self.zeros)


def direct_legs(x_legs: tuple[Leg, ...], x_charge: tuple[int, ...], axes_x: tuple[int, ...],
                const: BlockTensor, axes_c: tuple[int, ...]) -> tuple[tuple[Leg, ...], tuple[int, ...]]:
    """Legs (free legs of X, then free legs of the constant) and charge of the result."""
    for i, j in zip(axes_x, axes_c):
        if not x_legs[i].is_dual_of(const.legs[j]):
            raise ValueError(f"leg {i} of the running tensor does not match leg {j} of the constant")
    legs = (tuple(x for i, x in enumerate(x_legs) if i not in axes_x)
            + tuple(x for i, x in enumerate(const.legs) if i not in axes_c))
    return legs, tuple(int(a) + int(b) for a, b in zip(x_charge, const.charge))


class Entries(NamedTuple):
    """Non-zero entries of a constant: sector indices (n, ndim), offsets inside the sectors
    (n, ndim) and values."""

    keys: np.ndarray
    offsets: np.ndarray
    values: np.ndarray
    verdicts: dict      # per contracted axes: use_direct's answer and the sorted entries


_ENTRIES: OrderedDict = OrderedDict()
_ENTRIES_KEPT = 256


def nonzero_entries(const: BlockTensor) -> Entries:
    """Every non-zero entry of ``const`` (cached by structure and data: the MPO tensors of a
    run are the same few constants at every bond step)."""
    key = (const.legs, const.charge, const.dtype.str, const.data.tobytes())
    hit = _ENTRIES.get(key)
    if hit is not None:
        try:
            _ENTRIES.move_to_end(key)
        except KeyError:    # evicted meanwhile by another thread
            pass
        return hit
    lay = const.layout
    pos = np.flatnonzero(const.data)
    blk = np.searchsorted(lay.offsets, pos, side="right") - 1
    rel = pos - lay.offsets[blk]
    shapes = lay.shape_array[blk]
    offs = np.empty_like(shapes)
    for a in range(const.ndim - 1, -1, -1):
        offs[:, a] = rel % shapes[:, a]
        rel = rel // shapes[:, a]
    out = _ENTRIES[key] = Entries(lay.key_array[blk], offs, const.data[pos], {})
    if len(_ENTRIES) > _ENTRIES_KEPT:
        try:
            _ENTRIES.popitem(last=False)
        except KeyError:    # emptied meanwhile by another thread
            pass
    return out


def use_direct(const: BlockTensor, axes_c: tuple[int, ...], entries: Entries | None = None) -> bool:
    """Whether to apply ``const`` entry by entry (:data:`DIRECT_REUSE`); ``entries``: its
    :func:`nonzero_entries`, if the caller has them."""
    entries = nonzero_entries(const) if entries is None else entries
    verdict = entries.verdicts.get(axes_c)
    if verdict is None:
        keys, offs = entries.keys, entries.offsets
        starts = [np.asarray(const.legs[i].offsets)[:-1] for i in axes_c]
        dense = np.stack([starts[n][keys[:, i]] + offs[:, i] for n, i in enumerate(axes_c)], axis=1)
        verdict = entries.verdicts[axes_c] = bool(len(keys)) and len(keys) <= DIRECT_REUSE * len(np.unique(dense, axis=0))
    return verdict


def contracted_entries(entries: Entries, const: BlockTensor, axes_c: tuple[int, ...]):
    """The constant's side of every direct step over ``axes_c`` (cached in ``entries``): free and
    contracted axes, the mixed-radix multipliers of the contracted sectors, and the entries
    sorted by the code of their contracted sectors."""
    key = ("sorted", axes_c)
    hit = entries.verdicts.get(key)
    if hit is None:
        free_c = np.array([i for i in range(const.ndim) if i not in axes_c], dtype=np.int64)
        con_c = np.array(axes_c, dtype=np.int64)
        con_radix = mixed_radix([const.legs[i].nsec for i in axes_c])
        order = np.argsort(entries.keys[:, con_c] @ con_radix, kind="stable")
        hit = entries.verdicts[key] = (free_c, con_c, con_radix, entries.keys[order], entries.offsets[order],
                                       entries.values[order])
    return hit


def plan_direct(x_legs, x_charge, axes_x, const: BlockTensor, axes_c, src_place, dst_place,
                out=None) -> DirectStep:
    """Tasks of X (legs ``x_legs``, held in ``src_place``: a placement of the previous product)
    contracted over ``axes_x`` with ``const`` over ``axes_c``, written into ``dst_place`` (the
    next product's packing of the result). ``out``: the result's legs and charge, if the caller
    already has them from :func:`direct_legs`."""
    out_legs, out_charge = out if out is not None else direct_legs(x_legs, x_charge, axes_x, const, axes_c)
    free_x = np.array([i for i in range(len(x_legs)) if i not in axes_x], dtype=np.int64)
    con_x = np.array(axes_x, dtype=np.int64)
    entries = nonzero_entries(const)
    free_c, con_c, con_radix, keys, offs, values = contracted_entries(entries, const, tuple(axes_c))
    out_radix = mixed_radix([leg.nsec for leg in out_legs])
    entry, rows, zeros, flops = direct_tasks(src_place.keys, src_place.shapes, src_place.rows, src_place.cols,
                                      src_place.dest, src_place.ld, free_x, con_x, keys, offs, free_c, con_c,
                                      con_radix, dst_place.keys @ out_radix, out_radix, dst_place.shapes,
                                      dst_place.rows, dst_place.cols, dst_place.dest, dst_place.ld)
    return DirectStep(out_legs, out_charge, rows, values[entry], zeros, int(flops), (src_place, dst_place, entries))


@njit(cache=True, nogil=True)
def _sector_codes(keys, axes, radix):  # pragma: no cover - compiled
    """Mixed-radix code of every row's sectors on ``axes``."""
    out = np.zeros(keys.shape[0], np.int64)
    for i in range(keys.shape[0]):
        for k in range(len(axes)):
            out[i] += keys[i, axes[k]] * radix[k]
    return out


@njit(cache=True, nogil=True)
def direct_tasks(x_keys, x_shapes, src_rows, src_cols, src_dest, src_ld, free_x, con_x,
                 e_keys, e_offs, free_c, con_c, con_radix, o_codes, o_radix,
                 o_shapes, dst_rows, dst_cols, dst_dest, dst_ld):  # pragma: no cover - compiled
    """Every (block of X, non-zero entry) pair that meets on the contracted sectors and lands in a
    packed block of the result; entries come sorted by the code of their contracted sectors.
    Returns (entry of each task, the task rows of :class:`DirectStep`, its zero slabs, 2 x the
    multiply-adds of one application)."""
    nb, r = x_shapes.shape
    nf, nk, ng = len(free_x), len(con_x), len(free_c)
    e_code = _sector_codes(e_keys, con_c, con_radix)
    b_code = _sector_codes(x_keys, con_x, con_radix)
    first_entry = np.searchsorted(e_code, b_code, side="left")
    end_entry = np.searchsorted(e_code, b_code, side="right")
    cap = 0
    for b in range(nb):
        if src_dest[b] >= 0:
            cap += end_entry[b] - first_entry[b]
    entry = np.empty(cap, np.int64)
    src = np.empty(cap, np.int64)
    dst = np.empty(cap, np.int64)
    extent = np.empty((cap, nf), np.int64)
    src_step = np.empty((cap, nf), np.int64)
    dst_step = np.empty((cap, nf), np.int64)
    group = np.empty(cap, np.int64)
    ws = np.empty(r, np.int64)
    wd = np.empty(nf + ng, np.int64)
    t = 0
    for b in range(nb):
        if src_dest[b] < 0:
            continue
        lo, hi = first_entry[b], end_entry[b]
        if lo == hi:
            continue
        weights(x_shapes, b, src_rows, src_cols, max(src_ld[b], 1), ws)
        base = 0
        for i in range(nf):
            base += x_keys[b, free_x[i]] * o_radix[i]
        for e in range(lo, hi):
            code = base
            for g in range(ng):
                code += e_keys[e, free_c[g]] * o_radix[nf + g]
            bo = bisect_left(o_codes, code)
            if bo >= len(o_codes) or o_codes[bo] != code or dst_dest[bo] < 0:
                continue
            weights(o_shapes, bo, dst_rows, dst_cols, dst_ld[bo], wd)
            s = src_dest[b]
            for k in range(nk):
                s += e_offs[e, con_c[k]] * ws[con_x[k]]
            d = dst_dest[bo]
            for g in range(ng):
                d += e_offs[e, free_c[g]] * wd[nf + g]
            entry[t], src[t], dst[t], group[t] = e, s, d, base
            # the free leg with the shortest destination stride (then source stride) runs
            # innermost: unit strides on both sides make the inner loop a plain vector AXPY
            inner = 0
            for i in range(1, nf):
                if (wd[i], ws[free_x[i]]) < (wd[inner], ws[free_x[inner]]):
                    inner = i
            j = 0
            for i in range(nf):
                if i != inner:
                    extent[t, j], src_step[t, j], dst_step[t, j] = x_shapes[b, free_x[i]], ws[free_x[i]], wd[i]
                    j += 1
            extent[t, nf - 1] = x_shapes[b, free_x[inner]]
            src_step[t, nf - 1], dst_step[t, nf - 1] = ws[free_x[inner]], wd[inner]
            t += 1
    # tasks of one pair of free-leg sectors together (their source and destination slabs fit in
    # cache together), and inside it by destination (the first task of a slab writes)
    by_dst = np.argsort(dst[:t], kind="mergesort")
    order = by_dst[np.argsort(group[by_dst], kind="mergesort")]
    tasks = np.empty((t, 3 + 3 * nf), np.int64)
    flops = 0
    for n in range(t):
        i = order[n]
        tasks[n, 0], tasks[n, 1] = src[i], dst[i]
        tasks[n, 2] = 1 if n == 0 or dst[i] != dst[order[n - 1]] else 0
        size = 2
        for a in range(nf):     # entry by entry: slices of rows would take reference counts
            tasks[n, 3 + a], tasks[n, 3 + nf + a], tasks[n, 3 + 2 * nf + a] = extent[i, a], src_step[i, a], dst_step[i, a]
            size *= extent[i, a]
        flops += size
    zeros = _unreached(dst[by_dst], nf, o_shapes, dst_rows, dst_cols, dst_dest, dst_ld)
    return entry[order], tasks, zeros, flops


@njit(cache=True, nogil=True)
def _unreached(starts, nf, o_shapes, dst_rows, dst_cols, dst_dest, dst_ld):  # pragma: no cover - compiled
    """Slabs of the result no task writes (rows: start, extents, strides over the free legs of
    X, the shortest stride last): they are zeroed before the tasks run. ``starts``: the tasks'
    destinations, sorted."""
    nb, r = o_shapes.shape
    wd = np.empty(r, np.int64)
    cap = 0
    for bo in range(nb):
        if dst_dest[bo] >= 0:
            count = 1
            for a in range(nf, r):
                count *= o_shapes[bo, a]
            cap += count
    out = np.empty((cap, 1 + 2 * nf), np.int64)
    n = 0
    for bo in range(nb):
        if dst_dest[bo] < 0:
            continue
        weights(o_shapes, bo, dst_rows, dst_cols, dst_ld[bo], wd)
        count = 1
        for a in range(nf, r):
            count *= o_shapes[bo, a]
        inner = 0
        for i in range(1, nf):
            if wd[i] < wd[inner]:
                inner = i
        for c in range(count):          # every combination of offsets on the constant's legs
            d, rest = dst_dest[bo], c
            for a in range(r - 1, nf - 1, -1):
                d += (rest % o_shapes[bo, a]) * wd[a]
                rest //= o_shapes[bo, a]
            pos = bisect_left(starts, d)
            if pos < len(starts) and starts[pos] == d:
                continue
            out[n, 0] = d
            j = 0
            for i in range(nf):
                if i != inner:
                    out[n, 1 + j], out[n, 1 + nf + j] = o_shapes[bo, i], wd[i]
                    j += 1
            out[n, nf], out[n, 2 * nf] = o_shapes[bo, inner], wd[inner]
            n += 1
    return out[:n].copy()


@njit(cache=True, nogil=True)
def direct_apply(src, out, tasks, values, zeros):  # pragma: no cover - compiled
    """Run a :class:`DirectStep`: zero the unreached slabs, then every task (see there). Unit
    strides on both sides (the usual case) run as slices, which the compiler vectorises: measured
    2.5x faster than the strided loop on the bench's two-site problem at bond 256 and 512."""
    nf = (tasks.shape[1] - 3) // 3 if tasks.shape[0] else (zeros.shape[1] - 1) // 2
    idx = np.zeros(max(nf, 1), np.int64)
    for z in range(zeros.shape[0]):
        nl, dl = zeros[z, nf], zeros[z, 2 * nf]
        count = 1
        for a in range(nf - 1):
            count *= zeros[z, 1 + a]
            idx[a] = 0
        pd = zeros[z, 0]
        for _ in range(count):
            for i in range(nl):
                out[pd + i * dl] = 0
            j = nf - 2
            while j >= 0:
                idx[j] += 1
                pd += zeros[z, 1 + nf + j]
                if idx[j] < zeros[z, 1 + j]:
                    break
                pd -= idx[j] * zeros[z, 1 + nf + j]
                idx[j] = 0
                j -= 1
    for t in range(tasks.shape[0]):
        v = values[t]
        first = tasks[t, 2] == 1
        nl, sl, dl = tasks[t, 2 + nf], tasks[t, 2 + 2 * nf], tasks[t, 2 + 3 * nf]
        count = 1
        for a in range(nf - 1):
            count *= tasks[t, 3 + a]
            idx[a] = 0
        ps, pd = tasks[t, 0], tasks[t, 1]
        unit = sl == 1 and dl == 1      # the usual case: slices make the loop a SIMD AXPY
        for _ in range(count):
            if unit:
                s, o = src[ps:ps + nl], out[pd:pd + nl]
                if first:
                    for i in range(nl):
                        o[i] = v * s[i]
                else:
                    for i in range(nl):
                        o[i] += v * s[i]
            elif first:
                for i in range(nl):
                    out[pd + i * dl] = v * src[ps + i * sl]
            else:
                for i in range(nl):
                    out[pd + i * dl] += v * src[ps + i * sl]
            j = nf - 2
            while j >= 0:
                idx[j] += 1
                ps += tasks[t, 3 + nf + j]
                pd += tasks[t, 3 + 2 * nf + j]
                if idx[j] < tasks[t, 3 + j]:
                    break
                ps -= idx[j] * tasks[t, 3 + nf + j]
                pd -= idx[j] * tasks[t, 3 + 2 * nf + j]
                idx[j] = 0
                j -= 1
    return out
