"""Three-step chains planned in one compiled call (mps.blocks.chain_plan) against the same chains
planned step by step, array by array and bit by bit, and against dense numpy."""

from __future__ import annotations

from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from test_direct import _dense_chain, three_step_chains  # a sibling test module, imported by plain name

from mps.blocks import direct
from mps.blocks.chain import PlannedChain
from mps.blocks.chain_plan import plan_three_cached
from mps.blocks.charges import Leg, charge_bound
from mps.blocks.tensor import BlockTensor, layout
from mps.blocks.testing import assert_matches_dense

FAST = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])

PLACEMENT_ARRAYS = ("shapes", "offsets", "rows", "cols", "dest", "ld", "keys")


def _same_plans(p, q, unkept: str) -> None:
    """p (one call) equals q (step by step) except that p does not keep placement ``unkept``."""
    assert (p.out_legs, p.out_charge, p.flops, p.packed_size, p.sizes) == (
        q.out_legs, q.out_charge, q.flops, q.packed_size, q.sizes)
    np.testing.assert_array_equal(p.compiled, q.compiled)
    np.testing.assert_array_equal(p.large_array, q.large_array)
    assert getattr(p, unkept) is None and getattr(q, unkept) is not None
    for name in {"place_a", "place_b", "place_o"} - {unkept}:
        x, y = getattr(p, name), getattr(q, name)
        assert x.size == y.size
        for array in PLACEMENT_ARRAYS:
            np.testing.assert_array_equal(getattr(x, array), getattr(y, array))


@FAST
@given(case=three_step_chains())
def test_one_call_plans_equal_the_step_by_step_plans(case):
    """Every array of both contraction plans (but the two placements the direct step stands in
    for) and of the direct step is the one the step-by-step planner builds, so the chain's
    result is the same bit for bit (and dense numpy's)."""
    t, steps = case
    with mock.patch.object(direct, "DIRECT_REUSE", np.inf):
        assume(np.any(steps[1][0].data))
        asked = plan_three_cached.hits + plan_three_cached.misses
        layout.cache_clear()        # the result's layout is then the one the one-call planner built
        together = PlannedChain(t, steps)
        assert plan_three_cached.hits + plan_three_cached.misses == asked + 1
        built = layout(together.out_legs, together.out_charge)
        layout.cache_clear()
        fresh = layout(together.out_legs, together.out_charge)
        assert built is not fresh and built.bound == fresh.bound == charge_bound(together.out_legs)
        np.testing.assert_array_equal(built.key_array, fresh.key_array)
        apart = PlannedChain(t, steps, together=False)
    assert together.plans[0] is not apart.plans[0]
    assert 1 in together.directs and 1 in apart.directs
    # the direct step reads step 0's products and writes step 2's packing by its own tasks
    _same_plans(together.plans[0], apart.plans[0], "place_o")
    _same_plans(together.plans[2], apart.plans[2], "place_a" if together.first[2] else "place_b")
    a, b = together.directs[1], apart.directs[1]
    assert (a.out_legs, a.out_charge, a.flops) == (b.out_legs, b.out_charge, b.flops)
    for name in ("tasks", "values", "zeros"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert together.flops == apart.flops
    out = together(t.data)
    np.testing.assert_array_equal(out, apart(t.data))
    expected = _dense_chain(t, steps)
    assume(np.ndim(expected) > 0)
    assert_matches_dense(BlockTensor(together.out_legs, together.out_charge, out.astype(together.dtype)),
                         expected, atol=1e-11)


def test_large_charges_fall_back_to_planning_step_by_step():
    """When the charges of all four tensors together could overflow the compiled charge keys
    (2^20), the chain is planned step by step; each intermediate alone fits, so the result is
    still right."""
    big = 150_000
    leg = Leg.make([-big, 0, big], [1, 2, 1], 1)
    rng = np.random.default_rng(4)
    t = BlockTensor.random((leg, leg, leg.dual()), None, rng=rng)
    a = BlockTensor.random((leg, leg, leg.dual()), None, rng=rng)             # contracts T's leg 0
    x_legs = (leg, leg, leg, leg.dual())                                       # (a0, a1, t1, t2)
    c = BlockTensor.random((x_legs[3].dual(), leg.dual()), None, rng=rng)      # contracts x's leg 3
    b = BlockTensor.random((leg.dual(), leg.dual(), leg, leg.dual()), None, rng=rng)  # y's legs 0, 1
    steps = [(a, (0,), (2,), False), (c, (3,), (0,), True), (b, (0, 1), (0, 1), True)]
    before = plan_three_cached.misses
    chain = PlannedChain(t, steps)
    assert plan_three_cached.misses == before + 1            # asked, and declined
    assert 1 in chain.directs
    expected = _dense_chain(t, steps)
    assert_matches_dense(BlockTensor(chain.out_legs, chain.out_charge, chain(t.data)), expected, atol=1e-11)


def test_chain_plans_are_reused_by_structure():
    """The same chain on a new tensor of the same structure plans nothing."""
    from mps.pipeline.bench import effective_problem

    left, pair, right, theta = effective_problem(16, np.random.default_rng(5))
    steps = [(left, (0,), (1,), False), (pair, (1, 2, 3), (0, 1, 2), True), (right, (4, 1), (2, 1), True)]
    first = PlannedChain(theta, steps)
    hits, misses = plan_three_cached.hits, plan_three_cached.misses
    again = PlannedChain(BlockTensor.random(theta.legs, theta.charge, rng=9), steps)
    assert (plan_three_cached.hits, plan_three_cached.misses) == (hits + 1, misses)
    assert again.plans[0] is first.plans[0] and again.directs[1] is first.directs[1]


def test_a_mismatched_leg_is_named_by_its_tensor():
    """A chain whose contracted legs do not match is refused, naming the tensor and leg."""
    from mps.pipeline.bench import effective_problem

    left, pair, right, theta = effective_problem(16, np.random.default_rng(5))
    steps = [(left, (0,), (1,), False), (pair, (1, 2, 3), (0, 1, 2), True), (right, (4, 1), (2, 0), True)]
    with pytest.raises(ValueError, match="leg 3 of the running tensor does not match leg 0 of constant 2"):
        PlannedChain(theta, steps)
