"""Restarted Lanczos (mps.solver.krylov) against numpy's dense eigh (LAPACK) as the reference."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mps.solver.krylov import _extend, lowest_eigenpair


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
