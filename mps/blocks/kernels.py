"""Compiled index kernels: where every entry of every block goes when blocks are packed into
group matrices (and back), at compiled speed instead of a Python loop over blocks.

A block of shape (n_0, ..., n_{r-1}) stored in C order at ``offset`` of a flat array is seen as a
matrix whose rows run over the legs ``row_axes`` and whose columns run over ``col_axes`` (each in
C order of those legs). Its entry (r, c) sits at offset + R[r] + C[c], where R and C are the
mixed-radix sums of the block's C-order strides over the row and column legs. In its group matrix
(leading dimension ``ld``) the block occupies the rectangle starting at ``dest``; entry (r, c) is
packed position dest + r ld + c. One kernel call fills that map for all blocks of a tensor.

Compiled with numba (``cache=True``, no parallel thread pool of its own: OpenBLAS owns the cores).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True, inline="always")
def _axis_sums(shapes, b, strides, axes, digits, out):  # pragma: no cover - compiled
    """out[i] = sum_j digit_j(i) strides[axes[j]] over the C-order multi-index of block b's
    shape on ``axes`` (``digits``: scratch of at least len(axes) entries)."""
    m = len(axes)
    n = 1
    for j in range(m):
        n *= shapes[b, axes[j]]
        digits[j] = 0
    acc = 0
    for i in range(n):
        out[i] = acc
        j = m - 1
        while j >= 0:
            a = axes[j]
            digits[j] += 1
            acc += strides[a]
            if digits[j] < shapes[b, a]:
                break
            acc -= digits[j] * strides[a]
            digits[j] = 0
            j -= 1
    return n


@njit(cache=True, nogil=True, inline="always")
def _block_sums(shapes, b, row_axes, col_axes, strides, digits, rsum, csum):  # pragma: no cover - compiled
    """C-order strides of block b, then the offsets of its rows and columns (see
    :func:`_axis_sums`); returns (number of rows, number of columns). The block comes as
    (shapes, b), the scratch from the caller, and both helpers are inlined: a row view, a fresh
    array or a compiled call per block each take atomic reference counts, which cost as much as
    moving a small block (measured: the bench's bond-32 two-site application 35-39 -> 24-25 us)."""
    s = 1
    for a in range(shapes.shape[1] - 1, -1, -1):
        strides[a] = s
        s *= shapes[b, a]
    return (_axis_sums(shapes, b, strides, row_axes, digits, rsum),
            _axis_sums(shapes, b, strides, col_axes, digits, csum))


@njit(cache=True, nogil=True)
def _is_run(csum, nc):  # pragma: no cover - compiled
    """True when a block's columns are consecutive in its C-order data (csum = 0, 1, ...): a
    row then moves as one slice, which the compiler vectorises, instead of entry by entry."""
    for j in range(nc):
        if csum[j] != j:
            return False
    return True


@njit(cache=True, nogil=True, inline="always")
def _block_scratch(offsets, r):  # pragma: no cover - compiled
    """Scratch for :func:`_block_sums` over all blocks: row and column offsets (as long as the
    largest block), C-order strides and odometer digits (one per leg), allocated once per call."""
    big = 1
    for b in range(len(offsets) - 1):
        big = max(big, offsets[b + 1] - offsets[b])
    return np.empty(big, np.int64), np.empty(big, np.int64), np.empty(r, np.int64), np.empty(r, np.int64)


@njit(cache=True, nogil=True)
def block_map(shapes, offsets, row_axes, col_axes, dest, ld, size, scatter):  # pragma: no cover
    """Packed position <-> flat position of every entry of every block with ``dest[b] >= 0``.

    shapes (nb, r), offsets (nb,) flat start of each block, dest (nb,) packed start of each block's
    rectangle (-1: the block is not packed), ld (nb,) leading dimension of its group matrix.
    ``scatter`` False: returns g of length ``size`` with g[packed] = flat (a gather map).
    ``scatter`` True: returns s of length ``size`` (the flat size) with s[flat] = packed. Entries no
    block reaches hold -1; the array is written once when the blocks cover all of it.
    """
    nb, r = shapes.shape
    out = np.empty(size, np.int64) if covered_entries(shapes, dest) == size else np.full(size, -1, np.int64)
    rsum, csum, strides, digits = _block_scratch(offsets, r)
    for b in range(nb):
        if dest[b] < 0:
            continue
        nr, nc = _block_sums(shapes, b, row_axes, col_axes, strides, digits, rsum, csum)
        for i in range(nr):
            src = offsets[b] + rsum[i]
            dst = dest[b] + i * ld[b]
            if scatter:
                for j in range(nc):
                    out[src + csum[j]] = dst + j
            else:
                for j in range(nc):
                    out[dst + j] = src + csum[j]
    return out


@njit(cache=True, nogil=True)
def covered_entries(shapes, dest):  # pragma: no cover - compiled
    """Number of entries of the blocks with ``dest[b] >= 0``."""
    total = 0
    for b in range(shapes.shape[0]):
        if dest[b] >= 0:
            n = 1
            for a in range(shapes.shape[1]):
                n *= shapes[b, a]
            total += n
    return total


@njit(cache=True, nogil=True)
def leg_positions(keys, shapes, offsets, axis, sector_start):  # pragma: no cover - compiled
    """Dense index along leg ``axis`` of every entry of the flat data (C order inside blocks)."""
    out = np.empty(offsets[-1], np.int64)
    r = shapes.shape[1]
    for b in range(len(offsets) - 1):
        outer = 1
        inner = 1
        for a in range(axis):
            outer *= shapes[b, a]
        for a in range(axis + 1, r):
            inner *= shapes[b, a]
        base = sector_start[keys[b, axis]]
        p = offsets[b]
        for _ in range(outer):
            for i in range(shapes[b, axis]):
                for _j in range(inner):
                    out[p] = base + i
                    p += 1
    return out


@njit(cache=True, nogil=True)
def pack_blocks(data, shapes, offsets, row_axes, col_axes, dest, ld, size):  # pragma: no cover
    """Copy every block with ``dest[b] >= 0`` into its rectangle of the packed group matrices
    (the data moves of :func:`block_map` without building an index map, which would cost as
    much as the copy and then be read again). The blocks must cover the packed buffer."""
    return pack_into(data, shapes, offsets, row_axes, col_axes, dest, ld, np.empty(size, data.dtype))


@njit(cache=True, nogil=True)
def pack_into(data, shapes, offsets, row_axes, col_axes, dest, ld, out):  # pragma: no cover
    """:func:`pack_blocks` into a given buffer (of any dtype ``data`` converts to)."""
    nb, r = shapes.shape
    rsum, csum, strides, digits = _block_scratch(offsets, r)
    for b in range(nb):
        if dest[b] < 0:
            continue
        nr, nc = _block_sums(shapes, b, row_axes, col_axes, strides, digits, rsum, csum)
        run = _is_run(csum, nc)
        for i in range(nr):
            src = offsets[b] + rsum[i]
            dst = dest[b] + i * ld[b]
            if run:
                o, x = out[dst:dst + nc], data[src:src + nc]
                for j in range(nc):
                    o[j] = x[j]
            else:
                for j in range(nc):
                    out[dst + j] = data[src + csum[j]]
    return out


@njit(cache=True, nogil=True)
def unpack_blocks(packed, shapes, offsets, row_axes, col_axes, dest, ld):  # pragma: no cover
    """The inverse of :func:`pack_blocks` into a new flat array; blocks with ``dest[b] < 0``
    (no group produced them) are zero."""
    nb, r = shapes.shape
    out = np.empty(offsets[nb], packed.dtype)
    rsum, csum, strides, digits = _block_scratch(offsets, r)
    for b in range(nb):
        if dest[b] < 0:
            for p in range(offsets[b], offsets[b + 1]):
                out[p] = 0
            continue
        nr, nc = _block_sums(shapes, b, row_axes, col_axes, strides, digits, rsum, csum)
        run = _is_run(csum, nc)
        for i in range(nr):
            src = offsets[b] + rsum[i]
            dst = dest[b] + i * ld[b]
            if run:
                o, x = out[src:src + nc], packed[dst:dst + nc]
                for j in range(nc):
                    o[j] = x[j]
            else:
                for j in range(nc):
                    out[src + csum[j]] = packed[dst + j]
    return out


@njit(cache=True, nogil=True, inline="always")
def weights(shapes, b, rows, cols, ld, out):  # pragma: no cover - compiled
    """out[a]: how far one step along axis a of block b (shape ``shapes[b]``) moves in a packed
    group matrix with ``ld`` columns whose rows run over legs ``rows`` and columns over legs
    ``cols`` (C order)."""
    s = 1
    for j in range(len(cols) - 1, -1, -1):
        out[cols[j]] = s
        s *= shapes[b, cols[j]]
    s = ld
    for j in range(len(rows) - 1, -1, -1):
        out[rows[j]] = s
        s *= shapes[b, rows[j]]


@njit(cache=True, nogil=True)
def repack_blocks(src, shapes, src_rows, src_cols, src_dest, src_ld,
                  dst_rows, dst_cols, dst_dest, dst_ld, out):  # pragma: no cover - compiled
    """Move every block from its place among one product's group matrices (``src_*``; dest -1:
    no group produced it, so it is zero) to its place in the next product's packing (``dst_*``),
    in one pass: the unpacking of one contraction and the packing of the next, without the flat
    array in between and without index maps. Returns ``out``."""
    nb, r = shapes.shape
    ws = np.empty(r, np.int64)
    wd = np.empty(r, np.int64)
    idx = np.zeros(r, np.int64)
    for b in range(nb):
        if dst_dest[b] < 0:
            continue
        weights(shapes, b, dst_rows, dst_cols, dst_ld[b], wd)
        weights(shapes, b, src_rows, src_cols, max(src_ld[b], 1), ws)
        zero = src_dest[b] < 0
        ps = src_dest[b]
        pd = dst_dest[b]
        nl = shapes[b, r - 1]
        wsl = ws[r - 1]
        wdl = wd[r - 1]
        count = 1
        for a in range(r - 1):
            count *= shapes[b, a]
        for a in range(r):
            idx[a] = 0
        unit = wsl == 1 and wdl == 1    # slices: the compiler vectorises the copy
        for _ in range(count):
            if zero:
                for t in range(nl):
                    out[pd + t * wdl] = 0
            elif unit:
                o, x = out[pd:pd + nl], src[ps:ps + nl]
                for t in range(nl):
                    o[t] = x[t]
            else:
                for t in range(nl):
                    out[pd + t * wdl] = src[ps + t * wsl]
            j = r - 2
            while j >= 0:
                idx[j] += 1
                ps += ws[j]
                pd += wd[j]
                if idx[j] < shapes[b, j]:
                    break
                ps -= idx[j] * ws[j]
                pd -= idx[j] * wd[j]
                idx[j] = 0
                j -= 1
    return out
