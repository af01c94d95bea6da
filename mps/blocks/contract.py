"""Pairwise contraction of block-sparse tensors, planned once per structure and run as large GEMMs.

To contract legs ``axes_a`` of A with legs ``axes_b`` of B, the contracted legs are fused into
one "middle" leg and the free legs of each tensor into a row (A) or column (B) leg. Conservation
makes every fused middle sector c meet exactly one row sector of A (charge Q_A - c) and one
column sector of B (charge Q_B + c), so the contraction is one dense matrix product per middle
sector: the blocks are packed into those matrices, multiplied with one BLAS call each, and the
product is cut back into the blocks of the result. The plan (which block goes where) depends only
on the legs, total charges and axes, so it is computed once and cached; a Krylov solver that
applies the same operator many times pays for it once.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property, lru_cache
from operator import itemgetter
from typing import NamedTuple

import numpy as np

from mps.blocks.charges import _BIAS, _SHIFT, FusionMap, Leg, fuse
from mps.blocks.gemm_kernel import group_products
from mps.blocks.kernels import pack_blocks, unpack_blocks
from mps.blocks.plan_cache import PlanCache
from mps.blocks.plan_kernel import plan_all, plan_arrays, plan_places
from mps.blocks.tensor import BlockTensor, Layout, layout

SMALL_GEMM = 400
"""Largest group (multiply-adds) done by a plain compiled loop instead of one BLAS call from
compiled code: measured on the development machine (AVX-512 Xeon), the loop is faster up to
6^3 and for flat shapes such as 2 x 8 x 30, one BLAS call from 8^3 on (0.32 against 0.43 us)
and twice as fast at 10^3 (on the earlier AMD machine the crossover lay between 12^3 and 16^3)."""

COMPILED_GEMM = 64**3
"""Largest group (multiply-adds) multiplied from compiled code (:func:`mps.blocks.gemm_kernel.
group_products`, one BLAS call each above ``SMALL_GEMM``); larger ones are one numpy matmul each.
Up to 64^3 OpenBLAS runs a product on one thread anyway (its multithreading threshold), so the
second BLAS library that compiled code calls (scipy's) never starts its threads, and the Python
overhead of each call (slicing, dispatch: ~1 us) is gone. Measured, four 32^3 products: 5.7 us
compiled, 9.0 us from Python."""


class _Group(NamedTuple):
    """One GEMM: rows x mid times mid x cols, stored at these offsets of the packed buffers."""

    nrow: int
    nmid: int
    ncol: int
    a_start: int
    b_start: int
    c_start: int


class Placement(NamedTuple):
    """Where the blocks of one operand (or of the result) sit in the packed group matrices:
    block b's rows run over legs ``rows``, its columns over ``cols``, and its top-left entry is
    packed position ``dest[b]`` of a matrix with ``ld[b]`` columns (-1: in no group). ``size``
    is the packed length; ``keys`` the blocks' sector indices (the layout's key array)."""

    shapes: np.ndarray
    offsets: np.ndarray
    rows: np.ndarray
    cols: np.ndarray
    dest: np.ndarray
    ld: np.ndarray
    size: int
    keys: np.ndarray

    def pack(self, data: np.ndarray) -> np.ndarray:
        """The operand's flat data as packed group matrices (one compiled copy)."""
        return pack_blocks(data, self.shapes, self.offsets, self.rows, self.cols, self.dest, self.ld, self.size)

    def unpack(self, packed: np.ndarray) -> np.ndarray:
        """Flat data of the result from the packed products (zero where no group lands)."""
        return unpack_blocks(packed, self.shapes, self.offsets, self.rows, self.cols, self.dest, self.ld)


@dataclass(eq=False)
class ContractionPlan:
    """Everything needed to contract two structures.

    The operands are packed into one buffer of group matrices each (group after group, C order)
    and the products land in one packed buffer of ``packed_size`` entries followed by a single
    zero. Where every block goes is held per block (:class:`Placement`), so building a plan costs
    time proportional to the number of blocks, and running it is one compiled copy per operand,
    the group products, and one compiled copy back.

    A placement is None where the plan does not keep it: a scalar result's, and in a three-step
    chain (:mod:`mps.blocks.chain_plan`) the first step's result and the last step's running
    operand, which the direct step between them reaches through its own task list. Never changed
    once built (a plain dataclass, as :class:`mps.blocks.tensor.Layout`).
    """

    out_legs: tuple[Leg, ...]
    out_charge: tuple[int, ...]
    compiled: np.ndarray              # (n, 6) the fields of :class:`_Group` of every group of at most
    large_array: np.ndarray           # COMPILED_GEMM multiply-adds (one compiled call), and of the others
    flops: int                        # real multiply-adds times two, counted from the group shapes
    packed_size: int
    place_a: Placement | None
    place_b: Placement | None
    place_o: Placement | None
    sizes: tuple[int, int]            # packed lengths of A and B

    @property
    def nbytes(self) -> int:
        """Memory held by the plan's arrays (the cache's weight)."""
        arrays = [self.compiled, self.large_array] + [
            getattr(p, f) for p in (self.place_a, self.place_b, self.place_o)
                                       if p is not None for f in ("dest", "ld")]
        return sum(x.nbytes for x in arrays) + 1024

    @cached_property
    def groups(self) -> tuple[_Group, ...]:
        """Every group, those multiplied from compiled code first."""
        return tuple(_Group(*g) for g in self.compiled.tolist() + self.large_array.tolist())

    @cached_property
    def large(self) -> tuple[_Group, ...]:
        """The groups of more than ``COMPILED_GEMM`` multiply-adds, one numpy matmul each."""
        return tuple(_Group(*g) for g in self.large_array.tolist())


def _fusion(legs: tuple[Leg, ...], k: int) -> FusionMap:
    if legs:
        return fuse(legs, 1)
    trivial = Leg(((0,) * k,), (1,), 1)
    zero = np.zeros(1, dtype=np.int64)
    return FusionMap((), trivial, np.zeros((1, 0), dtype=np.int64), zero, zero, zero)


class Axes(NamedTuple):
    """Index bookkeeping of a contraction, which depends only on the ranks and contracted axes:
    free axes of A and B, and the row / middle / column axes and the result's row and column
    axes as the arrays the compiled planner takes."""

    free_a: tuple[int, ...]
    free_b: tuple[int, ...]
    rows_a: np.ndarray
    mids_a: np.ndarray
    mids_b: np.ndarray
    cols_b: np.ndarray
    rows_o: np.ndarray
    cols_o: np.ndarray
    out_legs: Callable      # the result's legs from A's legs followed by B's


def picker(idx: tuple[int, ...]) -> Callable:
    """A function returning the items ``idx`` of a sequence as a tuple."""
    if len(idx) > 1:
        return itemgetter(*idx)
    return (lambda seq: (seq[idx[0]],)) if idx else (lambda seq: ())


@lru_cache(maxsize=1024)
def axis_split(na: int, axes_a: tuple[int, ...], nb: int, axes_b: tuple[int, ...]) -> Axes:
    if len(axes_a) != len(axes_b):
        raise ValueError("contract needs the same number of axes on both tensors")
    if len(set(axes_a)) != len(axes_a) or len(set(axes_b)) != len(axes_b):
        raise ValueError("an axis may be contracted only once")
    free_a = tuple(i for i in range(na) if i not in axes_a)
    free_b = tuple(i for i in range(nb) if i not in axes_b)
    nfree = len(free_a) + len(free_b)
    return Axes(free_a, free_b, int_array(free_a), int_array(axes_a), int_array(axes_b), int_array(free_b),
                int_array(tuple(range(len(free_a)))), int_array(tuple(range(len(free_a), nfree))),
                picker(free_a + tuple(na + i for i in free_b)))


def check_pairs(a_legs, axes_a, b_legs, axes_b) -> None:
    for i, j in zip(axes_a, axes_b):
        if not a_legs[i].is_dual_of(b_legs[j]):
            raise ValueError(f"leg {i} of the first tensor does not match leg {j} of the second: "
                             "contracted legs need the same sectors and opposite flows")


def _build_plan(a_legs: tuple[Leg, ...], a_charge: tuple[int, ...], axes_a: tuple[int, ...],
                b_legs: tuple[Leg, ...], b_charge: tuple[int, ...], axes_b: tuple[int, ...]
                ) -> ContractionPlan:
    """Plan the contraction of legs ``axes_a`` of A with legs ``axes_b`` of B (their layouts
    from the layout cache)."""
    return _plan_layouts(layout(a_legs, a_charge), axes_a, layout(b_legs, b_charge), axes_b)


def _plan_layouts(lay_a: Layout, axes_a: tuple[int, ...], lay_b: Layout, axes_b: tuple[int, ...]) -> ContractionPlan:
    """Plan the contraction of legs ``axes_a`` of structure A with legs ``axes_b`` of B.

    The groups and the entry-by-entry maps come from one compiled call
    (:func:`mps.blocks.plan_kernel.plan_all`), which also builds the result's layout.
    """
    a_legs, b_legs = lay_a.legs, lay_b.legs
    ax, out_legs, out_charge = result_structure(a_legs, lay_a.charge, axes_a, b_legs, lay_b.charge, axes_b)
    free_a, free_b, rows_a, mids_a, mids_b, cols_b = ax[:6]
    if out_legs and in_range(lay_a, lay_b):
        # one compiled call: fusions, the result's layout (handed to the layout cache) and places
        arrays, *parts = plan_all(
            lay_a.packed, _arrays(lay_a), lay_b.packed, _arrays(lay_b), rows_a, mids_a, mids_b, cols_b,
            int_array(out_charge), _SHIFT, _BIAS, COMPILED_GEMM)
        lay_o = layout.offer(out_legs, out_charge, *parts)
    else:
        # a scalar result, or charges that may not fit the compiled keys (the layout raises the
        # error if the result's do not)
        k = a_legs[0].nq
        fa = _fusion(tuple(a_legs[i] for i in free_a), k)
        fb = _fusion(tuple(b_legs[i] for i in free_b), k)
        fm = _fusion(tuple(a_legs[i] for i in axes_a), k)
        lay_o = layout(out_legs, out_charge) if out_legs else None
        places = plan_places(_arrays(lay_a), rows_a, mids_a, _arrays(lay_b), mids_b, cols_b, _arrays(lay_o),
                             len(free_a), fa.arrays, fm.arrays, fb.arrays)
        arrays = plan_arrays(places, COMPILED_GEMM)
    return wrap_plan(arrays, ax, lay_a, lay_b, lay_o, out_legs, out_charge)


def result_structure(a_legs, a_charge, axes_a, b_legs, b_charge, axes_b) -> tuple[Axes, tuple[Leg, ...], tuple[int, ...]]:
    """Axis bookkeeping (contracted legs checked), legs and total charge of the result of
    contracting legs ``axes_a`` of A with legs ``axes_b`` of B."""
    ax = axis_split(len(a_legs), tuple(axes_a), len(b_legs), tuple(axes_b))
    check_pairs(a_legs, axes_a, b_legs, axes_b)
    return ax, ax.out_legs(a_legs + b_legs), total_charge(a_charge, b_charge)


@lru_cache(maxsize=1024)
def total_charge(a_charge: tuple[int, ...], b_charge: tuple[int, ...]) -> tuple[int, ...]:
    """The charge of a product of tensors of charges ``a_charge`` and ``b_charge``."""
    return tuple(int(a) + int(b) for a, b in zip(a_charge, b_charge))


def in_range(*lays: Layout) -> bool:
    """Whether every combined charge a compiled planner forms from these tensors (fusions of
    their legs, the blocks of every result) fits its charge keys: the layouts' bounds plus all
    their total charges."""
    return sum(lay.bound + sum(map(abs, lay.charge)) for lay in lays) < _BIAS


def wrap_plan(arrays, ax: Axes, lay_a: Layout, lay_b: Layout, lay_o: Layout | None,
              out_legs: tuple[Leg, ...], out_charge: tuple[int, ...]) -> ContractionPlan:
    """A :class:`ContractionPlan` from the compiled planner's arrays
    (:func:`mps.blocks.plan_kernel.plan_arrays`) and the layouts of A, B and the result."""
    dest_a, ld_a, dest_b, ld_b, dest_o, ld_o, small, large, flops, pa, pb, pc, hole = arrays
    if hole:
        raise AssertionError("contraction plan left a hole in a group matrix")
    place_a = place_b = place_o = None       # a layout given as None: that placement is not kept
    if lay_a is not None:
        place_a = Placement(lay_a.shape_array, lay_a.offsets, ax.rows_a, ax.mids_a, dest_a, ld_a, pa, lay_a.key_array)
    if lay_b is not None:
        place_b = Placement(lay_b.shape_array, lay_b.offsets, ax.mids_b, ax.cols_b, dest_b, ld_b, pb, lay_b.key_array)
    if out_legs and lay_o is not None:
        place_o = Placement(lay_o.shape_array, lay_o.offsets, ax.rows_o, ax.cols_o, dest_o, ld_o, pc, lay_o.key_array)
    return ContractionPlan(out_legs, out_charge, small, large, int(flops), int(pc), place_a, place_b, place_o,
                           (int(pa), int(pb)))


_NO_BLOCKS = (np.zeros((0, 0), dtype=np.int64), np.zeros((0, 0), dtype=np.int64), np.zeros(1, dtype=np.int64))


def _arrays(lay) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return _NO_BLOCKS if lay is None else (lay.key_array, lay.shape_array, lay.offsets)


@lru_cache(maxsize=1024)
def int_array(values: tuple[int, ...]) -> np.ndarray:
    """Axes or a total charge as the int64 array the compiled planners take (cached)."""
    return np.array(values, dtype=np.int64)


plan_contraction = PlanCache(_build_plan, max_bytes=256 << 20)
"""Plan the contraction of legs ``axes_a`` of A with legs ``axes_b`` of B (cached by structure):
``plan_contraction(a_legs, a_charge, axes_a, b_legs, b_charge, axes_b)``."""


class _PairCache(PlanCache):
    @staticmethod
    def weight(entry) -> int:
        return entry[0].nbytes


pair_plans = _PairCache(lambda lay_a, axes_a, lay_b, axes_b: (_plan_layouts(lay_a, axes_a, lay_b, axes_b), lay_a, lay_b),
                        max_bytes=64 << 20)
"""Plans of :func:`plan_pair`, with the two layouts they were built from (kept alive)."""


def plan_pair(a: BlockTensor, b: BlockTensor, axes_a: tuple[int, ...], axes_b: tuple[int, ...]) -> ContractionPlan:
    """The plan of ``contract(a, b, axes_a, axes_b)`` (axes as tuples of non-negative ints),
    cached by the identities of the two layouts: the layout cache hands out one object per
    structure, and the cached entry keeps both alive, so an id cannot pass to another layout
    while it is a key. No leg is hashed, which matters where a new structure comes at every
    call (the two-site tensor of every bond step of a sweep)."""
    lay_a, lay_b = a.layout, b.layout
    return pair_plans.lookup((id(lay_a), axes_a, id(lay_b), axes_b), lay_a, axes_a, lay_b, axes_b)[0]


def gemm_groups(plan: ContractionPlan, pa: np.ndarray, pb: np.ndarray, dtype,
                out: np.ndarray | None = None) -> np.ndarray:
    """All group products of packed operands, into a packed buffer ending with one zero."""
    pc = np.empty(plan.packed_size + 1, dtype=dtype) if out is None else out
    pc[-1] = 0
    if len(plan.compiled):
        group_products(pa.astype(pc.dtype, copy=False), pb.astype(pc.dtype, copy=False), pc, plan.compiled, SMALL_GEMM)
    for g in plan.large:
        np.matmul(pa[g.a_start:g.a_start + g.nrow * g.nmid].reshape(g.nrow, g.nmid),
                  pb[g.b_start:g.b_start + g.nmid * g.ncol].reshape(g.nmid, g.ncol),
                  out=pc[g.c_start:g.c_start + g.nrow * g.ncol].reshape(g.nrow, g.ncol))
    return pc


def run_plan(plan: ContractionPlan, a: BlockTensor, b: BlockTensor):
    """Execute a contraction plan; returns a BlockTensor, or a scalar if no leg is left."""
    dtype = np.result_type(a.dtype, b.dtype)
    pc = gemm_groups(plan, plan.place_a.pack(a.data), plan.place_b.pack(b.data), dtype)
    if not plan.out_legs:
        return pc[:-1].sum() if plan.packed_size else dtype.type(0)
    return BlockTensor(plan.out_legs, plan.out_charge, plan.place_o.unpack(pc))


def contract(a: BlockTensor, b: BlockTensor, axes_a, axes_b):
    """Contract legs ``axes_a`` of ``a`` with legs ``axes_b`` of ``b`` (like ``np.tensordot``).

    The result's legs are the free legs of ``a`` in order, then the free legs of ``b``; its total
    charge is the sum of both charges. Contracted legs must have identical sectors and opposite
    flows. With no free leg left the result is a scalar.
    """
    axes_a = tuple(int(i) % a.ndim for i in np.atleast_1d(axes_a))
    axes_b = tuple(int(i) % b.ndim for i in np.atleast_1d(axes_b))
    plan = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    return run_plan(plan, a, b)
