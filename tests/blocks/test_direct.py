"""Direct steps (mps.blocks.direct): a sparse constant applied entry by entry inside a planned
chain, against the same chain done by group GEMMs and against dense numpy on random charge
structures."""

from __future__ import annotations

from unittest import mock

import numpy as np
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from mps.blocks import direct
from mps.blocks.chain import PlannedChain
from mps.blocks.direct import nonzero_entries, use_direct
from mps.blocks.tensor import BlockTensor
from mps.blocks.testing import assert_matches_dense, charge_pool_strategy, leg_strategy, total_charge_strategy

FAST = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
MAX_DENSE = 3000


def _dense_ok(legs) -> bool:
    return int(np.prod([x.dim for x in legs], dtype=np.int64)) <= MAX_DENSE


@st.composite
def three_step_chains(draw):
    """A running tensor T and three constants: A contracts T's first leg (as the first or the
    second operand), C (the sparse middle constant) contracts 1-2 legs of the result, B contracts
    1-2 legs of that (first or second operand). Sparse C data (density 0.2 ... 1), real or
    complex, random total charges."""
    k = draw(st.sampled_from([1, 2]))
    pool = draw(charge_pool_strategy(k))
    leg = leg_strategy(k, pool=pool, max_sectors=3, max_size=3)
    t_legs = [draw(leg) for _ in range(draw(st.integers(2, 3)))]
    a_free = [draw(leg) for _ in range(draw(st.integers(1, 2)))]
    first0, first2 = draw(st.booleans()), draw(st.booleans())
    x_legs = t_legs[1:] + a_free if first0 else a_free + t_legs[1:]      # after step 0
    ncon = draw(st.integers(1, min(2, len(x_legs) - 1)))
    con = draw(st.permutations(range(len(x_legs))))[:ncon]
    c_free = [draw(leg) for _ in range(draw(st.integers(1, 2)))]
    c_legs = [x_legs[i].dual() for i in con] + c_free
    y_legs = [x for i, x in enumerate(x_legs) if i not in con] + c_free   # after step 1
    nb = draw(st.integers(1, min(2, len(y_legs) - 1)))
    b_con = draw(st.permutations(range(len(y_legs))))[:nb]
    b_free = [draw(leg) for _ in range(draw(st.integers(0, 1)))]
    b_legs = [y_legs[i].dual() for i in b_con] + b_free
    a_legs = a_free + [t_legs[0].dual()]
    for legs in (t_legs, a_legs, x_legs, c_legs, y_legs, b_legs):
        assume(_dense_ok(legs))
    dtype = draw(st.sampled_from([np.float64, np.complex128]))
    seeds = draw(st.lists(st.integers(0, 2**31), min_size=5, max_size=5))
    # mostly: total charges met by one choice of a non-empty sector on every leg, so that some
    # blocks meet through all three steps; sometimes independent charges (few or no blocks)
    witness = {id(x): draw(st.sampled_from([i for i, n in enumerate(x.sizes) if n] or [0]))
               for x in t_legs + a_free + c_free + b_free}

    def met(legs):
        pick = [witness.get(id(x), witness.get(id(_base(x, t_legs + a_free + c_free)), 0)) for x in legs]
        return tuple(int(q) for q in sum(x.flow * x.charge_array[i] for x, i in zip(legs, pick)))

    independent = draw(st.integers(0, 3)) == 0
    tensors = []
    for legs, seed in zip((t_legs, a_legs, c_legs, b_legs), seeds):
        charge = draw(total_charge_strategy(legs)) if independent else met(legs)
        tensors.append(BlockTensor.random(tuple(legs), charge, rng=seed, dtype=dtype))
    t, a, c, b = tensors
    density = draw(st.sampled_from([0.2, 0.5, 1.0, 1.0]))
    c.data[np.random.default_rng(seeds[4]).random(c.data.size) >= density] = 0
    steps = [(a, (0,), (len(a_legs) - 1,), first0),
             (c, tuple(con), tuple(range(ncon)), True),
             (b, tuple(b_con), tuple(range(nb)), first2)]
    return t, steps


def _base(leg, originals):
    """The original leg whose dual ``leg`` is (legs contracted with a constant are duals)."""
    return next((x for x in originals if x.is_dual_of(leg)), leg)


def _dense_chain(t, steps):
    x = t.to_dense()
    for const, ax_run, ax_const, run_first in steps:
        if run_first:
            x = np.tensordot(x, const.to_dense(), axes=(list(ax_run), list(ax_const)))
        else:
            x = np.tensordot(const.to_dense(), x, axes=(list(ax_const), list(ax_run)))
    return x


@FAST
@given(case=three_step_chains())
def test_direct_step_matches_gemm_chain_and_dense(case):
    """With every sparse middle constant forced onto the direct path, the chain gives the GEMM
    chain's result and dense numpy's, whether or not every slab of the result is reached."""
    t, steps = case
    with mock.patch.object(direct, "DIRECT_REUSE", np.inf):
        fast = PlannedChain(t, steps)
    slow = PlannedChain(t, steps, direct=False)
    assert not slow.directs
    assert (1 in fast.directs) == bool(np.any(steps[1][0].data))
    expected = _dense_chain(t, steps)
    assume(np.ndim(expected) > 0)
    for chain in (fast, slow):
        out = BlockTensor(chain.out_legs, chain.out_charge, chain(t.data).astype(chain.dtype))
        assert_matches_dense(out, expected, atol=1e-11)
    np.testing.assert_allclose(fast(t.data), slow(t.data), rtol=0, atol=1e-11)


@FAST
@given(case=three_step_chains())
def test_nonzero_entries_rebuild_the_constant(case):
    """Sector indices, in-sector offsets and values of the non-zero entries give back the dense
    constant entry by entry."""
    c = case[1][1][0]
    keys, offs, values, _ = nonzero_entries(c)
    dense = np.zeros(c.shape, dtype=c.dtype)
    for key, off, v in zip(keys, offs, values):
        idx = tuple(int(c.legs[i].offsets[s]) + int(o) for i, (s, o) in enumerate(zip(key, off)))
        dense[idx] = v
    np.testing.assert_array_equal(dense, c.to_dense())
    assert len(values) == np.count_nonzero(c.data)


def test_direct_flops_count_the_axpys_only():
    """The direct step's FLOPs are two per multiply-add of its AXPYs: fewer than the GEMM path's
    on an MPO pair, which multiplies the pair's zeros too."""
    from mps.pipeline.bench import effective_problem

    left, pair, right, theta = effective_problem(24, np.random.default_rng(2))
    steps = [(left, (0,), (1,), False), (pair, (1, 2, 3), (0, 1, 2), True), (right, (1, 4), (1, 2), True)]
    fast, slow = PlannedChain(theta, steps), PlannedChain(theta, steps, direct=False)
    step = fast.directs[1]
    nf = (step.tasks.shape[1] - 3) // 3
    assert step.flops == 2 * int(np.prod(step.tasks[:, 3:3 + nf], axis=1).sum())
    assert fast.flops - step.flops == slow.plans[0].flops + slow.plans[2].flops
    assert step.flops < slow.plans[1].flops
    np.testing.assert_allclose(fast(theta.data), slow(theta.data), rtol=0, atol=1e-12)


def test_dense_constants_stay_on_the_gemm_path():
    """A constant with many non-zero entries per contracted index (each entry of X would be read
    many times) is left to the group GEMM."""
    from mps.pipeline.bench import effective_problem

    left, pair, right, theta = effective_problem(12, np.random.default_rng(3))
    dense_pair = BlockTensor.random(pair.legs, pair.charge, rng=1)
    assert use_direct(pair, (0, 1, 2))
    assert not use_direct(dense_pair, (0, 1, 2))
    chain = PlannedChain(theta, [(left, (0,), (1,), False), (dense_pair, (1, 2, 3), (0, 1, 2), True),
                                 (right, (1, 4), (1, 2), True)])
    assert not chain.directs
