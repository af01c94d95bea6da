"""Lowest eigenpair of a Hermitian operator by restarted Lanczos with full reorthogonalisation.

The Krylov spaces of a ground-state sweep are small (tens of vectors), so storing them and
reorthogonalising against all of them costs little next to one operator application and keeps
the recurrence exact to machine precision (Lanczos, J. Res. Natl. Bur. Stand. 45, 255 (1950);
Golub and Van Loan, Matrix Computations, section 10.1). The start vector is the previous two-site
tensor, so a few iterations usually suffice once the sweeps settle.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from numba import njit
from scipy.linalg import lapack


@dataclass(frozen=True)
class EigenResult:
    value: float
    vector: np.ndarray
    residual: float
    applications: int


def _orthogonalize(w: np.ndarray, basis: np.ndarray, norm2: float) -> float:
    """Project the orthonormal rows of ``basis`` out of ``w`` (squared norm ``norm2``) in place;
    returns the new norm.

    Classical Gram-Schmidt, repeated once only when the first pass cancelled more than
    1 - 1/sqrt(2) of the norm (the criterion of Daniel, Gragg, Kaufman and Stewart,
    Math. Comp. 30, 772 (1976)): one pass is then already orthogonal to machine precision, and
    each pass reads the whole Krylov basis, which costs as much as a small operator application.
    """
    for _ in range(2):
        overlaps = basis @ w if basis.dtype.kind == "f" else np.conj(basis @ np.conj(w))
        w -= overlaps @ basis
        after2 = float(np.real(np.vdot(w, w)))
        if after2 >= norm2 / 2.0:
            break
        norm2 = after2
    return float(np.sqrt(after2))


@njit(cache=True, nogil=True, fastmath={"reassoc", "contract"})
def _three_term(w, v, a, u, b):  # pragma: no cover - compiled
    """w -= a v + b u in one pass (the Lanczos recurrence); returns the squared norm of the result
    (summed in any order, so that the loop runs in SIMD lanes; NaN and infinity still propagate)."""
    total = 0.0
    for i in range(w.size):
        x = w[i] - a * v[i] - b * u[i]
        w[i] = x
        total += x.real * x.real + x.imag * x.imag
    return total


def _tridiagonal_eigh(alpha: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (ascending) and eigenvectors of the symmetric tridiagonal matrix with diagonal
    ``alpha`` and off-diagonal ``beta``: LAPACK's dstev called directly (implicit QL/QR, as
    accurate as a dense eigh and about four times cheaper per call for the few-by-few matrices of
    a Krylov space, where the call overhead dominates)."""
    if len(alpha) == 1:
        return alpha.copy(), np.ones((1, 1))
    evals, evecs, info = lapack.dstev(alpha, beta)
    if info != 0:
        raise np.linalg.LinAlgError(f"the tridiagonal eigensolver failed (dstev info {info})")
    return evals, evecs


def lowest_eigenpair(matvec: Callable[[np.ndarray], np.ndarray], start: np.ndarray,
                     lanczos_vectors: int = 24, tol: float = 1e-10, max_restarts: int = 4,
                     rng: np.random.Generator | None = None) -> EigenResult:
    """Lowest eigenvalue and normalised eigenvector of the Hermitian operator ``matvec``.

    Stops when the residual norm ||H x - E x|| falls below ``tol`` or after ``max_restarts``
    restarts of a ``lanczos_vectors``-dimensional Krylov space from the current Ritz vector.
    """
    x = np.array(start, copy=True)
    n = x.size
    nrm = np.linalg.norm(x)
    if nrm == 0 or not np.isfinite(nrm):
        rng = np.random.default_rng(rng)
        x = rng.standard_normal(n).astype(x.dtype)
        nrm = np.linalg.norm(x)
    x /= nrm
    apps = 0
    value, resid = np.nan, np.inf
    m_max = max(2, min(lanczos_vectors, n))
    basis = np.empty((m_max, n), dtype=x.dtype)
    alpha, beta = np.zeros(m_max), np.zeros(m_max)
    for _ in range(max_restarts + 1):
        basis[0] = x
        for m in range(m_max):
            w = matvec(basis[m])
            if np.may_share_memory(w, basis) or w.dtype != basis.dtype:
                w = w.astype(basis.dtype)       # the projection below works in place
            apps += 1
            alpha[m] = a = float(np.real(np.vdot(basis[m], w)))
            # the three-term recurrence first, so that the projection only removes round-off
            norm2 = _three_term(w, basis[m], a, basis[m - 1] if m else basis[m], beta[m - 1] if m else 0.0)
            b = _orthogonalize(w, basis[:m + 1], norm2)
            evals, evecs = _tridiagonal_eigh(alpha[:m + 1], beta[:m])
            value = float(evals[0])
            resid = abs(b * evecs[-1, 0])
            if resid < tol or b < 1e-14 or m == m_max - 1 or m == n - 1:
                break
            beta[m] = b
            np.divide(w, b, out=basis[m + 1])
        coeffs = evecs[:, 0]
        x = coeffs @ basis[:len(coeffs)]
        x /= np.linalg.norm(x)
        if resid < tol or len(coeffs) >= n:
            break
    return EigenResult(value, x, float(resid), apps)
