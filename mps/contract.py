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

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from mps.charges import FusionMap, Leg, fuse
from mps.tensor import BlockTensor, layout


@dataclass(frozen=True)
class _Part:
    """One stored block and the rectangle it occupies in a group matrix."""

    block: int
    row: int
    col: int
    nrow: int
    ncol: int


@dataclass(frozen=True)
class _Group:
    nrow: int
    nmid: int
    ncol: int
    a_parts: tuple[_Part, ...]
    b_parts: tuple[_Part, ...]
    out_parts: tuple[_Part, ...]


@dataclass(frozen=True)
class ContractionPlan:
    """Everything needed to contract two structures: the result's legs and one GEMM per group."""

    out_legs: tuple[Leg, ...]
    out_charge: tuple[int, ...]
    perm_a: tuple[int, ...]
    perm_b: tuple[int, ...]
    groups: tuple[_Group, ...]

    @property
    def flops(self) -> int:
        """Real multiply-adds times two, counted from the group shapes."""
        return sum(2 * g.nrow * g.nmid * g.ncol for g in self.groups)


def _fusion(legs: tuple[Leg, ...], k: int) -> FusionMap:
    if legs:
        return fuse(legs, 1)
    trivial = Leg(((0,) * k,), (1,), 1)
    return FusionMap((), trivial, {(): (0, 0, ())})


def _check_pairs(a_legs, axes_a, b_legs, axes_b) -> None:
    if len(axes_a) != len(axes_b):
        raise ValueError("contract needs the same number of axes on both tensors")
    if len(set(axes_a)) != len(axes_a) or len(set(axes_b)) != len(axes_b):
        raise ValueError("an axis may be contracted only once")
    for i, j in zip(axes_a, axes_b):
        if not a_legs[i].is_dual_of(b_legs[j]):
            raise ValueError(f"leg {i} of the first tensor does not match leg {j} of the second: "
                             "contracted legs need the same sectors and opposite flows")


@lru_cache(maxsize=2048)
def plan_contraction(a_legs: tuple[Leg, ...], a_charge: tuple[int, ...], axes_a: tuple[int, ...],
                     b_legs: tuple[Leg, ...], b_charge: tuple[int, ...], axes_b: tuple[int, ...]
                     ) -> ContractionPlan:
    """Plan the contraction of legs ``axes_a`` of A with legs ``axes_b`` of B (cached)."""
    _check_pairs(a_legs, axes_a, b_legs, axes_b)
    k = a_legs[0].nq
    free_a = tuple(i for i in range(len(a_legs)) if i not in axes_a)
    free_b = tuple(i for i in range(len(b_legs)) if i not in axes_b)
    fa = _fusion(tuple(a_legs[i] for i in free_a), k)
    fb = _fusion(tuple(b_legs[i] for i in free_b), k)
    fm = _fusion(tuple(a_legs[i] for i in axes_a), k)
    qa, qb = np.asarray(a_charge), np.asarray(b_charge)

    a_parts: dict[int, list[_Part]] = {}
    lay_a = layout(a_legs, a_charge)
    for bi, key in enumerate(lay_a.keys):
        rs, ro, rshape = fa.entries[tuple(key[i] for i in free_a)]
        ms, mo, mshape = fm.entries[tuple(key[i] for i in axes_a)]
        a_parts.setdefault(ms, []).append(_Part(bi, ro, mo, int(np.prod(rshape)), int(np.prod(mshape))))
    b_parts: dict[int, list[_Part]] = {}
    lay_b = layout(b_legs, b_charge)
    for bi, key in enumerate(lay_b.keys):
        ms, mo, mshape = fm.entries[tuple(key[i] for i in axes_b)]
        cs, co, cshape = fb.entries[tuple(key[i] for i in free_b)]
        b_parts.setdefault(ms, []).append(_Part(bi, mo, co, int(np.prod(mshape)), int(np.prod(cshape))))

    out_legs = tuple(a_legs[i] for i in free_a) + tuple(b_legs[i] for i in free_b)
    out_charge = tuple(int(c) for c in qa + qb)
    out_parts: dict[int, list[_Part]] = {}
    if out_legs:
        lay_o = layout(out_legs, out_charge)
        na = len(free_a)
        for bi, key in enumerate(lay_o.keys):
            rs, ro, rshape = fa.entries[key[:na]]
            cs, co, cshape = fb.entries[key[na:]]
            mid = fm.fused.index(tuple(qa - np.asarray(fa.fused.charges[rs])))
            out_parts.setdefault(mid, []).append(
                _Part(bi, ro, co, int(np.prod(rshape)), int(np.prod(cshape))))
    groups = []
    for ms in sorted(set(a_parts) & set(b_parts)):
        c = np.asarray(fm.fused.charges[ms])
        rs = fa.fused.index(tuple(qa - c))
        cs = fb.fused.index(tuple(qb + c))
        if rs < 0 or cs < 0:
            continue
        parts = tuple(out_parts.get(ms, ())) if out_legs else (_Part(0, 0, 0, 1, 1),)
        groups.append(_Group(fa.fused.sizes[rs], fm.fused.sizes[ms], fb.fused.sizes[cs],
                             tuple(a_parts[ms]), tuple(b_parts[ms]), parts))
    return ContractionPlan(out_legs, out_charge, free_a + tuple(axes_a), tuple(axes_b) + free_b,
                           tuple(groups))


def _pack(t: BlockTensor, parts, perm, nrow, ncol, dtype) -> np.ndarray:
    """Assemble one group matrix from the blocks of ``t`` (a view when a single block fills it)."""
    if len(parts) == 1 and parts[0].nrow == nrow and parts[0].ncol == ncol:
        return t.block(parts[0].block).transpose(perm).reshape(nrow, ncol)
    m = np.zeros((nrow, ncol), dtype=dtype)
    for p in parts:
        m[p.row:p.row + p.nrow, p.col:p.col + p.ncol] = t.block(p.block).transpose(perm).reshape(p.nrow, p.ncol)
    return m


def run_plan(plan: ContractionPlan, a: BlockTensor, b: BlockTensor):
    """Execute a contraction plan; returns a BlockTensor, or a scalar if no leg is left."""
    dtype = np.result_type(a.dtype, b.dtype)
    if not plan.out_legs:
        total = dtype.type(0)
        for g in plan.groups:
            am = _pack(a, g.a_parts, plan.perm_a, g.nrow, g.nmid, dtype)
            bm = _pack(b, g.b_parts, plan.perm_b, g.nmid, g.ncol, dtype)
            total += (am @ bm)[0, 0]
        return total
    out = BlockTensor(plan.out_legs, plan.out_charge, dtype=dtype)
    offs = out.layout.offsets
    for g in plan.groups:
        am = _pack(a, g.a_parts, plan.perm_a, g.nrow, g.nmid, dtype)
        bm = _pack(b, g.b_parts, plan.perm_b, g.nmid, g.ncol, dtype)
        if len(g.out_parts) == 1 and g.out_parts[0].nrow == g.nrow and g.out_parts[0].ncol == g.ncol:
            o = offs[g.out_parts[0].block]
            np.matmul(am, bm, out=out.data[o:o + g.nrow * g.ncol].reshape(g.nrow, g.ncol))
            continue
        cm = am @ bm
        for p in g.out_parts:
            o = offs[p.block]
            out.data[o:o + p.nrow * p.ncol] = cm[p.row:p.row + p.nrow, p.col:p.col + p.ncol].reshape(-1)
    return out


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
