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

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numba import njit

from mps.blocks.charges import _BIAS, _SHIFT
from mps.blocks.contract import COMPILED_GEMM, ContractionPlan, axis_split, result_structure, wrap_plan
from mps.blocks.direct import DirectStep, Entries, contracted_entries, direct_legs, direct_tasks
from mps.blocks.kernels import allowed_blocks
from mps.blocks.plan_cache import PlanCache
from mps.blocks.plan_kernel import _join, plan_all, select_legs
from mps.blocks.tensor import BlockTensor, Layout, layout


@dataclass(frozen=True)
class ThreeSteps:
    """The plans of a three-step chain: contraction, direct step, contraction."""

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
    Returns (step 0's plan arrays, its result's layout, step 1's result's layout, step 2's plan
    arrays, its result's layout and packed legs, step 1's tasks). The planner is called here
    directly, not through a helper: every level of kernels calling kernels is compiled again
    with everything below it (3 s of the first run for one helper level)."""
    pa, la, pb, lb = (packed_t, lay_t, packed_0, lay_0) if first0 else (packed_0, lay_0, packed_t, lay_t)
    arr0, packed_o0, keys_o0, shapes_o0, offs_o0 = plan_all(pa, la, pb, lb, ax0[0], ax0[1], ax0[2], ax0[3],
                                                            charge0, shift, bias, limit)
    packed_d = _join(select_legs(packed_o0, free_x), select_legs(packed_1, free_c))
    keys_d, shapes_d, offs_d = allowed_blocks(packed_d[0], packed_d[1], packed_d[2], packed_d[3], charge1,
                                              shift, bias)
    lay_d = (keys_d, shapes_d, offs_d)
    pa, la, pb, lb = (packed_d, lay_d, packed_2, lay_2) if first2 else (packed_2, lay_2, packed_d, lay_d)
    arr2, packed_o2, keys_o2, shapes_o2, offs_o2 = plan_all(pa, la, pb, lb, ax2[0], ax2[1], ax2[2], ax2[3],
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
    return (arr0, (keys_o0, shapes_o0, offs_o0), lay_d, arr2, (keys_o2, shapes_o2, offs_o2), packed_o2, tasks)


def _step_axes(legs, charge, axes, const: BlockTensor, axes_c, run_first: bool):
    """:func:`mps.blocks.contract.result_structure` of one GEMM step, in its operand order."""
    if run_first:
        return result_structure(legs, charge, axes, const.legs, const.charge, axes_c)
    return result_structure(const.legs, const.charge, axes_c, legs, charge, axes)


def _build(template: BlockTensor, steps, entries: Entries) -> ThreeSteps | None:
    (c0, r0, k0, f0), (c1, r1, k1, _), (c2, r2, k2, f2) = steps
    legs, charge = template.legs, template.charge
    # every intermediate's legs are some of these and its charge a sum of some of these charges
    tensors = (template, c0, c1, c2)
    if sum(t.layout.bound + max(map(abs, t.charge)) for t in tensors) >= _BIAS:
        return None
    ax0, legs0, charge0 = _step_axes(legs, charge, r0, c0, k0, f0)
    legs1, charge1 = direct_legs(legs0, charge0, r1, c1, k1)
    ax2, legs2, charge2 = _step_axes(legs1, charge1, r2, c2, k2, f2)
    if not legs2:
        return None
    free_c, con_c, con_radix, e_keys, e_offs, values = contracted_entries(entries, c1, k1)
    x_axes = axis_split(len(legs0), r1, c1.ndim, k1)      # free_a: the free axes of step 1's X
    lay_t, lay_0, lay_2 = template.layout, c0.layout, c2.layout
    arr0, lo0, ld1, arr2, lo2, packed2, (entry, tasks, zeros, flops) = plan_three(
        lay_t.packed, _arrays(lay_t), lay_0.packed, _arrays(lay_0), f0, ax0[2:6], _charge(charge0),
        ax0[6:8], c1.layout.packed, x_axes.rows_a, x_axes.mids_a, e_keys, e_offs, free_c, con_c,
        con_radix, _charge(charge1), lay_2.packed, _arrays(lay_2), f2, ax2[2:6], _charge(charge2),
        _SHIFT, _BIAS, COMPILED_GEMM)
    lay_o0, lay_1 = Layout(legs0, charge0, *lo0), Layout(legs1, charge1, *ld1)
    lay_o2 = layout.offer(Layout(legs2, charge2, *lo2, packed2))
    plan0 = wrap_plan(arr0, ax0, *((lay_t, lay_0) if f0 else (lay_0, lay_t)), lay_o0, legs0, charge0)
    plan2 = wrap_plan(arr2, ax2, *((lay_1, lay_2) if f2 else (lay_2, lay_1)), lay_o2, legs2, charge2)
    step = DirectStep(legs1, charge1, tasks, values[entry], zeros, int(flops))
    return ThreeSteps(plan0, step, plan2, (lay_t, lay_0, lay_2, entries))


def _arrays(lay: Layout):
    return lay.key_array, lay.shape_array, lay.offsets


@lru_cache(maxsize=256)
def _charge(charge: tuple[int, ...]) -> np.ndarray:
    return np.array(charge, dtype=np.int64)


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
