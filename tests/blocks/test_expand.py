"""Widened truncated SVD (mps.blocks.expand) against dense numpy on random charge structures."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.expand import grow, widened_svd
from mps.blocks.tensor import BlockTensor

FAST = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def legs(draw, flow):
    qs = draw(st.lists(st.integers(-3, 3), min_size=1, max_size=4, unique=True))
    sizes = [draw(st.integers(1, 3)) for _ in qs]
    return Leg.make(qs, sizes, flow)


def _matrices(t, extra, widen):
    """t and its widening as dense (shared x own) matrices."""
    a, b = t.to_dense(), extra.to_dense()
    if widen == "columns":
        return a.reshape(a.shape[0] * a.shape[1], -1), b.reshape(b.shape[0] * b.shape[1], -1)
    # t (l, s, r), extra (l, c, s, r): rows l and (l, c), columns (s, r)
    return a.reshape(a.shape[0], -1).conj().T, b.reshape(b.shape[0] * b.shape[1], -1).conj().T


@FAST
@given(l=legs(1), s=legs(1), r=legs(-1), c=legs(1), widen=st.sampled_from(["columns", "rows"]),
       seed=st.integers(0, 2**32 - 1), cplx=st.booleans())
def test_enlarged_svd_keeps_the_tensor_and_adds_orthonormal_directions_from_the_widening(
        l, s, r, c, widen, seed, cplx):
    """Without truncation: the values are t's singular values (numpy), isometry x rest gives t
    back exactly, the isometry is orthonormal, and every new bond state lies in the span of t
    and its widening (dense linear algebra as the reference)."""
    rng = np.random.default_rng(seed)
    dtype = np.complex128 if cplx else np.float64
    t = BlockTensor.random((l, s, r), (0,), rng=rng, dtype=dtype)
    extra_legs = (l, s, r, c) if widen == "columns" else (l, c.dual(), s, r)
    extra = BlockTensor.random(extra_legs, (0,), rng=rng, dtype=dtype)
    if t.norm() == 0:
        with pytest.raises(ValueError):
            widened_svd(t, extra, 2, widen, None)
        return
    out = widened_svd(t, extra, 2, widen, None)
    mt, me = _matrices(t, extra, widen)
    expected = np.linalg.svd(mt, compute_uv=False)
    got = np.sort(np.concatenate(out.values))[::-1]
    np.testing.assert_allclose(got, expected[expected > 0][:len(got)], rtol=1e-10, atol=1e-12)
    assert np.all(expected[len(got):] < 1e-12 * expected[0])
    back = contract(out.isometry, out.rest, (2,), (0,)) if widen == "columns" else \
        contract(out.rest, out.isometry, (1,), (0,))
    np.testing.assert_allclose(back.to_dense(), t.to_dense(), atol=1e-10)
    iso = out.isometry.to_dense()
    basis = iso.reshape(-1, iso.shape[-1]) if widen == "columns" else iso.reshape(iso.shape[0], -1).conj().T
    np.testing.assert_allclose(basis.conj().T @ basis, np.eye(basis.shape[1]), atol=1e-10)
    span = np.hstack([mt, me])
    residual = basis - span @ np.linalg.lstsq(span, basis, rcond=None)[0]
    assert np.max(np.abs(residual), initial=0.0) < 1e-8
    assert basis.shape[1] <= len(got) + grow(len(got))
    assert out.discarded == pytest.approx(0.0, abs=1e-12)


def test_widening_brings_a_new_charge_sector_into_the_bond():
    """t only uses bond charge 0; the widening holds charge 1 on the right: the bond gains it."""
    l, s = Leg.make([0], [2], 1), Leg.make([0, 1], [1, 1], 1)
    r = Leg.make([0], [2], -1)
    t = BlockTensor.random((l, s, r), (0,), rng=np.random.default_rng(0))
    c = Leg.make([0, 1], [1, 1], -1)
    extra = BlockTensor.random((l, s, r, c), (0,), rng=np.random.default_rng(1)) * 1e-3
    out = widened_svd(t, extra, 2, "columns", max_bond=None)
    assert (1,) in out.isometry.legs[-1].charges and (0,) in out.isometry.legs[-1].charges
