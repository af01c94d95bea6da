"""Restarted Lanczos (mps.solver.krylov) against numpy's dense eigh (LAPACK) as the reference."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mps.solver.krylov import _extend, _lowest_tridiagonal, lowest_eigenpair


def hermitian(n: int, dtype, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    if dtype is complex:
        a = a + 1j * rng.standard_normal((n, n))
    return a + a.conj().T


@settings(max_examples=30, deadline=None)
@given(n=st.integers(1, 120), complex_=st.booleans(), seed=st.integers(0, 2**31))
def test_lowest_eigenpair_matches_dense_eigh(n, complex_, seed):
    dtype = complex if complex_ else float
    h = hermitian(n, dtype, seed)
    start = np.random.default_rng(seed + 1).standard_normal(n).astype(dtype)
    res = lowest_eigenpair(lambda x: h @ x, start, lanczos_vectors=40, tol=1e-10, max_restarts=30)
    exact = np.linalg.eigvalsh(h)
    scale = max(1.0, np.abs(exact).max())
    assert abs(res.value - exact[0]) <= 1e-9 * scale
    assert abs(np.linalg.norm(res.vector) - 1.0) <= 1e-12
    assert np.linalg.norm(h @ res.vector - res.value * res.vector) <= 1e-8 * scale


@pytest.mark.parametrize("dtype", [float, complex])
def test_one_step_keeps_the_krylov_basis_orthonormal(dtype):
    """After _extend, w / ||w|| is orthogonal to every earlier basis vector to machine precision
    and alpha is the Rayleigh quotient <v_m, H v_m>."""
    n, m = 500, 6
    h = hermitian(n, dtype, 3)
    basis = np.linalg.qr(np.random.default_rng(4).standard_normal((n, m + 1)).astype(dtype))[0].T.copy()
    w = h @ basis[m]
    rayleigh = np.vdot(basis[m], w).real
    alpha, norm = _extend(w, basis, m, 0.7)
    assert abs(alpha - rayleigh) <= 1e-12 * np.abs(h).max() * n
    assert abs(norm - np.linalg.norm(w)) <= 1e-12 * norm
    assert np.abs(basis.conj() @ (w / norm)).max() <= 1e-13


def test_exhausted_krylov_space_stops_with_the_exact_answer():
    """A start vector inside a 3-dimensional invariant subspace: the Krylov space closes after
    three steps and the eigenvalue is that of the subspace."""
    h = np.diag([-2.0, 1.0, 3.0, -5.0, 4.0])
    start = np.array([1.0, 1.0, 1.0, 0.0, 0.0])
    res = lowest_eigenpair(lambda x: h @ x, start, lanczos_vectors=5, tol=1e-12, max_restarts=0)
    assert abs(res.value + 2.0) <= 1e-12
    assert res.applications == 3


@st.composite
def tridiagonals(draw):
    """Random, graded (entries over many decades) and nearly degenerate symmetric tridiagonals."""
    k = draw(st.integers(1, 30))
    rng = np.random.default_rng(draw(st.integers(0, 2**31)))
    kind = draw(st.sampled_from(["random", "graded", "clustered", "lanczos-like"]))
    a, b = rng.standard_normal(k), np.abs(rng.standard_normal(max(k - 1, 0))) + 1e-3
    if kind == "graded":
        a, b = a * 10.0 ** rng.uniform(-6, 6, k), b * 10.0 ** rng.uniform(-6, 6, max(k - 1, 0))
    elif kind == "clustered":
        a, b = np.full(k, -1.0) + 1e-9 * a, 1e-7 * b
    elif kind == "lanczos-like":         # a converged Lanczos run: tiny last couplings
        b = b * np.geomspace(1.0, 1e-12, max(k - 1, 0))
    return a, b


@settings(max_examples=200, deadline=None)
@given(t=tridiagonals())
def test_lowest_tridiagonal_pair_matches_lapack(t):
    """Against scipy's eigh_tridiagonal (LAPACK dstemr/dstebz): the value to a few eps ||T||, a
    residual of a few eps ||T||, and the vector itself where the gap to the next eigenvalue
    leaves it well defined (error ~ eps ||T|| / gap: Golub and Van Loan, Matrix Computations,
    section 8.1, from memory)."""
    from scipy.linalg import eigh_tridiagonal

    a, b = t
    value, vec = _lowest_tridiagonal(a, b)
    if len(a) == 1:
        assert value == a[0] and vec.tolist() == [1.0]
        return
    dense = np.diag(a) + np.diag(b, 1) + np.diag(b, -1)
    norm = np.abs(dense).sum(axis=1).max()
    evals, evecs = eigh_tridiagonal(a, b)
    eps = np.finfo(float).eps
    assert abs(value - evals[0]) <= 8 * len(a) * eps * norm
    assert abs(np.linalg.norm(vec) - 1) <= 1e-14
    assert np.linalg.norm(dense @ vec - value * vec) <= 16 * len(a) * eps * norm
    gap = evals[1] - evals[0]
    if gap > 1e-6 * norm:
        ref = evecs[:, 0] * np.sign(evecs[np.argmax(np.abs(evecs[:, 0])), 0])
        assert np.abs(vec - ref).max() <= 1e3 * len(a) * eps * norm / gap


def test_a_non_finite_product_gives_a_nan_value_not_an_exception():
    """The sweep turns a non-finite value into its NumericalError (with the bond step named)."""
    res = lowest_eigenpair(lambda x: np.full_like(x, np.nan), np.ones(10), lanczos_vectors=4, tol=1e-12)
    assert np.isnan(res.value) and res.applications == 1
