"""Planned pairwise contraction (mps.blocks.contract) against np.tensordot on random charge structures."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import Leg, charge_bound
from mps.blocks.contract import (
    COMPILED_GEMM,
    SMALL_GEMM,
    contract,
    pair_plans,
    plan_contraction,
    plan_pair,
    run_plan,
)
from mps.blocks.gemm_kernel import group_products
from mps.blocks.tensor import BlockTensor, layout
from mps.blocks.testing import assert_matches_dense, charge_pool_strategy, leg_strategy, total_charge_strategy

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
TOL = 1e-12
MAX_DENSE = 4000


def _combined(legs, sectors) -> tuple[int, ...]:
    """sum_i f_i q_i for one chosen sector per leg."""
    return tuple(int(c) for c in sum(x.flow * x.charge_array[s] for x, s in zip(legs, sectors)))


@st.composite
def contraction_pairs(draw, min_shared=0, max_shared=3, max_free=3, full=False):
    """Random A, B and matching axes: ``nshared`` legs of A are contracted with their duals on B,
    both tensors' legs shuffled, the pairs listed in a random order.

    With ``full`` B consists of the duals of all legs of A (contraction to a scalar).
    """
    k = draw(st.sampled_from([1, 2, 3]))
    pool = draw(charge_pool_strategy(k))
    leg = leg_strategy(k, pool=pool)
    nshared = draw(st.integers(min_shared, max_shared))
    shared = [draw(leg) for _ in range(nshared)]
    nfa = 0 if full else draw(st.integers(0 if nshared else 1, max_free))
    nfb = 0 if full else draw(st.integers(0 if nshared else 1, max_free))
    free_a = [draw(leg) for _ in range(nfa)]
    free_b = [draw(leg) for _ in range(nfb)]
    raw_a = free_a + shared
    raw_b = free_b + [x.dual() for x in shared]
    order_a = draw(st.permutations(range(len(raw_a))))
    order_b = draw(st.permutations(range(len(raw_b))))
    legs_a = tuple(raw_a[i] for i in order_a)
    legs_b = tuple(raw_b[i] for i in order_b)
    for legs in (legs_a, legs_b):
        assume(int(np.prod([x.dim for x in legs])) <= MAX_DENSE)
    pairs = draw(st.permutations(range(nshared)))
    axes_a = tuple(order_a.index(nfa + j) for j in pairs)
    axes_b = tuple(order_b.index(nfb + j) for j in pairs)
    if draw(st.integers(0, 3)):  # mostly: charges met by one common choice of sectors
        pa, ps, pb = ([draw(st.sampled_from([i for i, n in enumerate(x.sizes) if n] or [0]))
                       for x in group] for group in (free_a, shared, free_b))
        qa = _combined(raw_a, pa + ps)
        qb = _combined(raw_b, pb + ps)
    else:  # independent charges: few or no groups
        qa = draw(total_charge_strategy(legs_a))
        qb = draw(total_charge_strategy(legs_b))
    dtypes = st.sampled_from([np.float64, np.complex128])
    da, db = draw(dtypes), draw(dtypes)
    a = BlockTensor.random(legs_a, qa, rng=draw(st.integers(0, 2**32 - 1)), dtype=da)
    b = BlockTensor.random(legs_b, qb, rng=draw(st.integers(0, 2**32 - 1)), dtype=db)
    return a, b, axes_a, axes_b


def check_against_tensordot(a, b, axes_a, axes_b):
    result = contract(a, b, axes_a, axes_b)
    expected = np.tensordot(a.to_dense(), b.to_dense(), axes=(list(axes_a), list(axes_b)))
    if isinstance(result, BlockTensor):
        free_a = [i for i in range(a.ndim) if i not in axes_a]
        free_b = [i for i in range(b.ndim) if i not in axes_b]
        assert result.legs == tuple(a.legs[i] for i in free_a) + tuple(b.legs[i] for i in free_b)
        assert result.charge == tuple(x + y for x, y in zip(a.charge, b.charge))
        assert result.dtype == np.result_type(a.dtype, b.dtype)
        assert_matches_dense(result, expected, atol=TOL)
    else:
        assert np.ndim(expected) == 0 and len(axes_a) == a.ndim and len(axes_b) == b.ndim
        assert abs(result - expected) <= TOL
    return result


@FAST
@given(pair=contraction_pairs())
def test_contract_matches_tensordot(pair):
    """0..3 contracted legs at arbitrary positions, listed in arbitrary order."""
    check_against_tensordot(*pair)


@FAST
@given(pair=contraction_pairs(min_shared=1, max_shared=4, full=True))
def test_full_contraction_gives_the_scalar_of_tensordot(pair):
    a, b, axes_a, axes_b = pair
    result = check_against_tensordot(a, b, axes_a, axes_b)
    assert not isinstance(result, BlockTensor)


@FAST
@given(pair=contraction_pairs(min_shared=0, max_shared=0))
def test_outer_product_matches_numpy(pair):
    a, b, _, _ = pair
    result = check_against_tensordot(a, b, (), ())
    assert_matches_dense(result, np.multiply.outer(a.to_dense(), b.to_dense()), atol=TOL)


@FAST
@given(pair=contraction_pairs(min_shared=1, max_shared=4, full=True))
def test_contracting_with_the_conjugate_gives_the_squared_norm(pair):
    a = pair[0]
    axes = tuple(range(a.ndim))
    value = contract(a.conj(), a, axes, axes)
    assert abs(value - a.norm() ** 2) <= TOL * max(1.0, a.norm() ** 2)


@FAST
@given(pair=contraction_pairs(min_shared=1))
def test_plans_keyed_by_layout_identity_equal_the_plans_keyed_by_legs(pair):
    """plan_pair (cached by the identities of the operands' layouts) builds the plan
    plan_contraction builds, meets it again for a new tensor of the same structure, and runs to
    the same result bit for bit."""
    a, b, axes_a, axes_b = pair
    assume(len(axes_a) < a.ndim or len(axes_b) < b.ndim)
    p = plan_pair(a, b, axes_a, axes_b)
    q = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    assert (p.out_legs, p.out_charge, p.flops, p.packed_size, p.sizes) == (q.out_legs, q.out_charge, q.flops,
                                                                         q.packed_size, q.sizes)
    for x, y in ((p.place_a, q.place_a), (p.place_b, q.place_b), (p.place_o, q.place_o)):
        for name in ("dest", "ld", "keys", "shapes"):
            np.testing.assert_array_equal(getattr(x, name), getattr(y, name))
    hits = pair_plans.hits
    again = BlockTensor.random(a.legs, a.charge, rng=1)
    assert plan_pair(again, b, axes_a, axes_b) is p and pair_plans.hits == hits + 1
    np.testing.assert_array_equal(run_plan(p, again, b).data, run_plan(q, again, b).data)


@given(pair=contraction_pairs(min_shared=1))
def test_a_result_layout_from_the_planner_carries_its_legs_charge_bound(pair):
    """The compiled planner builds the result's layout and its charge bound from packed legs;
    both equal what the layout cache builds from the legs themselves."""
    a, b, axes_a, axes_b = pair
    assume(len(axes_a) < a.ndim or len(axes_b) < b.ndim)
    plan_contraction.cache_clear()
    layout.cache_clear()
    plan = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    lay = layout(plan.out_legs, plan.out_charge)
    layout.cache_clear()
    fresh = layout(plan.out_legs, plan.out_charge)
    assert lay is not fresh and lay.bound == fresh.bound == charge_bound(plan.out_legs)
    for name in ("key_array", "shape_array", "offsets"):
        np.testing.assert_array_equal(getattr(lay, name), getattr(fresh, name))


@FAST
@given(pair=contraction_pairs(min_shared=1), seed=st.integers(0, 2**32 - 1))
def test_plan_is_cached_and_reusable_with_new_data(pair, seed):
    a, b, axes_a, axes_b = pair
    plan = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    assert plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b) is plan
    hits = plan_contraction.cache_info().hits
    contract(a, b, axes_a, axes_b)
    assert plan_contraction.cache_info().hits == hits + 1
    a2 = BlockTensor.random(a.legs, a.charge, rng=seed, dtype=np.complex128)
    expected = np.tensordot(a2.to_dense(), b.to_dense(), axes=(list(axes_a), list(axes_b)))
    result = run_plan(plan, a2, b)
    if isinstance(result, BlockTensor):
        assert_matches_dense(result, expected, atol=TOL)
    else:
        assert abs(result - expected) <= TOL


def _charge_counts(legs, k: int) -> dict[tuple[int, ...], int]:
    """Number of dense states of the product of ``legs`` for each combined charge sum_i f_i q_i
    (no legs: one state of charge zero)."""
    total = np.zeros((1, k), dtype=np.int64)
    for leg in legs:
        total = (total[:, None, :] + leg.flow * leg.state_charges()[None, :, :]).reshape(-1, k)
    uniq, counts = np.unique(total, axis=0, return_counts=True)
    return {tuple(int(c) for c in q): int(n) for q, n in zip(uniq, counts)}


@FAST
@given(pair=contraction_pairs(min_shared=1))
def test_plan_flops_count_one_gemm_per_charge_of_the_contracted_legs(pair):
    """flops = sum over middle charges c of 2 m k n, with k the number of contracted states of
    combined charge c, m (n) the number of free states of A (B) of combined charge Q_A - c
    (Q_B + c), counted state by state."""
    a, b, axes_a, axes_b = pair
    k = a.legs[0].nq
    mid = _charge_counts([a.legs[i] for i in axes_a], k)
    rows = _charge_counts([a.legs[i] for i in range(a.ndim) if i not in axes_a], k)
    cols = _charge_counts([b.legs[i] for i in range(b.ndim) if i not in axes_b], k)
    qa, qb = np.asarray(a.charge), np.asarray(b.charge)
    expected = 0
    for c, kk in mid.items():
        m = rows.get(tuple(int(x) for x in qa - c), 0)
        n = cols.get(tuple(int(x) for x in qb + c), 0)
        expected += 2 * m * kk * n
    plan = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    assert plan.flops == expected
    assert all(g.nrow * g.nmid * g.ncol > 0 for g in plan.groups)


# --- refusals -----------------------------------------------------------------------------------

LEG = Leg.make([0, 1], [2, 1], 1)
CASES = {
    "same flow": (LEG, LEG, "opposite flows"),
    "other sectors": (LEG, Leg.make([0, 2], [2, 1], -1), "same sectors"),
    "other sizes": (LEG, Leg.make([0, 1], [2, 2], -1), "same sectors"),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_mismatched_legs_are_refused(name):
    left, right, message = CASES[name]
    a = BlockTensor.random((LEG.dual(), left), (0,), rng=0)
    b = BlockTensor.random((right, LEG), (0,), rng=1)
    with pytest.raises(ValueError, match=message):
        contract(a, b, [1], [0])


def test_axis_lists_are_checked():
    a = BlockTensor.random((LEG, LEG.dual()), (0,), rng=0)
    b = BlockTensor.random((LEG, LEG.dual()), (0,), rng=1)
    with pytest.raises(ValueError, match="same number of axes"):
        contract(a, b, [0, 1], [1])
    with pytest.raises(ValueError, match="only once"):
        contract(a, b, [1, 1], [0, 0])


def test_negative_axes_count_from_the_end():
    a = BlockTensor.random((LEG, LEG, LEG.dual()), (1,), rng=0, dtype=np.complex128)
    b = BlockTensor.random((LEG, LEG.dual()), (0,), rng=1)
    result = contract(a, b, -1, 0)
    assert_matches_dense(result, np.tensordot(a.to_dense(), b.to_dense(), axes=([2], [0])))


# --- named structures with many charge groups -----------------------------------------------------

SPIN = Leg.make([-1, 1], [1, 1], 1)                      # 2 S^z of a spin 1/2
BOND = Leg.make([-2, -1, 0, 1, 2], [1, 3, 2, 3, 1], 1)   # a bond with five sectors
PAIR = Leg.make([(0, 0), (1, -1), (1, 1), (2, 0)], [1, 1, 1, 1], 1)  # (N, 2 S^z) of a spin-1/2 fermion
SITE = (BOND, SPIN, BOND.dual())
STRUCTURES = {
    # (legs of A, charge of A, legs of B, charge of B, axes of A, axes of B)
    "site tensor times bond matrix": (SITE, (0,), (BOND, BOND.dual()), (0,), (2,), (0,)),
    "two site tensors": (SITE, (0,), SITE, (0,), (2,), (0,)),
    "environment update": ((BOND.dual(), BOND, SPIN.dual()), (0,), SITE, (1,), (0, 2), (0, 1)),
    "two charges": ((PAIR, PAIR.dual(), PAIR), (1, 1), (PAIR.dual(), PAIR.dual(), PAIR), (-1, -1),
                    (2, 0), (0, 1)),
}


@pytest.mark.parametrize("name", sorted(STRUCTURES))
def test_named_structures_match_tensordot(name):
    legs_a, qa, legs_b, qb, axes_a, axes_b = STRUCTURES[name]
    a = BlockTensor.random(legs_a, qa, rng=11)
    b = BlockTensor.random(legs_b, qb, rng=12, dtype=np.complex128)
    plan = plan_contraction(a.legs, a.charge, axes_a, b.legs, b.charge, axes_b)
    assert len(plan.groups) >= 2
    check_against_tensordot(a, b, axes_a, axes_b)


# --- compiled group products ---------------------------------------------------------------------

@FAST
@given(shapes=st.lists(st.tuples(st.integers(0, 30), st.integers(0, 30), st.integers(0, 30)), min_size=1, max_size=5),
       complex_=st.booleans(), loop_limit=st.sampled_from([0, 100, SMALL_GEMM, 10**6]),
       seed=st.integers(0, 2**32 - 1))
def test_compiled_group_products_match_numpy_matmul(shapes, complex_, loop_limit, seed):
    """Loops below ``loop_limit`` multiply-adds, BLAS calls above, empty groups included."""
    rng = np.random.default_rng(seed)
    groups, pa, pb, pc = [], 0, 0, 0
    for nr, nm, nc in shapes:
        groups.append((nr, nm, nc, pa, pb, pc))
        pa, pb, pc = pa + nr * nm, pb + nm * nc, pc + nr * nc
    a = rng.standard_normal(pa) + (1j * rng.standard_normal(pa) if complex_ else 0)
    b = (rng.standard_normal(pb) + 0j) if complex_ else rng.standard_normal(pb)
    out = np.full(pc, np.nan, dtype=np.result_type(a, b))
    group_products(a, b, out, np.array(groups, dtype=np.int64).reshape(-1, 6), loop_limit)
    for nr, nm, nc, sa, sb, sc in groups:
        expected = a[sa:sa + nr * nm].reshape(nr, nm) @ b[sb:sb + nm * nc].reshape(nm, nc)
        np.testing.assert_allclose(out[sc:sc + nr * nc].reshape(nr, nc), expected, rtol=0, atol=1e-12)


def test_contraction_with_small_and_large_groups_matches_tensordot():
    """Sector sizes spread from 1 to 80, so some groups go to the compiled loop, some to BLAS
    from compiled code and some to numpy's matmul."""
    rng = np.random.default_rng(11)
    bond = Leg.make([-2, -1, 0, 1, 2], [1, 6, 80, 80, 1], 1)
    phys = Leg.make([-1, 1], [1, 1], 1)
    a = BlockTensor.random((bond, phys, bond.dual()), (0,), rng=rng)
    b = BlockTensor.random((bond, phys, bond.dual()), (0,), rng=rng)
    plan = plan_contraction(a.legs, a.charge, (2,), b.legs, b.charge, (0,))
    work = plan.compiled[:, 0] * plan.compiled[:, 1] * plan.compiled[:, 2]
    assert np.any(work <= SMALL_GEMM) and np.any(work > SMALL_GEMM) and len(plan.large)
    assert all(g.nrow * g.nmid * g.ncol > COMPILED_GEMM for g in plan.large)
    check_against_tensordot(a, b, (2,), (0,))
