"""The compiled assembly of factorisation results: the blocks of both factors, layout and data.

A per-sector factorisation (SVD, QR, LQ, eigh; :mod:`mps.blocks.decompose`) gives one dense
left matrix (fused row sector x bond sector) and one right matrix (bond sector x fused column
sector) per kept sector. The left factor has the row legs and the bond: its allowed blocks are
the combinations of row sectors (in the order of the row fusion, C order of sector indices) whose
fused sector keeps a bond sector, and a block's data are its rows of the left matrix, kept
columns only. The right factor has the bond and the column legs: for every bond sector in
order, the column combinations of the paired column sector (C order), a block's data being the
kept rows of the right matrix at its columns. That is the order in which the allowed blocks of
either factor's structure are enumerated (:func:`mps.blocks.sector_kernel.allowed_blocks`), so the
layouts computed here are the layouts of those structures, found without a search.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def _combo_size(combos, i, sizes, starts):  # pragma: no cover - compiled
    n = 1
    for a in range(combos.shape[1]):
        n *= sizes[starts[a] + combos[i, a]]
    return n


@njit(cache=True, nogil=True)
def _put_block(keys, shapes, blk, at, combos, i, sizes, starts):  # pragma: no cover - compiled
    """Write combination i's sectors and sizes into row ``blk`` of keys/shapes from column ``at``."""
    for a in range(combos.shape[1]):
        keys[blk, at + a] = combos[i, a]
        shapes[blk, at + a] = sizes[starts[a] + combos[i, a]]


@njit(cache=True, nogil=True)
def _firsts(kept):  # pragma: no cover - compiled
    out = np.zeros(len(kept), np.int64)
    for b in range(1, len(kept)):
        out[b] = out[b - 1] + kept[b - 1]
    return out


@njit(cache=True, nogil=True, inline="always")
def _blocks(count, rank, total, mats):  # pragma: no cover - compiled
    """Empty (keys, shapes, offsets, data) of ``count`` blocks of rank ``rank``, ``total`` entries."""
    return (np.empty((count, rank), np.int64), np.empty((count, rank), np.int64),
            np.zeros(count + 1, np.int64), np.empty(total, mats.dtype))


@njit(cache=True, nogil=True)
def left_factor_blocks(combos, sector, offset, sizes, starts, bond_of, kept, weight, start, ld, mats):  # pragma: no cover
    """(keys, shapes, offsets, data) of the left factor (row legs..., bond).

    combos/sector/offset: the row fusion (:class:`mps.blocks.charges.FusionMap`); sizes/starts:
    the row legs' sector sizes packed (:func:`mps.blocks.charges.pack_legs`); bond_of[s]: bond
    sector of fused row sector s (-1: none kept); kept[b]: its dimension; the left matrix of
    bond sector b starts at mats[start[b]] with ld[b] columns (C order).
    """
    n, r = combos.shape
    count, total = 0, 0
    for i in range(n):
        b = bond_of[sector[i]]
        if b >= 0:
            count += 1
            total += _combo_size(combos, i, sizes, starts) * kept[b]
    keys, shapes, offsets, data = _blocks(count, r + 1, total, mats)
    first = _firsts(kept)
    blk, pos = 0, 0
    for i in range(n):
        b = bond_of[sector[i]]
        if b < 0:
            continue
        _put_block(keys, shapes, blk, 0, combos, i, sizes, starts)
        keys[blk, r], shapes[blk, r] = b, kept[b]
        k = kept[b]
        w = weight[first[b]:first[b] + k]
        for row in range(_combo_size(combos, i, sizes, starts)):
            src = start[b] + (offset[i] + row) * ld[b]
            out, x = data[pos:pos + k], mats[src:src + k]
            for t in range(k):
                out[t] = x[t] * w[t]
            pos += k
        blk += 1
        offsets[blk] = pos
    return keys, shapes, offsets, data


@njit(cache=True, nogil=True)
def right_factor_blocks(combos, sector, offset, sizes, starts, col_of_bond, kept, weight, start, ld, mats):  # pragma: no cover
    """(keys, shapes, offsets, data) of the right factor (bond, column legs...).

    combos/sector/offset: the column fusion; col_of_bond[b]: the fused column sector paired with
    bond sector b; kept[b]: its dimension; the right matrix of bond sector b starts at
    mats[start[b]] with ld[b] columns (C order); its row t is multiplied by weight[w0 + t], w0
    the sum of kept[:b].
    """
    n, r = combos.shape
    order = np.argsort(sector, kind="mergesort")     # grouped by fused sector, C order inside
    by_sector = sector[order]
    nb = len(kept)
    lo = np.searchsorted(by_sector, col_of_bond, side="left")
    hi = np.searchsorted(by_sector, col_of_bond, side="right")
    count, total = 0, 0
    for b in range(nb):
        for j in range(lo[b], hi[b]):
            count += 1
            total += _combo_size(combos, order[j], sizes, starts) * kept[b]
    keys, shapes, offsets, data = _blocks(count, r + 1, total, mats)
    first = _firsts(kept)
    blk, pos = 0, 0
    for b in range(nb):
        for j in range(lo[b], hi[b]):
            i = order[j]
            keys[blk, 0], shapes[blk, 0] = b, kept[b]
            _put_block(keys, shapes, blk, 1, combos, i, sizes, starts)
            width = _combo_size(combos, i, sizes, starts)
            for t in range(kept[b]):
                src = start[b] + t * ld[b] + offset[i]
                out, x, w = data[pos:pos + width], mats[src:src + width], weight[first[b] + t]
                for c in range(width):
                    out[c] = x[c] * w
                pos += width
            blk += 1
            offsets[blk] = pos
    return keys, shapes, offsets, data
