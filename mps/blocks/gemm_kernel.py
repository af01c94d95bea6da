"""The group products of a planned contraction that are run from compiled code.

A plan multiplies one dense matrix per middle sector ("group", :mod:`mps.blocks.contract`).
Groups up to ``contract.COMPILED_GEMM`` multiply-adds are all done by one call of
:func:`group_products` (the plain loop below ``contract.SMALL_GEMM``, a BLAS call from compiled
code above it); larger ones are numpy matmul calls from Python, which use all of the BLAS's
threads.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def group_products(pa, pb, pc, groups, loop_limit):  # pragma: no cover - compiled
    """C = A B for every group (nrow, nmid, ncol, a_start, b_start, c_start) of packed operands
    (all three of one dtype).

    Groups of at most ``loop_limit`` multiply-adds are a plain loop (a BLAS call does not pay off
    below about 7 x 7 x 7, :data:`mps.blocks.contract.SMALL_GEMM`), the others one BLAS call each
    from here (``np.dot``, scipy's BLAS): from Python every product would cost a few microseconds
    of slicing and dispatch.
    """
    for g in range(groups.shape[0]):
        nr, nm, nc, sa, sb, sc = groups[g]
        if nr * nm * nc > loop_limit:
            np.dot(pa[sa:sa + nr * nm].reshape((nr, nm)), pb[sb:sb + nm * nc].reshape((nm, nc)),
                   pc[sc:sc + nr * nc].reshape((nr, nc)))
            continue
        for i in range(nr):               # slices: the compiler vectorises the inner loop
            crow = pc[sc + i * nc:sc + (i + 1) * nc]
            for j in range(nc):
                crow[j] = 0
            for k in range(nm):
                aik = pa[sa + i * nm + k]
                brow = pb[sb + k * nc:sb + (k + 1) * nc]
                for j in range(nc):
                    crow[j] += aik * brow[j]
