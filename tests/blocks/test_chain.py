"""Planned chains (mps.blocks.chain) against tensordot and dense numpy on random charge
structures and on an effective-Hamiltonian structure (direct MPO steps: test_direct.py)."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, assume, given, settings
from test_contract import TOL, contraction_pairs  # a sibling test module, imported by plain name

from mps.blocks.chain import PlannedChain
from mps.blocks.tensor import BlockTensor
from mps.blocks.testing import assert_matches_dense

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FAST
@given(pair=contraction_pairs(min_shared=1))
def test_planned_chain_step_matches_contract_and_tensordot(pair):
    """A one-step chain with the running tensor first or second gives the contraction's data."""
    a, b, axes_a, axes_b = pair
    expected = np.tensordot(a.to_dense(), b.to_dense(), axes=(list(axes_a), list(axes_b)))
    assume(np.ndim(expected) > 0)
    for chain, data in ((PlannedChain(a, [(b, axes_a, axes_b, True)]), a.data),
                        (PlannedChain(b, [(a, axes_b, axes_a, False)]), b.data)):
        out = BlockTensor(chain.out_legs, chain.out_charge, chain(data).astype(np.result_type(a.dtype, b.dtype)))
        assert_matches_dense(out, expected, atol=TOL)


def test_three_step_chain_matches_dense_effective_hamiltonian():
    """Left environment -> two-site tensor -> merged MPO pair -> right environment, as a chain,
    against the same contraction in dense numpy."""
    from mps.pipeline.bench import dense_application, effective_problem

    left, pair, right, theta = effective_problem(12, np.random.default_rng(4))
    chain = PlannedChain(theta, [(left, (0,), (1,), False), (pair, (1, 2, 3), (0, 1, 2), True),
                                 (right, (1, 4), (1, 2), True)])
    out = BlockTensor(chain.out_legs, chain.out_charge, chain(theta.data))
    expected = dense_application(*[t.to_dense() for t in (left, pair, right, theta)])
    assert_matches_dense(out, expected, atol=1e-10)
