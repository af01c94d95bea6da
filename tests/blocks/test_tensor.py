"""Block-sparse tensors (mps.blocks.tensor) against dense numpy, and the invariant checker (mps.blocks.testing)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import Leg
from mps.blocks.tensor import BlockTensor, _build_layout
from mps.blocks.testing import allowed_mask, assert_matches_dense, check_invariants, tensor_strategy

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
TOL = 1e-12

tensors = tensor_strategy()


@st.composite
def tensor_pairs(draw):
    """Two random tensors with the same legs and total charge (possibly different dtypes)."""
    a = draw(tensors)
    seed = draw(st.integers(0, 2**32 - 1))
    dtype = draw(st.sampled_from([np.float64, np.complex128]))
    return a, BlockTensor.random(a.legs, a.charge, rng=seed, dtype=dtype)


def random_dense(shape, dtype, rng) -> np.ndarray:
    x = rng.standard_normal(shape)
    if np.issubdtype(dtype, np.complexfloating):
        x = x + 1j * rng.standard_normal(shape)
    return x


# --- construction -------------------------------------------------------------------------------

@FAST
@given(t=tensors)
def test_random_respects_invariants_and_fills_every_allowed_entry(t):
    check_invariants(t)
    dense = t.to_dense()
    assert_matches_dense(t, dense)
    mask = allowed_mask(t.legs, t.charge)
    assert np.count_nonzero(mask) == t.data.size  # stored entries are exactly the allowed ones
    assert np.all(dense[mask] != 0)


@FAST
@given(t=tensors)
def test_zeros_respect_invariants(t):
    z = BlockTensor.zeros(t.legs, t.charge, dtype=t.dtype)
    assert z.dtype == t.dtype
    assert_matches_dense(z, np.zeros(t.shape))


@FAST
@given(t=tensors, seed=st.integers(0, 2**32 - 1))
def test_from_dense_to_dense_round_trip(t, seed):
    """Project an arbitrary dense array on the allowed entries, cut it into blocks, glue it back."""
    mask = allowed_mask(t.legs, t.charge)
    dense = np.where(mask, random_dense(t.shape, t.dtype, np.random.default_rng(seed)), 0)
    b = BlockTensor.from_dense(dense, t.legs, t.charge)
    assert_matches_dense(b, dense)
    np.testing.assert_allclose(b.to_dense(), dense, rtol=0, atol=TOL)
    again = BlockTensor.from_dense(b.to_dense(), b.legs, b.charge)
    np.testing.assert_array_equal(again.data, b.data)


@FAST
@given(t=tensors, data=st.data())
def test_from_dense_refuses_a_forbidden_nonzero_entry(t, data):
    mask = allowed_mask(t.legs, t.charge)
    forbidden = np.argwhere(~mask)
    assume(forbidden.shape[0] > 0)
    where = tuple(forbidden[data.draw(st.integers(0, forbidden.shape[0] - 1))])
    dense = t.to_dense()
    dense[where] = 0.5
    with pytest.raises(ValueError, match=r"breaks charge conservation") as err:
        BlockTensor.from_dense(dense, t.legs, t.charge)
    assert str(tuple(int(i) for i in where)) in str(err.value)
    # below the tolerance the entry is ignored
    dense[where] = 1e-14
    assert_matches_dense(BlockTensor.from_dense(dense, t.legs, t.charge), np.where(mask, dense, 0))


def test_from_dense_refuses_wrong_shape():
    leg = Leg.make([0, 1], [1, 2], 1)
    with pytest.raises(ValueError, match="does not match leg dimensions"):
        BlockTensor.from_dense(np.zeros((3, 2)), (leg, leg.dual()), (0,))


def test_flat_data_of_wrong_length_is_refused():
    leg = Leg.make([0, 1], [1, 2], 1)
    with pytest.raises(ValueError, match="flat data"):
        BlockTensor((leg, leg.dual()), (0,), data=np.zeros(4))


def test_legs_with_different_charge_counts_are_refused():
    with pytest.raises(ValueError, match="same number of charges"):
        BlockTensor((Leg.make([0], [1], 1), Leg.make([(0, 0)], [1], 1)), (0,))


def test_no_allowed_block_gives_an_empty_tensor():
    legs = (Leg.make([0, 1], [2, 1], 1), Leg.make([0, 1], [1, 3], -1))
    t = BlockTensor.random(legs, (5,), rng=0)
    assert t.data.size == 0 and t.layout.nblocks == 0 and t.norm() == 0.0
    assert_matches_dense(t, np.zeros((3, 4)))


# --- the checker itself -------------------------------------------------------------------------

def test_invariant_checker_catches_corruption():
    legs = (Leg.make([0, 1], [1, 2], 1), Leg.make([0, 1], [2, 1], -1))
    t = BlockTensor.random(legs, (0,), rng=3)
    check_invariants(t)
    bad = BlockTensor.random(legs, (0,), rng=3)
    bad.data = np.concatenate([bad.data, [1.0]])
    with pytest.raises(AssertionError, match="flat data"):
        check_invariants(bad)
    dense = t.to_dense()
    dense[0, 2] = 1.0  # sector (0, 1): charge 0 - 1 != 0
    with pytest.raises(AssertionError, match="conservation forbids"):
        assert_matches_dense(t, dense)
    dense = t.to_dense()
    dense[0, 0] += 1e-9
    with pytest.raises(AssertionError, match="differs from the dense array"):
        assert_matches_dense(t, dense)


def _with_layout(t: BlockTensor, keys, shapes) -> BlockTensor:
    """A copy of ``t`` whose layout lists ``keys`` and ``shapes`` (data resized to match)."""
    sizes = [int(np.prod(shape)) for shape in shapes]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    bad = t.copy()
    nlegs = t.ndim
    bad.layout = dataclasses.replace(t.layout, key_array=np.array(keys, dtype=np.int64).reshape(-1, nlegs),
                                     shape_array=np.array(shapes, dtype=np.int64).reshape(-1, nlegs),
                                     offsets=offsets)
    bad.data = np.zeros(int(offsets[-1]))
    return bad


def test_invariant_checker_catches_a_broken_layout():
    leg = Leg.make([0, 1, 2], [1, 2, 2], 1)
    t = BlockTensor.random((leg, leg.dual()), (0,), rng=4)
    keys, shapes = list(t.layout.keys), list(t.layout.shapes)
    assert keys == [(0, 0), (1, 1), (2, 2)]
    cases = {
        "strictly increasing": (keys[::-1], shapes[::-1]),
        "breaking conservation": (keys[:2] + [(2, 1), (2, 2)], shapes[:2] + [(2, 2), (2, 2)]),
        "missing": (keys[:2], shapes[:2]),
        "has shape": (keys, [(1, 1), (2, 1), (2, 2)]),
    }
    for message, (k, sh) in cases.items():
        with pytest.raises(AssertionError, match=message):
            check_invariants(_with_layout(t, k, sh))


# --- algebra ------------------------------------------------------------------------------------

@FAST
@given(t=tensors, data=st.data())
def test_transpose_matches_numpy(t, data):
    perm = data.draw(st.permutations(range(t.ndim)))
    out = t.transpose(perm)
    assert out.legs == tuple(t.legs[p] for p in perm)
    assert_matches_dense(out, np.transpose(t.to_dense(), perm), atol=0)


def test_transpose_refuses_a_non_permutation():
    t = BlockTensor.random((Leg.make([0], [2], 1), Leg.make([0], [2], -1)), (0,), rng=0)
    with pytest.raises(ValueError, match="not a permutation"):
        t.transpose((0, 0))


@FAST
@given(t=tensors)
def test_conj_flips_flows_negates_charge_and_matches_dense(t):
    c = t.conj()
    assert [leg.flow for leg in c.legs] == [-leg.flow for leg in t.legs]
    assert c.charge == tuple(-q for q in t.charge)
    assert all(a.is_dual_of(b) for a, b in zip(c.legs, t.legs))
    assert_matches_dense(c, np.conj(t.to_dense()), atol=0)
    # the carried-over layout is the one a search for the conjugate's structure finds
    fresh = _build_layout(c.legs, c.charge)
    for name in ("key_array", "shape_array", "offsets"):
        np.testing.assert_array_equal(getattr(c.layout, name), getattr(fresh, name))
    for mine, searched in zip(c.layout.packed, fresh.packed):
        np.testing.assert_array_equal(mine, searched)


@FAST
@given(pair=tensor_pairs(), alpha=st.complex_numbers(max_magnitude=3, allow_nan=False, allow_infinity=False),
       beta=st.floats(0.1, 3) | st.floats(-3, -0.1))
def test_linear_algebra_matches_dense(pair, alpha, beta):
    a, b = pair
    da, db = a.to_dense(), b.to_dense()
    assert_matches_dense(a + b, da + db)
    assert_matches_dense(a - b, da - db)
    assert_matches_dense(-a, -da, atol=0)
    assert_matches_dense(a * alpha, da * alpha)
    assert_matches_dense(alpha * a, alpha * da)
    assert_matches_dense(a * beta, da * beta)
    assert_matches_dense(a / beta, da / beta)
    assert_matches_dense(a.copy(), da, atol=0)
    assert_matches_dense(a.astype(np.complex128), da.astype(np.complex128), atol=0)


@FAST
@given(pair=tensor_pairs())
def test_norm_and_inner_match_numpy(pair):
    a, b = pair
    da, db = a.to_dense(), b.to_dense()
    assert abs(a.norm() - np.linalg.norm(da.ravel())) <= TOL * max(1.0, np.linalg.norm(da.ravel()))
    scale = max(1.0, np.linalg.norm(da.ravel()) * np.linalg.norm(db.ravel()))
    assert abs(a.inner(b) - np.vdot(da, db)) <= TOL * scale
    assert abs(b.inner(a) - np.conj(a.inner(b))) <= TOL * scale


def test_copy_does_not_share_data():
    t = BlockTensor.random((Leg.make([0, 1], [2, 1], 1), Leg.make([0, 1], [2, 1], -1)), (0,), rng=1)
    c = t.copy()
    c.data[:] = 0
    assert t.norm() > 0


def test_mismatched_structures_are_refused():
    leg = Leg.make([0, 1], [2, 1], 1)
    a = BlockTensor.random((leg, leg.dual()), (0,), rng=0)
    other_legs = BlockTensor.random((leg, Leg.make([0, 1], [2, 2], -1)), (0,), rng=0)
    other_charge = BlockTensor.random((leg, leg.dual()), (1,), rng=0)
    other_flow = BlockTensor.random((leg, leg), (1,), rng=0)
    for b in (other_legs, other_charge, other_flow):
        for op in (lambda x, y: x + y, lambda x, y: x - y, lambda x, y: x.inner(y)):
            with pytest.raises(ValueError, match="different legs or total charge"):
                op(a, b)
    with pytest.raises(TypeError, match="scalar"):
        a * a


def test_layout_cache_survives_threads_evicting_each_others_entries():
    """Dask workers run scan points in threads of one process, which share the layout cache: with
    a cache far smaller than the structures in use, two threads looking up and evicting the same
    entries get correct layouts and no error (an entry evicted between a hit and its recency
    update is not an error)."""
    import threading

    from mps.blocks.tensor import _build_layout, _LayoutCache

    cache = _LayoutCache(2)
    legs = [(Leg.make([0, 1, 2], [1, n, 2], 1), Leg.make([0, 1, 2], [2, 1, n], -1)) for n in range(1, 7)]
    expected = [_build_layout(x, (0,)).offsets for x in legs]
    errors = []

    def work(shift):
        try:
            for i in range(3000):
                k = (i + shift) % len(legs)
                if not np.array_equal(cache(legs[k], (0,)).offsets, expected[k]):
                    errors.append(f"wrong layout for structure {k}")
        except Exception as exc:   # noqa: BLE001 - any error in a thread is the failure we look for
            errors.append(repr(exc))

    threads = [threading.Thread(target=work, args=(s,)) for s in (0, 3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert len(cache.items) <= 3
