"""Planned chains: a running tensor contracted with a fixed sequence of constant tensors, the
form of the effective Hamiltonian and of the environment updates.

Every step is planned once (:mod:`mps.blocks.contract`; a whole three-step chain in one call:
:mod:`mps.blocks.chain_plan`), the constants are packed once, and
between steps the intermediate never becomes a block tensor: a compiled pass moves it from one
step's products into the next step's packing, or a sparse MPO step is applied entry by entry
on the way (:mod:`mps.blocks.direct`).
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from mps.blocks.chain_plan import plan_chain_of_three, plan_three_cached
from mps.blocks.contract import SMALL_GEMM, Placement, pair_plans, plan_contraction
from mps.blocks.direct import direct_legs, nonzero_entries, plan_direct, use_direct
from mps.blocks.gemm_kernel import group_products
from mps.blocks.kernels import pack_into, repack_blocks
from mps.blocks.plan_cache import PlanCache
from mps.blocks.tensor import BlockTensor


class PlannedChain:
    """A fixed sequence of contractions of a running tensor with constant tensors.

    ``steps`` are ``(constant, axes of the running tensor, axes of the constant, running_first)``;
    each step contracts the previous result with its constant (as the first operand of the
    contraction when ``running_first``). The constants are packed once, and between steps the
    result is never laid out as blocks: one compiled pass moves every block from its place among
    one step's products to its place in the next step's packing
    (:func:`mps.blocks.kernels.repack_blocks`). A middle step whose constant is small and sparse
    (an MPO tensor, :func:`mps.blocks.direct.use_direct`) is done entry by entry instead, from the
    previous step's products straight into the next step's packing (:mod:`mps.blocks.direct`).
    Used for the effective Hamiltonian, whose Krylov iterations repeat the same chain many times.

    The chains of a sweep (effective Hamiltonian, environment updates) are three steps with such
    a middle step; those are planned in one compiled call and cached as a whole
    (:mod:`mps.blocks.chain_plan`); ``together=False`` plans them step by step (the same plans;
    the tests compare the two).
    """

    def __init__(self, template: BlockTensor, steps, direct: bool = True, together: bool = True):
        steps = _normalised(template, steps)
        three = None
        if direct and together and len(steps) == 3 and steps[1][3]:
            entries = nonzero_entries(steps[1][0])
            if use_direct(steps[1][0], steps[1][2], entries):
                three = plan_chain_of_three(template, steps, entries)
        if three:           # the usual chains: planned in one compiled call (mps.blocks.chain_plan)
            self.plans, self.directs = [three.first, None, three.last], {1: three.direct}
            self.first = [steps[0][3], True, steps[2][3]]
        else:
            self.plans, self.first, self.directs = self._plan_steps(template, steps, direct)
        self.constants = [None if p is None else (p.place_b if f else p.place_a).pack(const.data)
                          for p, f, (const, *_) in zip(self.plans, self.first, steps)]
        self._out_place = self.plans[-1].place_o
        self.out_legs, self.out_charge = self.plans[-1].out_legs, self.plans[-1].out_charge
        self.running = [None if p is None else (p.place_a if f else p.place_b) for p, f in zip(self.plans, self.first)]
        self.dtype = np.result_type(template.dtype, *[c.dtype for c in self.constants if c is not None],
                                    *[d.values.dtype for d in self.directs.values()])
        # compiled products take operands of one dtype
        self.constants = [None if c is None else c.astype(self.dtype, copy=False) for c in self.constants]

        # work buffers, allocated once: fresh multi-megabyte arrays would cost page faults on
        # every application; the matrix views of every large group are cut once too
        self._packed_in = [None if p is None else np.empty(p.sizes[0 if f else 1], dtype=self.dtype)
                           for p, f in zip(self.plans, self.first)]
        self._products = [None if p is None else np.empty(p.packed_size + 1, dtype=self.dtype) for p in self.plans]
        self._bound = [None if p is None else self._bind(k) for k, p in enumerate(self.plans)]

    def _plan_steps(self, template: BlockTensor, steps, direct: bool):
        """(plans, running first, direct steps) planned step by step."""
        legs, charge = template.legs, template.charge
        plans, first, directs, pending = [], [], {}, {}
        for k, (const, ax_run, ax_const, run_first) in enumerate(steps):
            if (direct and run_first and 0 < k < len(steps) - 1 and plans[k - 1] is not None
                    and use_direct(const, ax_const)):
                out = direct_legs(legs, charge, ax_run, const, ax_const)
                pending[k] = (legs, charge, ax_run, const, ax_const, out)
                legs, charge = out
                plans.append(None)
                first.append(True)
                continue
            plan = (plan_contraction(legs, charge, ax_run, const.legs, const.charge, ax_const) if run_first
                    else plan_contraction(const.legs, const.charge, ax_const, legs, charge, ax_run))
            plans.append(plan)
            first.append(run_first)
            legs, charge = plan.out_legs, plan.out_charge
        for k, (x_legs, x_charge, ax_run, const, ax_const, out) in pending.items():
            nxt = plans[k + 1].place_a if first[k + 1] else plans[k + 1].place_b
            directs[k] = plan_direct_step(x_legs, x_charge, ax_run, const, ax_const, plans[k - 1].place_o, nxt, out)
        return plans, first, directs

    def _bind(self, k: int):
        """Operands, product buffer, the groups multiplied from compiled code and the (A, B, C)
        matrix views of every large group of step k, on the chain's fixed buffers."""
        plan, x, pc = self.plans[k], self._packed_in[k], self._products[k]
        a, b = (x, self.constants[k]) if self.first[k] else (self.constants[k], x)
        views = [(a[g.a_start:g.a_start + g.nrow * g.nmid].reshape(g.nrow, g.nmid),
                  b[g.b_start:g.b_start + g.nmid * g.ncol].reshape(g.nmid, g.ncol),
                  pc[g.c_start:g.c_start + g.nrow * g.ncol].reshape(g.nrow, g.ncol))
                 for g in (plan.large if len(plan.large_array) else ())]
        return a, b, pc, plan.compiled if len(plan.compiled) else None, views

    @cached_property
    def flops(self) -> int:
        """Real multiply-adds times two of one application."""
        return sum(p.flops for p in self.plans if p is not None) + sum(d.flops for d in self.directs.values())

    def __call__(self, data: np.ndarray) -> np.ndarray:
        """Flat data of the final result for the running tensor's flat ``data``."""
        data = np.asarray(data)
        if np.result_type(data.dtype, self.dtype) != self.dtype:
            data = data.astype(self.dtype)
        r = self.running[0]         # a real tensor meets complex constants: packing converts
        pack_into(data, r.shapes, r.offsets, r.rows, r.cols, r.dest, r.ld, self._packed_in[0])
        last = len(self.plans) - 1
        for k, bound in enumerate(self._bound):
            if bound is None:          # done by the previous step, straight into step k + 1's packing
                continue
            a, b, products, compiled, views = bound
            products[-1] = 0
            if compiled is not None:
                group_products(a, b, products, compiled, SMALL_GEMM)
            for va, vb, vc in views:
                np.matmul(va, vb, out=vc)
            plan = self.plans[k]
            if k == last:
                return self._out_place.unpack(products)
            if k + 1 in self.directs:
                self.directs[k + 1](products, self._packed_in[k + 2])
                continue
            o, n = plan.place_o, self.running[k + 1]
            repack_blocks(products, o.shapes, o.rows, o.cols, o.dest, o.ld, n.rows, n.cols, n.dest, n.ld,
                          self._packed_in[k + 1])
        raise AssertionError("a planned chain ends with a planned contraction")


def _normalised(template: BlockTensor, steps) -> list:
    """Steps with every axis as a tuple of non-negative ints (the running tensor's rank changes
    from step to step: each contraction leaves the free legs of both operands)."""
    out, rank = [], template.ndim
    for const, ax_run, ax_const, run_first in steps:
        ax_run = tuple(int(i) % rank for i in ax_run)
        ax_const = tuple(int(i) % const.ndim for i in ax_const)
        out.append((const, ax_run, ax_const, bool(run_first)))
        rank += const.ndim - 2 * len(ax_run)
    return out


plan_direct_cached = PlanCache(plan_direct, max_bytes=64 << 20)
"""Direct steps (:func:`mps.blocks.direct.plan_direct`), cached by structure, the constant's
entries and the two placements (which the cached step keeps alive, so their ids stay theirs)."""


def plan_direct_step(x_legs, x_charge, ax_run, const: BlockTensor, ax_const, src: Placement, dst: Placement,
                     out=None):
    """The direct step of ``const`` between two placements, cached. The placements fix both
    structures (they belong to cached plans of those structures) and the entries fix the
    constant, so their identities are the key; the cached step keeps all three alive, so an id
    never passes to another object while it is a key."""
    entries = nonzero_entries(const)
    key = (id(entries), ax_run, ax_const, id(src), id(dst))
    return plan_direct_cached.lookup(key, x_legs, x_charge, ax_run, const, ax_const, src, dst, out)


def planning_seconds() -> float:
    """Seconds spent building contraction plans and direct steps in this process."""
    return sum(c.build_seconds for c in (plan_contraction, pair_plans, plan_direct_cached, plan_three_cached))
