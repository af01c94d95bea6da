"""Compiled sector enumeration: the allowed blocks of a structure and the fusion of a group of
legs, from legs packed as flat arrays (:func:`mps.blocks.charges.pack_legs`).

Charge vectors are compared through one int64 key each (:func:`charge_keys`: ``shift`` bits per
component, offset by ``bias``), which orders them lexicographically. Compiled with numba
(``cache=True``, no thread pool of its own).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def charge_keys(charges, shift, bias):  # pragma: no cover - compiled
    """One int64 per charge vector, increasing with the vector's lexicographic order."""
    n, k = charges.shape
    out = np.zeros(n, np.int64)
    for i in range(n):
        key = 0
        for c in range(k):
            key = (key << shift) | (charges[i, c] + bias)
        out[i] = key
    return out


@njit(cache=True, nogil=True, inline="always")
def bisect_left(a, x):  # pragma: no cover - compiled
    """First position in sorted ``a`` whose value is not below ``x`` (``np.searchsorted`` for
    one value). Inlined into the loops that look up one value per block: a call of the numpy
    overload per lookup passes its array with atomic reference counts."""
    lo, hi = 0, len(a)
    while lo < hi:
        mid = (lo + hi) >> 1
        if a[mid] < x:
            lo = mid + 1
        else:
            hi = mid
    return lo


@njit(cache=True, nogil=True, inline="always")
def packed_bound(charges, starts):  # pragma: no cover - compiled
    """Largest |combined charge| a combination of sectors of packed legs can reach: the sum over
    legs of their largest |charge component| (:func:`mps.blocks.charges.charge_bound`)."""
    total = 0
    for i in range(len(starts) - 1):
        big = 0
        for j in range(starts[i], starts[i + 1]):
            for c in range(charges.shape[1]):
                big = max(big, abs(charges[j, c]))
        total += big
    return total


@njit(cache=True, nogil=True)
def _next_combo(digits, nsec, upto):  # pragma: no cover - compiled
    """Advance a mixed-radix odometer over legs 0..upto-1 (last leg fastest); False when done."""
    j = upto - 1
    while j >= 0:
        digits[j] += 1
        if digits[j] < nsec[j]:
            return True
        digits[j] = 0
        j -= 1
    return False


@njit(cache=True, nogil=True)
def allowed_blocks(charges, sizes, starts, flows, target, shift, bias):  # pragma: no cover
    """Sector keys, shapes and flat offsets of every allowed non-empty block, lexicographic order.

    Legs are given packed: sectors of leg i are rows starts[i]:starts[i+1] of ``charges`` (k
    columns, sorted) and ``sizes``. A block (s_0, ..., s_{r-1}) is allowed when
    sum_i flows[i] q_i(s_i) = target; the last leg's sector is found by bisection.
    """
    r = len(flows)
    k = charges.shape[1]
    nsec = starts[1:] - starts[:-1]
    last = charges[starts[r - 1]:starts[r]]
    last_keys = charge_keys(last, shift, bias)
    nhead = 1
    for i in range(r - 1):
        nhead *= nsec[i]
    keys = np.empty((nhead, r), np.int64)
    shapes = np.empty((nhead, r), np.int64)
    digits = np.zeros(r, np.int64)
    need = np.empty((1, k), np.int64)
    count = 0
    more = nhead > 0
    while more:
        for c in range(k):
            total = 0
            for i in range(r - 1):
                total += flows[i] * charges[starts[i] + digits[i], c]
            need[0, c] = flows[r - 1] * (target[c] - total)
        key = 0
        for c in range(k):
            key = (key << shift) | (need[0, c] + bias)
        pos = bisect_left(last_keys, key)
        if pos < len(last_keys) and last_keys[pos] == key:
            digits[r - 1] = pos
            ok = True
            for i in range(r):
                shapes[count, i] = sizes[starts[i] + digits[i]]
                keys[count, i] = digits[i]
                ok = ok and shapes[count, i] > 0
            if ok:
                count += 1
        digits[r - 1] = 0
        more = _next_combo(digits, nsec, r - 1)
    offsets = np.zeros(count + 1, np.int64)
    for b in range(count):
        n = 1
        for i in range(r):
            n *= shapes[b, i]
        offsets[b + 1] = offsets[b] + n
    return keys[:count].copy(), shapes[:count].copy(), offsets


@njit(cache=True, nogil=True)
def fused_codes(charges, sizes, starts, flows, flow, shift, bias):  # pragma: no cover - compiled
    """The fusion of a group of legs as the contraction planner needs it: for every non-empty
    sector combination (mixed-radix, i.e. lexicographic, order) its mixed-radix code, fused
    sector and offset inside that sector; then the keys (:func:`charge_keys`) of the fused
    sectors' charges (flow * sum_i flows[i] q_i), sorted, and their sizes. Combinations of one
    sector are laid out in lexicographic order."""
    r = len(flows)
    k = charges.shape[1]
    nsec = starts[1:] - starts[:-1]
    n = 1
    for i in range(r):
        n *= nsec[i]
    codes = np.empty(n, np.int64)
    keys = np.empty(n, np.int64)
    size = np.empty(n, np.int64)
    digits = np.zeros(r, np.int64)
    count = 0
    code = 0
    more = n > 0
    while more:
        s = 1
        for i in range(r):
            s *= sizes[starts[i] + digits[i]]
        if s > 0:
            key = 0
            for c in range(k):
                t = 0
                for i in range(r):
                    t += flows[i] * charges[starts[i] + digits[i], c]
                key = (key << shift) | (flow * t + bias)
            codes[count], keys[count], size[count] = code, key, s
            count += 1
        code += 1
        more = _next_combo(digits, nsec, r)
    fused = np.sort(keys[:count])
    nf = 0
    for i in range(count):           # distinct keys, in place
        if nf == 0 or fused[i] != fused[nf - 1]:
            fused[nf] = fused[i]
            nf += 1
    fused = fused[:nf]
    sector = np.searchsorted(fused, keys[:count])
    fused_sizes = np.zeros(nf, np.int64)
    offset = np.empty(count, np.int64)
    for b in range(count):
        offset[b] = fused_sizes[sector[b]]
        fused_sizes[sector[b]] += size[b]
    return codes[:count], sector, offset, fused, fused_sizes


@njit(cache=True, nogil=True)
def fuse_sectors(charges, sizes, starts, flows, flow, shift, bias):  # pragma: no cover
    """Every non-empty sector combination of a group of legs and its place in the fused leg.

    Returns (combos, codes, sector, offset, fused_charges, fused_sizes): :func:`fused_codes` with
    each combination's sector indices and the fused sectors' charge vectors (sectors sorted by
    charge) instead of their keys.
    """
    codes, sector, offset, fused, fused_sizes = fused_codes(charges, sizes, starts, flows, flow, shift, bias)
    r, k = len(flows), charges.shape[1]
    combos = np.empty((len(codes), r), np.int64)
    for b in range(len(codes)):
        rest = codes[b]
        for i in range(r - 1, -1, -1):
            n = starts[i + 1] - starts[i]
            combos[b, i] = rest % n
            rest //= n
    fused_charges = np.empty((len(fused), k), np.int64)
    mask = (1 << shift) - 1
    for f in range(len(fused)):
        key = fused[f]
        for c in range(k - 1, -1, -1):
            fused_charges[f, c] = (key & mask) - bias
            key >>= shift
    return combos, codes, sector, offset, fused_charges, fused_sizes
