"""Planning a whole three-step chain -- group GEMM, sparse constant entry by entry, group GEMM --
in one compiled call.

Every effective-Hamiltonian application and every environment update of a sweep is such a chain
(:mod:`mps.blocks.chain`), and in a first sweep each bond step meets new block structures, so its
chains are planned afresh. Planned step by step, that is two contraction plans, the layout of
the direct step's result and the direct step's tasks: four compiled calls with Python in between
that builds, hashes and looks up the intermediate structures. Here the compiled side goes from
the running tensor's layout to all three steps at once (the contraction plans of
:func:`mps.blocks.plan_kernel.plan_all`, the direct step's result layout and its tasks of
:func:`mps.blocks.direct.direct_tasks`), and the Python side only wraps the arrays. The plans
are the same arrays the step-by-step planner builds (tested), cached per chain structure.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache
from typing import NamedTuple

import numpy as np
from numba import njit

from mps.blocks.charges import _BIAS, _SHIFT
from mps.blocks.contract import (
    COMPILED_GEMM,
    Axes,
    ContractionPlan,
    axis_split,
    in_range,
    int_array,
    picker,
    total_charge,
    wrap_plan,
)
from mps.blocks.direct import DirectStep, Entries, contracted_entries, direct_tasks
from mps.blocks.plan_cache import PlanCache
from mps.blocks.plan_kernel import _join, plan_all, select_legs
from mps.blocks.sector_kernel import allowed_blocks
from mps.blocks.tensor import BlockTensor, Layout, layout


@dataclass(eq=False)
class ThreeSteps:
    """The plans of a three-step chain: contraction, direct step, contraction (never changed
    once built; a plain dataclass, as :class:`mps.blocks.tensor.Layout`)."""

    first: ContractionPlan
    direct: DirectStep
    last: ContractionPlan
    keep: tuple = ()     # the layouts and entries whose identities key the cache, kept alive

    @property
    def nbytes(self) -> int:
        return self.first.nbytes + self.direct.nbytes + self.last.nbytes


@njit(cache=True, nogil=True)
def plan_three(packed_t, lay_t, packed_0, lay_0, first0, ax0, charge0, out0, packed_1, free_x, con_x,
               e_keys, e_offs, free_c, con_c, con_radix, charge1, packed_2, lay_2, first2, ax2, charge2,
               shift, bias, limit):  # pragma: no cover - compiled
    """Step 0 (running tensor T with constant 0), the layout of step 1's result (free legs of
    step 0's result, then the free legs of constant 1), step 2 (that result with constant 2) and
    the tasks of step 1 from step 0's products into step 2's packing. ``ax0``/``ax2``: rows,
    middle axes of A, middle axes and columns of B; ``out0``: step 0's result's row and column
    axes; the entries of constant 1 as :func:`mps.blocks.direct.contracted_entries` sorts them.
    Returns (step 0's plan arrays without its result's placement, constant 2's placement and
    step 2's other plan arrays, step 2's result's layout as :func:`plan_all` returns it, step 1's
    tasks). The planner is called here directly, not through a helper: every level of kernels
    calling kernels is compiled again with everything below it (3 s of the first run for one
    helper level)."""
    pa, la, pb, lb = (packed_t, lay_t, packed_0, lay_0) if first0 else (packed_0, lay_0, packed_t, lay_t)
    arr0, keys_o0, shapes_o0, offs_o0, packed_o0, _ = plan_all(pa, la, pb, lb, ax0[0], ax0[1], ax0[2], ax0[3],
                                                               charge0, shift, bias, limit)
    packed_d = _join(select_legs(packed_o0, free_x), select_legs(packed_1, free_c))
    keys_d, shapes_d, offs_d = allowed_blocks(packed_d[0], packed_d[1], packed_d[2], packed_d[3], charge1,
                                              shift, bias)
    lay_d = (keys_d, shapes_d, offs_d)
    pa, la, pb, lb = (packed_d, lay_d, packed_2, lay_2) if first2 else (packed_2, lay_2, packed_d, lay_d)
    arr2, keys_o2, shapes_o2, offs_o2, packed_o2, bound2 = plan_all(pa, la, pb, lb, ax2[0], ax2[1], ax2[2], ax2[3],
                                                                    charge2, shift, bias, limit)
    starts = packed_d[2]
    r = len(starts) - 1
    radix = np.ones(r, np.int64)
    for i in range(r - 2, -1, -1):
        radix[i] = radix[i + 1] * (starts[i + 2] - starts[i + 1])
    codes = np.zeros(keys_d.shape[0], np.int64)
    for b in range(keys_d.shape[0]):
        for i in range(r):
            codes[b] += keys_d[b, i] * radix[i]
    if first2:
        rows, cols, dest, ld = ax2[0], ax2[1], arr2[0], arr2[1]
    else:
        rows, cols, dest, ld = ax2[2], ax2[3], arr2[2], arr2[3]
    tasks = direct_tasks(keys_o0, shapes_o0, out0[0], out0[1], arr0[4], arr0[5], free_x, con_x, e_keys, e_offs,
                         free_c, con_c, con_radix, codes, radix, shapes_d, rows, cols, dest, ld)
    # only what the chain runs goes back (each array handed to Python costs ~0.4 us): not step
    # 0's result placement nor step 2's running operand's, which the tasks hold
    keep0 = (arr0[0], arr0[1], arr0[2], arr0[3]) + arr0[6:]
    const2 = (arr2[2], arr2[3]) if first2 else (arr2[0], arr2[1])
    return keep0, const2 + arr2[4:], (keys_o2, shapes_o2, offs_o2, packed_o2, bound2), tasks


class _Shape(NamedTuple):
    """The bookkeeping of a three-step chain that depends only on ranks, axes and operand order:
    both GEMM steps' axes, step 1's split of X's axes, the legs of the three results as pickers
    from the four tensors' legs laid end to end (running tensor, constants 0, 1, 2), and the
    pairs of those legs each step contracts."""

    ax0: Axes
    x_axes: Axes
    ax2: Axes
    legs0: Callable
    legs1: Callable
    legs2: Callable
    pairs: tuple[tuple[int, int], ...]


@lru_cache(maxsize=256)
def _shape(ranks: tuple[int, int, int, int], r0, k0, f0: bool, r1, k1, r2, k2, f2: bool) -> _Shape:
    nt, n0, n1, n2 = ranks
    run = tuple(range(nt))
    c0, c1, c2 = (tuple(range(start, start + n)) for start, n in ((nt, n0), (nt + n0, n1), (nt + n0 + n1, n2)))
    pairs = [(run[i], c0[j]) for i, j in zip(r0, k0)]
    ax0 = axis_split(nt, r0, n0, k0) if f0 else axis_split(n0, k0, nt, r0)
    a, b = (run, c0) if f0 else (c0, run)
    legs0 = tuple(a[i] for i in ax0.free_a) + tuple(b[i] for i in ax0.free_b)
    pairs += [(legs0[i], c1[j]) for i, j in zip(r1, k1)]
    x_axes = axis_split(len(legs0), r1, n1, k1)
    legs1 = tuple(legs0[i] for i in x_axes.free_a) + tuple(c1[i] for i in x_axes.free_b)
    pairs += [(legs1[i], c2[j]) for i, j in zip(r2, k2)]
    ax2 = axis_split(len(legs1), r2, n2, k2) if f2 else axis_split(n2, k2, len(legs1), r2)
    a, b = (legs1, c2) if f2 else (c2, legs1)
    legs2 = tuple(a[i] for i in ax2.free_a) + tuple(b[i] for i in ax2.free_b)
    return _Shape(ax0, x_axes, ax2, picker(legs0), picker(legs1), picker(legs2), tuple(pairs))


def _build(template: BlockTensor, steps, entries: Entries) -> ThreeSteps | None:
    (c0, r0, k0, f0), (c1, r1, k1, _), (c2, r2, k2, f2) = steps
    lay_t, lay_0, lay_1, lay_2 = template.layout, c0.layout, c1.layout, c2.layout
    charges = _chain_charges(template.charge, c0.charge, c1.charge, c2.charge)
    # every intermediate's legs are some of these and its charge a sum of some of these charges
    if not in_range(lay_t, lay_0, lay_1, lay_2):
        return None
    shape = _shape((template.ndim, c0.ndim, c1.ndim, c2.ndim), r0, k0, f0, r1, k1, r2, k2, f2)
    legs = template.legs + c0.legs + c1.legs + c2.legs
    legs2 = shape.legs2(legs)
    if not legs2:
        return None
    for i, j in shape.pairs:
        if not legs[i].is_dual_of(legs[j]):
            ranks = (template.ndim, c0.ndim, c1.ndim, c2.ndim)
            raise ValueError(f"{_which(i, ranks)} does not match {_which(j, ranks)}: contracted legs need "
                             "the same sectors and opposite flows")
    legs0, legs1 = shape.legs0(legs), shape.legs1(legs)
    charge0, charge1, charge2 = charges.totals
    ax0, ax2 = shape.ax0, shape.ax2
    free_c, con_c, con_radix, e_keys, e_offs, values = contracted_entries(entries, c1, k1)
    arr0, arr2, lo2, (entry, tasks, zeros, flops) = plan_three(
        lay_t.packed, _arrays(lay_t), lay_0.packed, _arrays(lay_0), f0, ax0[2:6], charges.arrays[0],
        ax0[6:8], lay_1.packed, shape.x_axes.rows_a, shape.x_axes.mids_a, e_keys, e_offs, free_c, con_c,
        con_radix, charges.arrays[1], lay_2.packed, _arrays(lay_2), f2, ax2[2:6], charges.arrays[2],
        _SHIFT, _BIAS, COMPILED_GEMM)
    lay_o2 = layout.offer(legs2, charge2, *lo2)
    plan0 = wrap_plan(arr0[:4] + _UNKEPT + arr0[4:], ax0, *((lay_t, lay_0) if f0 else (lay_0, lay_t)), None,
                      legs0, charge0)
    const2 = arr2[:2]
    arr2 = (_UNKEPT + const2 if f2 else const2 + _UNKEPT) + arr2[2:]
    plan2 = wrap_plan(arr2, ax2, *((None, lay_2) if f2 else (lay_2, None)), lay_o2, legs2, charge2)
    step = DirectStep(legs1, charge1, tasks, values[entry], zeros, int(flops))
    return ThreeSteps(plan0, step, plan2, (lay_t, lay_0, lay_2, entries))


def _which(flat: int, ranks) -> str:
    """'leg i of <tensor>' for position ``flat`` of the chain's legs laid end to end."""
    for name, rank in zip(("the running tensor", "constant 0", "constant 1", "constant 2"), ranks):
        if flat < rank:
            return f"leg {flat} of {name}"
        flat -= rank
    raise IndexError(flat)


_UNKEPT = (None, None)      # (dest, ld) of a placement the chain does not keep


def _arrays(lay: Layout):
    return lay.key_array, lay.shape_array, lay.offsets


class _Charges(NamedTuple):
    totals: tuple           # the charges of the three steps' results
    arrays: tuple           # the same as int64 arrays


@lru_cache(maxsize=256)
def _chain_charges(*charges: tuple[int, ...]) -> _Charges:
    """Charges of a chain's three results from those of its running tensor and constants."""
    totals, acc = [], charges[0]
    for c in charges[1:]:
        acc = total_charge(acc, c)
        totals.append(acc)
    return _Charges(tuple(totals), tuple(map(int_array, totals)))


class _Cache(PlanCache):
    @staticmethod
    def weight(plan) -> int:
        return plan.nbytes if plan is not None else 64


plan_three_cached = _Cache(_build, max_bytes=256 << 20)
"""Plans of three-step chains (None: charges too large for the compiled keys), cached by the
layouts of the running tensor and of constants 0 and 2 and by the entries of constant 1."""


def plan_chain_of_three(template: BlockTensor, steps, entries: Entries) -> ThreeSteps | None:
    """The plans of ``steps`` (constant, running axes, constant axes, running first; axes
    normalised) on ``template``'s structure, whose middle step (its constant's non-zero
    ``entries``, :func:`mps.blocks.direct.nonzero_entries`) is done entry by entry; None when a
    combined charge could be too large for the compiled planner (plan step by step then).

    The key holds the identities of the three layouts (a layout is immutable and the layout
    cache hands out one object per structure, so equal structures meet the same plans) and of
    the entries; the cached plans keep all four alive, so an id cannot pass to another object
    while it is a key. Hashing a few ints instead of a dozen legs."""
    (c0, r0, k0, f0), (c1, r1, k1, _), (c2, r2, k2, f2) = steps
    key = (id(template.layout), r0, id(c0.layout), k0, f0, id(entries), r1, k1, id(c2.layout), r2, k2, f2)
    return plan_three_cached.lookup(key, template, steps, entries)
