"""The compiled core of contraction planning: groups and block places of a contraction in one call.

Input is plain arrays: the block layouts of A, B and the result (sector keys, shapes, offsets),
and the fusion maps of A's free legs (rows), the contracted legs (middle) and B's free legs
(columns) as (codes, sector, offset, radix, fused sizes) -- see
:class:`mps.blocks.charges.FusionMap`. Every block finds its fused row/middle/column sector and
offset by bisection on the mixed-radix codes; the groups are the middle sectors met by both
operands, in sector order; each block's place is its group's start plus row offset x width plus
column offset. The data moves themselves are compiled copies in :mod:`mps.blocks.kernels`.
The Python planner (:mod:`mps.blocks.contract`) only wraps the result.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from mps.blocks.kernels import covered_entries
from mps.blocks.sector_kernel import allowed_blocks, bisect_left, fused_codes, packed_bound


@njit(cache=True, nogil=True)
def _locate(keys, axes, fusion):  # pragma: no cover - compiled
    """(fused sector, offset) of every block's combination of sectors on ``axes``."""
    codes, sector, offset, radix = fusion[0], fusion[1], fusion[2], fusion[3]
    n = keys.shape[0]
    sec = np.full(n, -1, np.int64)
    off = np.zeros(n, np.int64)
    for b in range(n):
        code = 0
        for j in range(len(axes)):
            code += keys[b, axes[j]] * radix[j]
        pos = bisect_left(codes, code)
        if pos < len(codes) and codes[pos] == code:
            sec[b] = sector[pos]
            off[b] = offset[pos]
    return sec, off


@njit(cache=True, nogil=True)
def _starts(sizes, out):  # pragma: no cover - compiled
    total = 0
    for g in range(len(sizes)):
        out[g] = total
        total += sizes[g]
    return total


@njit(cache=True, nogil=True)
def _placed(group_of, sec, inside_row, inside_col, groups, width_col, start_col):  # pragma: no cover
    """dest and leading dimension of every block: group of its sector, top-left entry at
    row offset x width + column offset (-1: the block is in no group)."""
    n = len(sec)
    dest = np.full(n, -1, np.int64)
    ld = np.zeros(n, np.int64)
    for b in range(n):
        g = group_of[sec[b]] if sec[b] >= 0 else -1
        if g >= 0:
            ld[b] = groups[g, width_col]
            dest[b] = groups[g, start_col] + inside_row[b] * ld[b] + inside_col[b]
    return dest, ld


@njit(cache=True, nogil=True)
def plan_places(lay_a, row_a, mid_a, lay_b, mid_b, col_b, lay_o, na, f_row, f_mid, f_col):  # pragma: no cover
    """Groups (ngroups, 6: nrow, nmid, ncol, a_start, b_start, c_start), the packed sizes of A, B
    and the products, where every block of A, B and the result sits in them: (dest, ld) per
    operand (dest -1: the block meets no group), and flags (A has a hole, B has a hole). Blocks
    never overlap in their group matrices, so a packed buffer has no hole exactly when its
    blocks' sizes add up to its length. Work is proportional to the number of blocks, not of
    entries."""
    keys_a, shapes_a, offs_a = lay_a
    keys_b, shapes_b, offs_b = lay_b
    keys_o, shapes_o, offs_o = lay_o
    rs_a, ro_a = _locate(keys_a, row_a, f_row)
    ms_a, mo_a = _locate(keys_a, mid_a, f_mid)
    ms_b, mo_b = _locate(keys_b, mid_b, f_mid)
    cs_b, co_b = _locate(keys_b, col_b, f_col)

    nm = len(f_mid[4])
    row_of_mid = np.full(nm, -1, np.int64)
    col_of_mid = np.full(nm, -1, np.int64)
    for b in range(len(ms_a)):
        if ms_a[b] >= 0:
            row_of_mid[ms_a[b]] = rs_a[b]
    for b in range(len(ms_b)):
        if ms_b[b] >= 0:
            col_of_mid[ms_b[b]] = cs_b[b]
    group_of_mid = np.full(nm, -1, np.int64)
    group_of_row = np.full(len(f_row[4]), -1, np.int64)
    ng = 0
    for m in range(nm):
        if row_of_mid[m] >= 0 and col_of_mid[m] >= 0:
            group_of_mid[m] = ng
            group_of_row[row_of_mid[m]] = ng
            ng += 1
    groups = np.empty((ng, 6), np.int64)
    for m in range(nm):
        g = group_of_mid[m]
        if g >= 0:
            groups[g, 0] = f_row[4][row_of_mid[m]]
            groups[g, 1] = f_mid[4][m]
            groups[g, 2] = f_col[4][col_of_mid[m]]
    sizes = np.empty(3, np.int64)
    sizes[0] = _starts(groups[:, 0] * groups[:, 1], groups[:, 3])
    sizes[1] = _starts(groups[:, 1] * groups[:, 2], groups[:, 4])
    sizes[2] = _starts(groups[:, 0] * groups[:, 2], groups[:, 5])
    pa, pb = sizes[0], sizes[1]

    dest_a, ld_a = _placed(group_of_mid, ms_a, ro_a, mo_a, groups, 1, 3)
    dest_b, ld_b = _placed(group_of_mid, ms_b, mo_b, co_b, groups, 2, 4)
    rs_o, ro_o = _locate(keys_o, np.arange(na), f_row)
    _, co_o = _locate(keys_o, np.arange(na, keys_o.shape[1]), f_col)
    dest_o, ld_o = _placed(group_of_row, rs_o, ro_o, co_o, groups, 2, 5)
    holes = np.zeros(2, np.bool_)
    holes[0] = covered_entries(shapes_a, dest_a) != pa
    holes[1] = covered_entries(shapes_b, dest_b) != pb
    return groups, sizes, dest_a, ld_a, dest_b, ld_b, dest_o, ld_o, holes


@njit(cache=True, nogil=True)
def select_legs(packed, axes):  # pragma: no cover - compiled
    """The packed form (charges, sizes, starts, flows; see
    :func:`mps.blocks.charges.pack_legs`) of legs ``axes`` of packed legs."""
    charges, sizes, starts, flows = packed
    n = 0
    for a in axes:
        n += starts[a + 1] - starts[a]
    out_c = np.empty((n, charges.shape[1]), np.int64)
    out_s = np.empty(n, np.int64)
    out_st = np.zeros(len(axes) + 1, np.int64)
    out_f = np.empty(len(axes), np.int64)
    pos = 0
    for i in range(len(axes)):
        a = axes[i]
        for j in range(starts[a], starts[a + 1]):
            out_c[pos] = charges[j]
            out_s[pos] = sizes[j]
            pos += 1
        out_st[i + 1] = pos
        out_f[i] = flows[a]
    return out_c, out_s, out_st, out_f


@njit(cache=True, nogil=True)
def _join(p, q):  # pragma: no cover - compiled
    """Packed legs of p followed by those of q."""
    c = np.concatenate((p[0], q[0]))
    s = np.concatenate((p[1], q[1]))
    st = np.concatenate((p[2], q[2][1:] + p[2][-1]))
    return c, s, st, np.concatenate((p[3], q[3]))


@njit(cache=True, nogil=True, inline="always")
def _fusion_arrays(packed, shift, bias):  # pragma: no cover - compiled
    """(codes, sector, offset, radix, fused sizes) of the fusion of packed legs (flow +1), as
    :attr:`mps.blocks.charges.FusionMap.arrays` (zero legs: the trivial one-sector fusion).
    Inlined into its callers: a kernel calling a kernel is compiled together with it, and one
    level less saves about 1.5 s of the first run's compilation."""
    charges, sizes, starts, flows = packed
    codes, sector, offset, _, fsizes = fused_codes(charges, sizes, starts, flows, 1, shift, bias)
    r = len(flows)
    radix = np.ones(r, np.int64)
    for i in range(r - 2, -1, -1):
        radix[i] = radix[i + 1] * (starts[i + 2] - starts[i + 1])
    return codes, sector, offset, radix, fsizes


@njit(cache=True, nogil=True)
def split_groups(groups, limit):  # pragma: no cover - compiled
    """(groups of at most ``limit`` multiply-adds, the others, 2 x all multiply-adds)."""
    work = groups[:, 0] * groups[:, 1] * groups[:, 2]
    return groups[work <= limit], groups[work > limit], 2 * work.sum()


@njit(cache=True, nogil=True)
def plan_arrays(places, limit):  # pragma: no cover - compiled
    """What a plan keeps of :func:`plan_places`' results: (dest, ld) of A, B and the result, the
    groups split at ``limit`` multiply-adds (:func:`split_groups`), 2 x the multiply-adds, the
    packed sizes of A, B and the products, and whether A or B left a hole in its packing. Fewer
    arrays than plan_places returns: every array handed back to Python costs ~0.3 us."""
    groups, sizes, dest_a, ld_a, dest_b, ld_b, dest_o, ld_o, holes = places
    small, large, flops = split_groups(groups, limit)
    return (dest_a, ld_a, dest_b, ld_b, dest_o, ld_o, small, large, flops, sizes[0], sizes[1], sizes[2],
            holes[0] or holes[1])


@njit(cache=True, nogil=True)
def plan_all(packed_a, lay_a, packed_b, lay_b, free_a, axes_a, axes_b, free_b, out_charge,
             shift, bias, limit):  # pragma: no cover - compiled
    """Everything :func:`plan_places` needs, computed here from the operands' packed legs and
    layouts: the three fusions (A's free legs, the contracted legs, B's free legs) and the
    result's layout; returns the plan's arrays (:func:`plan_arrays`), then the result's layout
    as :class:`mps.blocks.tensor.Layout` takes it: keys, shapes, offsets, packed legs and their
    charge bound (:func:`packed_bound`). One compiled call instead of six with Python in
    between."""
    rows = select_legs(packed_a, free_a)
    cols = select_legs(packed_b, free_b)
    f_row = _fusion_arrays(rows, shift, bias)
    f_mid = _fusion_arrays(select_legs(packed_a, axes_a), shift, bias)
    f_col = _fusion_arrays(cols, shift, bias)
    out = _join(rows, cols)
    keys_o, shapes_o, offs_o = allowed_blocks(out[0], out[1], out[2], out[3], out_charge, shift, bias)
    res = plan_places(lay_a, free_a, axes_a, lay_b, axes_b, free_b, (keys_o, shapes_o, offs_o), len(free_a),
                      f_row, f_mid, f_col)
    return plan_arrays(res, limit), keys_o, shapes_o, offs_o, out, packed_bound(out[0], out[2])


@njit(cache=True, nogil=True)
def sector_places(lay, row_axes, col_axes, f_row, f_col, start, ld):  # pragma: no cover - compiled
    """Where every block sits among one dense matrix per fused row sector: row sector s of the
    fused ``row_axes`` owns the matrix at ``start[s]`` (-1: none) with ``ld[s]`` columns, and a
    block lands at its row offset x ld + column offset. Returns (dest, width) per block (dest
    -1: no matrix), the placement :func:`mps.blocks.kernels.pack_into` and
    :func:`mps.blocks.kernels.unpack_blocks` read."""
    keys = lay[0]
    rs, ro = _locate(keys, row_axes, f_row)
    _, co = _locate(keys, col_axes, f_col)
    dest = np.full(len(rs), -1, np.int64)
    width = np.zeros(len(rs), np.int64)
    for b in range(len(rs)):
        if rs[b] >= 0 and start[rs[b]] >= 0:
            width[b] = ld[rs[b]]
            dest[b] = start[rs[b]] + ro[b] * width[b] + co[b]
    return dest, width
