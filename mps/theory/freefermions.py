"""Exact charge-resolved entanglement of free-fermion chains from the correlation matrix.

For a Slater determinant the reduced density matrix of a block A is Gaussian (Peschel,
J. Phys. A 36, L205, 2003): in the eigenbasis of the block correlation matrix
C_A = (<c+_i c_j>)_{i,j in A}, with eigenvalues nu_k, every many-body level is a product
lambda = prod_k [nu_k if mode k is occupied else 1 - nu_k], and its block charge N_A is the
number of occupied modes. Summing over the levels of one sector therefore gives a
polynomial identity (Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302, 2019):

    sum_{levels with N_A = N} lambda^n = [x^N] prod_k [(1 - nu_k)^n + nu_k^n x],
    Tr[rho_A^n e^{i alpha N_A}]        = prod_k [nu_k^n e^{i alpha} + (1 - nu_k)^n].

All coefficients are positive, so the products are accumulated one mode at a time without
cancellation. Each factor is normalised by nu^n + (1 - nu)^n (its logarithm is kept aside),
which turns the coefficients into a probability distribution over N: nothing overflows, for
blocks of thousands of sites. The von Neumann limit n -> 1 is taken exactly by carrying
dual numbers (value + epsilon * d/dn) through the product; n = inf uses the largest level
of each sector, which fills the N modes with the largest nu_k.

The physical block charge is q = unit * N_A + offset (for spins unit 1 and offset -cut/2, so
that q = S^z_A; for fermions unit 1, offset 0). Cost: O(cut^2) per block and Renyi index.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import gammaln, xlogy

from mps.analysis.resolved import CutResolved


def correlation_matrix(h: np.ndarray, n_particles: int, degeneracy_tol: float = 1e-10) -> np.ndarray:
    """Ground-state correlation matrix C_ij = <c+_i c_j> of H = sum_ij h_ij c+_i c_j.

    With h = U diag(e) U^dagger (e ascending) and the n lowest orbitals filled,
    C = conj(U_occ) U_occ^T (Peschel 2003).

    Parameters
    ----------
    h : (L, L) Hermitian single-particle matrix.
    n_particles : number of fermions, 0..L.
    degeneracy_tol : smallest allowed gap e[n] - e[n-1] (times max(1, |e|max)).

    Raises
    ------
    ValueError
        If h is not square and Hermitian, n is out of range, or orbitals n-1 and n are
        degenerate, so that the n-particle ground state is not unique.
    """
    h = np.asarray(h)
    if h.ndim != 2 or h.shape[0] != h.shape[1]:
        raise ValueError(f"h must be a square matrix, got shape {h.shape}")
    if not np.allclose(h, h.conj().T, atol=1e-12, rtol=0.0):
        raise ValueError("h must be Hermitian")
    L = h.shape[0]
    if not 0 <= n_particles <= L:
        raise ValueError(f"n_particles must be in 0..{L}, got {n_particles}")
    energies, orbitals = np.linalg.eigh(h)
    if 0 < n_particles < L:
        gap = energies[n_particles] - energies[n_particles - 1]
        if gap < degeneracy_tol * max(1.0, float(np.max(np.abs(energies)))):
            raise ValueError(
                f"single-particle levels {n_particles - 1} and {n_particles} are degenerate "
                f"(gap {gap:.3e}): the {n_particles}-particle ground state is not unique"
            )
    occ = orbitals[:, :n_particles]
    C = occ.conj() @ occ.T
    return C.real if np.isrealobj(h) else C


def block_occupations(C: np.ndarray, cut: int) -> np.ndarray:
    """Eigenvalues nu_k (ascending) of C restricted to sites 0..cut-1, clipped to [0, 1]."""
    if not 0 <= cut <= C.shape[0]:
        raise ValueError(f"cut must be in 0..{C.shape[0]}, got {cut}")
    return np.clip(np.linalg.eigvalsh(C[:cut, :cut]), 0.0, 1.0)


def charge_correlations(C: np.ndarray) -> np.ndarray:
    """Connected density correlations <n_i n_j> - <n_i><n_j> = delta_ij C_ii - |C_ij|^2 (Wick)."""
    return np.diag(np.real(np.diag(C))) - np.abs(C) ** 2


def replica_weights(nu: np.ndarray, n: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Normalised factor (w0, w1) = ((1-nu)^n, nu^n) / (nu^n + (1-nu)^n) and sum_k log of the norm.

    For n = inf the weights are the limit (1, 0), (0, 1) or (1/2, 1/2) as nu <, >, = 1/2, and the
    log norm is sum_k log max(nu, 1-nu) per unit n (only its ratio to n is meaningful).
    """
    if np.isinf(n):
        w1 = np.where(nu > 0.5, 1.0, np.where(nu < 0.5, 0.0, 0.5))
        return 1.0 - w1, w1, float(np.sum(np.log(np.maximum(nu, 1.0 - nu))))
    with np.errstate(divide="ignore"):
        la, lb = n * np.log(nu), n * np.log1p(-nu)
    lz = np.logaddexp(la, lb)
    return np.exp(lb - lz), np.exp(la - lz), float(np.sum(lz))


def log_sector_sums(w0: np.ndarray, w1: np.ndarray) -> np.ndarray:
    """log of the coefficients of prod_k (w0_k + w1_k x), accumulated in the log domain.

    The log domain keeps sectors whose weight is far below the largest one (large n) exact.
    """
    with np.errstate(divide="ignore"):
        l0, l1 = np.log(w0), np.log(w1)
    out = np.full(w0.size + 1, -np.inf)
    out[0] = 0.0
    for k in range(w0.size):
        out[1 : k + 2] = np.logaddexp(out[1 : k + 2] + l0[k], out[: k + 1] + l1[k])
        out[0] += l0[k]
    return out


def dual_sector_sums(nu: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients P(N) of prod_k [(1-nu_k)^n + nu_k^n x] at n = 1 and D(N) = dP/dn at n = 1.

    Each factor is carried as a dual number a + epsilon a log a (d/dn a^n = a^n log a), so
    D(N) = sum_{levels in sector N} lambda log lambda exactly; P(N) = p(N) sums to one.
    """
    a0, a1 = 1.0 - nu, nu
    b0, b1 = xlogy(a0, a0), xlogy(a1, a1)
    P = np.zeros(nu.size + 1)
    D = np.zeros(nu.size + 1)
    P[0] = 1.0
    for k in range(nu.size):
        Pk, Dk = P[: k + 1].copy(), D[: k + 1].copy()
        D[: k + 1] = Dk * a0[k] + Pk * b0[k]
        D[1 : k + 2] += Dk * a1[k] + Pk * b1[k]
        P[: k + 1] = Pk * a0[k]
        P[1 : k + 2] += Pk * a1[k]
    return P, D


def log_largest_level(nu: np.ndarray) -> np.ndarray:
    """log of the largest many-body level in each sector N = 0..M.

    The largest product with N occupied modes occupies the N largest nu_k:
    log lambda_max(N) = sum_{k<N} log nu_(k) + sum_{k>=N} log(1 - nu_(k)), nu sorted descending.
    """
    s = np.sort(nu)[::-1]
    with np.errstate(divide="ignore"):
        head = np.concatenate([[0.0], np.cumsum(np.log(s))])
        tail = np.concatenate([np.cumsum(np.log1p(-s)[::-1])[::-1], [0.0]])
    return head + tail


def level_counts(m: int, k: np.ndarray) -> np.ndarray:
    """binomial(m, k) as floats: rounded to the exact integer below 2^53, inf on overflow."""
    with np.errstate(over="ignore"):
        c = np.exp(gammaln(m + 1) - gammaln(k + 1) - gammaln(m - k + 1))
    return np.where(c < 2.0**53, np.round(c), c)


def resolve_block(
    nu: np.ndarray,
    cut: int,
    renyi: Sequence[float],
    alphas: np.ndarray,
    unit: float = 1.0,
    offset: float = 0.0,
    floor: float = 1e-12,
) -> CutResolved:
    """Exact charge-resolved entanglement of a Gaussian block with occupations ``nu``.

    p(q) and the sector sums Z_n(N) = sum_{N_A = N} lambda^n come from the polynomial
    prod_k [(1 - nu_k)^n + nu_k^n x]; S_n(q) = log[Z_n(N)/p(N)^n]/(1 - n), with
    S_1(q) = log p(N) - D(N)/p(N), D(N) = sum_{N_A=N} lambda log lambda (exact dual-number
    derivative), and S_inf(q) = log p(N) - log lambda_max(N). Total S_n =
    sum_k log(nu_k^n + (1 - nu_k)^n)/(1 - n). Charged moments (Bonsignori, Ruggiero and
    Calabrese 2019):

        Z_n(alpha)/Z_n(0) = e^{i alpha offset} prod_k [nu_k^n e^{i alpha unit} + (1-nu_k)^n]
                                               / [nu_k^n + (1-nu_k)^n],

    evaluated as the exponential of a sum of logarithms.

    Sectors: with m modes strictly inside (0, 1) and k1 modes equal to 1 (after clipping,
    exact zeros and ones are taken at face value), the non-zero levels have N_A = k1..k1+m and
    ``counts`` = binomial(m, N_A - k1), returned as floats (exact below 2^53, rounded above, inf
    past ~1e308). Only sectors whose p(q) is representable (> 0 in double precision) are
    returned; sector entropies are NaN where p(q) < ``floor``.

    Parameters
    ----------
    nu : (cut,) block occupations in [0, 1], e.g. from :func:`block_occupations`.
    cut : number of sites in the block.
    renyi : Renyi indices n > 0 (``np.inf`` allowed).
    alphas : flux values for the charged moments.
    unit, offset : physical charge q = unit * N_A + offset.
    floor : probability below which sector entropies are NaN.

    Notes
    -----
    Occupations from ``eigvalsh`` carry absolute errors ~eps, which enter the levels linearly:
    S_n(q) of a sector is therefore accurate to about eps log(1/eps) / p(q) (1e-9 needs
    p(q) >~ 1e-5), and orders n < 1 amplify near-zero levels further. p(q), the totals and the
    moments are accurate to ~eps times the block size.
    """
    nu = np.asarray(nu, dtype=float)
    if nu.ndim != 1 or nu.size != cut:
        raise ValueError(f"expected {cut} occupations, got shape {nu.shape}")
    if np.any((nu < 0) | (nu > 1)) or not np.all(np.isfinite(nu)):
        raise ValueError("occupations must lie in [0, 1]; clip them first")
    ns = tuple(float(n) for n in renyi)
    if any(not n > 0 for n in ns):
        raise ValueError(f"Renyi indices must be positive, got {ns}")
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))

    k1 = int(np.sum(nu == 1.0))
    m = int(np.sum((nu > 0) & (nu < 1)))
    prob, dlog = dual_sector_sums(nu)
    sectors = np.arange(k1, k1 + m + 1)
    sectors = sectors[prob[sectors] > 0]
    p = prob[sectors]
    with np.errstate(divide="ignore"):
        logp = np.log(p)
    charges = unit * sectors + offset
    counts = level_counts(m, sectors - k1)
    keep = p >= floor

    entropy = np.empty(len(ns))
    sector_entropy = np.full((len(ns), sectors.size), np.nan)
    moments = np.empty((len(ns), alphas.size), dtype=complex)
    phase = np.exp(1j * alphas * unit)
    for r, n in enumerate(ns):
        w0, w1, log_norm = replica_weights(nu, n)
        if n == 1.0:
            entropy[r] = 0.0 - float(np.sum(xlogy(nu, nu) + xlogy(1 - nu, 1 - nu)))
            values = logp - dlog[sectors] / np.where(keep, p, 1.0)
        elif np.isinf(n):
            entropy[r] = 0.0 - log_norm
            values = logp - log_largest_level(nu)[sectors]
        else:
            entropy[r] = log_norm / (1.0 - n)
            values = (log_norm + log_sector_sums(w0, w1)[sectors] - n * logp) / (1.0 - n)
        sector_entropy[r, keep] = values[keep]
        with np.errstate(divide="ignore"):
            logs = np.log(w0[None, :] + w1[None, :] * phase[:, None]).sum(axis=1)
        moments[r] = np.exp(1j * alphas * offset + logs)

    order = np.argsort(charges, kind="stable")  # ascending charge even if unit < 0
    return CutResolved(
        cut=cut,
        charges=charges[order],
        probability=p[order],
        counts=counts[order],
        renyi=ns,
        entropy=entropy,
        sector_entropy=sector_entropy[:, order],
        alphas=alphas,
        moments=moments,
        floor=floor,
    )


def resolve_all_cuts(
    h: np.ndarray,
    n_particles: int,
    cuts: Sequence[int],
    renyi: Sequence[float],
    alphas: np.ndarray,
    unit: float = 1.0,
    offset_per_site: float = 0.0,
    floor: float = 1e-12,
) -> list[CutResolved]:
    """:func:`resolve_block` for the left blocks of the ground state of h, one per cut.

    The offset for cut l is ``offset_per_site * l``; for spin chains use unit 1 and
    offset_per_site -0.5, so that q = N_A - l/2 = S^z_A.
    """
    C = correlation_matrix(h, n_particles)
    return [
        resolve_block(block_occupations(C, cut), cut, renyi, alphas, unit, offset_per_site * cut, floor)
        for cut in cuts
    ]
