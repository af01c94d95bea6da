"""Per-sector SVD, QR, LQ and eigh (mps.blocks.decompose) against the dense decompositions of numpy.

The tensor is viewed as the matrix dense.transpose(rows + cols).reshape(R, C); the block
decompositions must reproduce it, and the truncated SVD must keep exactly what the dense SVD
ranks highest (Eckart-Young: the best rank-m approximation keeps the m largest singular values).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.decompose import choose_kept, eigh, lq, qr, scale_leg, svd
from mps.blocks.tensor import BlockTensor, _build_layout, layout
from mps.blocks.testing import assert_matches_dense, check_invariants, tensor_strategy

FAST = settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow])
TOL = 1e-12


@st.composite
def split_tensors(draw, max_legs=4):
    """A non-zero random tensor (some blocks possibly zero) and a split of its legs into non-empty
    row and column groups."""
    t = draw(tensor_strategy(min_legs=2, max_legs=max_legs, max_dense=3000))
    assume(t.data.size > 0)
    if t.layout.nblocks > 1 and draw(st.booleans()):  # some sectors exactly zero
        zero = draw(st.lists(st.integers(0, t.layout.nblocks - 1), max_size=t.layout.nblocks - 1))
        for i in zero:
            t.block(i)[...] = 0
    order = draw(st.permutations(range(t.ndim)))
    nrow = draw(st.integers(1, t.ndim - 1))
    return t, tuple(order[:nrow]), tuple(order[nrow:])


def as_dense_matrix(t: BlockTensor, rows, cols) -> np.ndarray:
    dense = t.to_dense().transpose(tuple(rows) + tuple(cols))
    nr = int(np.prod([t.shape[i] for i in rows]))
    return dense.reshape(nr, -1)


def grouped(t: BlockTensor, rows, cols) -> np.ndarray:
    return t.to_dense().transpose(tuple(rows) + tuple(cols))


def identity_on(leg: Leg) -> np.ndarray:
    return np.eye(leg.dim)


def left_gram(x: BlockTensor, axes) -> BlockTensor:
    """X^dagger X over ``axes`` (the remaining leg is the bond)."""
    return contract(x.conj(), x, axes, axes)


def check_svd(t, rows, cols, tr):
    """Structure, invariants and isometries of a Truncation of ``t``."""
    u, vh = tr.u, tr.vh
    check_invariants(u), check_invariants(vh)
    assert u.legs[:-1] == tuple(t.legs[i] for i in rows)
    assert vh.legs[1:] == tuple(t.legs[i] for i in cols)
    assert u.legs[-1].is_dual_of(vh.legs[0]) and tr.bond == u.legs[-1]
    assert u.charge == (0,) * len(t.charge) and vh.charge == t.charge
    assert [len(v) for v in tr.values] == list(tr.bond.sizes)
    for v in tr.values:
        assert np.all(np.diff(v) <= 0) and np.all(v > 0)
    nr = len(rows)
    assert_matches_dense(left_gram(u, tuple(range(nr))), identity_on(tr.bond), atol=TOL)
    ncol_axes = tuple(range(1, vh.ndim))
    assert_matches_dense(contract(vh, vh.conj(), ncol_axes, ncol_axes), identity_on(tr.bond), atol=TOL)


def product(u, values, vh):
    return contract(scale_leg(u, u.ndim - 1, values), vh, [u.ndim - 1], [0])


# --- SVD ----------------------------------------------------------------------------------------

@FAST
@given(case=split_tensors())
def test_svd_without_truncation_reconstructs_with_isometric_factors(case):
    t, rows, cols = case
    tr = svd(t, rows, cols)
    check_svd(t, rows, cols, tr)
    assert_matches_dense(product(tr.u, tr.values, tr.vh), grouped(t, rows, cols), atol=TOL)
    assert tr.discarded <= TOL
    assert abs(tr.norm2 - t.norm() ** 2) <= TOL * max(1.0, tr.norm2)


@FAST
@given(case=split_tensors())
def test_singular_values_are_those_of_the_dense_matrix(case):
    t, rows, cols = case
    tr = svd(t, rows, cols)
    dense = np.linalg.svd(as_dense_matrix(t, rows, cols), compute_uv=False)
    kept = np.sort(np.concatenate(tr.values))[::-1]
    np.testing.assert_allclose(kept, dense[:kept.size], rtol=0, atol=TOL)
    assert np.all(dense[kept.size:] <= TOL)  # the rest of the dense spectrum is zero


@FAST
@given(case=split_tensors(), data=st.data())
def test_bond_cap_keeps_the_largest_dense_singular_values(case, data):
    t, rows, cols = case
    full = np.sort(np.concatenate(svd(t, rows, cols).values))[::-1]
    cap = data.draw(st.integers(1, full.size))
    tr = svd(t, rows, cols, max_bond=cap)
    check_svd(t, rows, cols, tr)
    dense = np.linalg.svd(as_dense_matrix(t, rows, cols), compute_uv=False)
    kept = np.sort(np.concatenate(tr.values))[::-1]
    assert kept.size == cap
    np.testing.assert_allclose(kept, dense[:cap], rtol=0, atol=TOL)
    w = dense**2
    assert abs(tr.discarded - w[cap:].sum() / w.sum()) <= TOL
    # Eckart-Young: the squared error of U S Vh is the discarded weight times the norm squared
    err = product(tr.u, tr.values, tr.vh).to_dense() - grouped(t, rows, cols)
    assert abs(np.linalg.norm(err.ravel()) ** 2 - tr.discarded * tr.norm2) <= TOL * max(1.0, tr.norm2)


@FAST
@given(case=split_tensors(), data=st.data())
def test_discard_threshold_keeps_the_fewest_values_within_the_threshold(case, data):
    t, rows, cols = case
    dense = np.linalg.svd(as_dense_matrix(t, rows, cols), compute_uv=False)
    rank = sum(len(v) for v in svd(t, rows, cols).values)
    w = dense**2 / np.sum(dense**2)
    tail = np.concatenate([np.cumsum(w[::-1])[::-1], [0.0]])  # tail[n]: weight dropped keeping n
    n = data.draw(st.integers(1, rank))
    assume(tail[n - 1] - tail[n] > 1e-9)
    threshold = 0.5 * (tail[n] + tail[n - 1])  # keeping n - 1 drops too much, keeping n is enough
    cap = data.draw(st.none() | st.integers(1, rank))
    tr = svd(t, rows, cols, max_bond=cap, discard=threshold)
    expect = n if cap is None else min(n, cap)
    kept = np.sort(np.concatenate(tr.values))[::-1]
    assert kept.size == expect
    np.testing.assert_allclose(kept, dense[:expect], rtol=0, atol=TOL)
    assert abs(tr.discarded - tail[expect]) <= TOL


def degenerate_tensor() -> BlockTensor:
    """Two sectors with identical blocks: singular values 3, 3, 1, 1 (each pair split over sectors)."""
    leg = Leg.make([0, 1], [2, 2], 1)
    rot = np.array([[np.cos(0.3), -np.sin(0.3)], [np.sin(0.3), np.cos(0.3)]])
    block = rot @ np.diag([3.0, 1.0]) @ rot.T
    dense = np.zeros((4, 4))
    dense[:2, :2] = block
    dense[2:, 2:] = block
    return BlockTensor.from_dense(dense, (leg, leg.dual()), (0,))


@pytest.mark.parametrize("cap, values", [(1, [3.0]), (2, [3.0, 3.0]), (3, [3.0, 3.0, 1.0]),
                                         (4, [3.0, 3.0, 1.0, 1.0])])
def test_bond_cap_inside_a_degenerate_multiplet_keeps_exactly_the_cap(cap, values):
    t = degenerate_tensor()
    tr = svd(t, (0,), (1,), max_bond=cap)
    check_svd(t, (0,), (1,), tr)
    kept = np.sort(np.concatenate(tr.values))[::-1]
    np.testing.assert_allclose(kept, values, rtol=0, atol=TOL)
    dropped = 20.0 - np.sum(np.square(values))
    assert abs(tr.discarded - dropped / 20.0) <= TOL


def test_choose_kept_breaks_exact_ties_by_the_cap():
    spectra = [np.array([2.0, 1.0]), np.array([2.0, 1.0]), np.array([2.0])]
    for cap in range(1, 6):
        kept = choose_kept(spectra, cap, 0.0)
        assert sum(kept) == cap
        chosen = np.sort(np.concatenate([s[:n] for s, n in zip(spectra, kept)]))[::-1]
        np.testing.assert_array_equal(chosen, np.sort(np.concatenate(spectra))[::-1][:cap])


def test_choose_kept_drops_values_below_the_floor_and_refuses_zero():
    assert choose_kept([np.array([1.0, 1e-9]), np.array([0.5, 0.0])], None, 0.0, 1e-6) == [1, 1]
    with pytest.raises(ValueError, match="zero"):
        choose_kept([np.array([0.0, 0.0])], None, 0.0)
    with pytest.raises(ValueError, match="zero"):
        svd(BlockTensor.zeros(degenerate_tensor().legs, (0,)), (0,), (1,))


def test_bad_axis_split_is_refused():
    t = degenerate_tensor()
    for rows, cols in [((0, 1), ()), ((0,), (0,)), ((), (0, 1))]:
        with pytest.raises(ValueError, match="two non-empty groups"):
            svd(t, rows, cols)


# --- QR and LQ ----------------------------------------------------------------------------------

@FAST
@given(case=split_tensors())
def test_qr_reconstructs_with_isometric_q(case):
    t, rows, cols = case
    q, r = qr(t, rows, cols)
    check_invariants(q), check_invariants(r)
    assert q.legs[:-1] == tuple(t.legs[i] for i in rows) and r.legs[1:] == tuple(t.legs[i] for i in cols)
    assert q.charge == (0,) * len(t.charge) and r.charge == t.charge
    assert_matches_dense(left_gram(q, tuple(range(len(rows)))), identity_on(q.legs[-1]), atol=TOL)
    assert_matches_dense(contract(q, r, [q.ndim - 1], [0]), grouped(t, rows, cols), atol=TOL)


@FAST
@given(case=split_tensors())
def test_lq_reconstructs_with_orthonormal_rows(case):
    t, rows, cols = case
    lo, q = lq(t, rows, cols)
    check_invariants(lo), check_invariants(q)
    assert lo.legs[:-1] == tuple(t.legs[i] for i in rows) and q.legs[1:] == tuple(t.legs[i] for i in cols)
    axes = tuple(range(1, q.ndim))
    assert_matches_dense(contract(q, q.conj(), axes, axes), identity_on(q.legs[0]), atol=TOL)
    assert_matches_dense(contract(lo, q, [lo.ndim - 1], [0]), grouped(t, rows, cols), atol=TOL)


# --- eigh ---------------------------------------------------------------------------------------

@st.composite
def hermitian_tensors(draw):
    """H = M + M^dagger for row legs R and column legs dual(R), legs shuffled; charge 0."""
    base = draw(tensor_strategy(min_legs=1, max_legs=2, max_dense=40))
    rows = base.legs
    legs = rows + tuple(leg.dual() for leg in rows)
    x = BlockTensor.random(legs, (0,) * rows[0].nq, rng=draw(st.integers(0, 2**32 - 1)), dtype=base.dtype)
    r = int(np.prod([leg.dim for leg in rows]))
    m = x.to_dense().reshape(r, r)
    h = BlockTensor.from_dense((m + m.conj().T).reshape(x.shape), legs, x.charge)
    assume(h.data.size > 0)
    order = draw(st.permutations(range(h.ndim)))
    h = h.transpose(order)
    n = len(rows)
    return h, tuple(order.index(i) for i in range(n)), tuple(order.index(n + i) for i in range(n))


@FAST
@given(case=hermitian_tensors())
def test_eigh_reconstructs_and_matches_dense_eigenvalues(case):
    h, rows, cols = case
    values, v, bond = eigh(h, rows, cols)
    check_invariants(v)
    assert v.legs[-1] == bond and v.legs[:-1] == tuple(h.legs[i] for i in rows)
    assert [len(w) for w in values] == list(bond.sizes)
    matrix = as_dense_matrix(h, rows, cols)
    np.testing.assert_allclose(np.sort(np.concatenate(values)), np.linalg.eigvalsh(matrix), rtol=0, atol=TOL)
    assert_matches_dense(left_gram(v, tuple(range(len(rows)))), identity_on(bond), atol=TOL)
    last = v.ndim - 1
    rebuilt = contract(scale_leg(v, last, values), v.conj(), [last], [last])
    assert_matches_dense(rebuilt, grouped(h, rows, cols), atol=TOL)


def test_eigh_refuses_non_square_sectors():
    t = BlockTensor.random((Leg.make([0], [2], 1), Leg.make([0], [3], -1)), (0,), rng=0)
    with pytest.raises(ValueError, match="square"):
        eigh(t, (0,), (1,))


@FAST
@given(case=split_tensors(), side=st.sampled_from(["left", "right"]))
def test_absorbed_values_are_normalised_and_multiplied_into_one_factor(case, side):
    """The form a sweep keeps: the normalised Schmidt values inside the factor the centre moves
    to, the other factor isometric."""
    t, rows, cols = case
    plain, tr = svd(t, rows, cols), svd(t, rows, cols, absorb=side)
    norm = np.sqrt(sum(float(np.sum(v**2)) for v in plain.values))
    for v, w in zip(plain.values, tr.values):
        np.testing.assert_allclose(w, v / norm, rtol=1e-14, atol=0)
    assert abs(sum(float(np.sum(v**2)) for v in tr.values) - 1) <= TOL
    rebuilt = contract(tr.u, tr.vh, [tr.u.ndim - 1], [0])
    assert_matches_dense(rebuilt, grouped(t, rows, cols) / norm, atol=TOL)
    iso = tr.vh if side == "left" else tr.u
    if side == "right":
        assert_matches_dense(left_gram(iso, tuple(range(len(rows)))), identity_on(tr.bond), atol=TOL)
    else:
        axes = tuple(range(1, iso.ndim))
        assert_matches_dense(contract(iso, iso.conj(), axes, axes), identity_on(tr.bond), atol=TOL)


def test_absorb_names_a_side():
    t = BlockTensor.random((Leg.make([0], [2], 1), Leg.make([0], [3], -1)), (0,), rng=0)
    with pytest.raises(ValueError, match="absorb"):
        svd(t, (0,), (1,), absorb="both")


# --- the factors' layouts ------------------------------------------------------------------------

@FAST
@given(case=split_tensors(), truncate=st.booleans())
def test_factor_layouts_are_those_a_search_finds(case, truncate):
    """The factors' layouts are assembled with their data, not searched for
    (:mod:`mps.blocks.factor_kernel`): with the layout cache empty they must be exactly the
    allowed blocks of their structures, in the same order."""
    t, rows, cols = case
    for factors in (lambda: (lambda tr: (tr.u, tr.vh))(svd(t, rows, cols, max_bond=2 if truncate else None)),
                    lambda: qr(t, rows, cols), lambda: lq(t, rows, cols)):
        layout.cache_clear()
        for f in factors():
            check_invariants(f)
            searched = _build_layout(f.legs, f.charge)
            for name in ("key_array", "shape_array", "offsets"):
                np.testing.assert_array_equal(getattr(f.layout, name), getattr(searched, name))
            for mine, found in zip(f.layout.packed, searched.packed):
                np.testing.assert_array_equal(mine, found)


# --- scale_leg ----------------------------------------------------------------------------------

@FAST
@given(t=tensor_strategy(max_dense=3000), data=st.data())
def test_scale_leg_is_dense_multiplication_along_the_leg(t, data):
    """Real or complex per-sector values; a real tensor scaled by complex values becomes complex."""
    axis = data.draw(st.integers(0, t.ndim - 1))
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    complex_values = data.draw(st.booleans())
    values = tuple(rng.standard_normal(n) + (1j * rng.standard_normal(n) if complex_values else 0)
                   for n in t.legs[axis].sizes)
    shape = [1] * t.ndim
    shape[axis] = t.shape[axis]
    expected = t.to_dense() * np.concatenate(values).reshape(shape)
    assert_matches_dense(scale_leg(t, axis, values), expected, atol=TOL)
