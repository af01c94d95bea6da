"""Independent exact diagonalisation of small open chains in one charge sector (test reference).

The Hamiltonians of DESIGN.md section 3 are built here straight from their formulas with
scipy.sparse, using no project code, so that the engine can be checked against a reference
that shares none of its machinery. Basis states are integers: bit j = 1 means spin up (or a
fermion) at site j, sites j = 0..L-1, open boundaries.

Fermions are mapped to bits by the Jordan-Wigner order of the site index,
c_j = (prod_{k<j} (-1)^{n_k}) a_j, so that

    c+_i c_j |s> = (-1)^{#occupied sites strictly between i and j} |s - e_j + e_i>

for i != j (bit j set, bit i clear). Nearest-neighbour hopping then carries no sign, but
:func:`quadratic_fermion_sector` uses the same rule for arbitrary hopping ranges, which the
tests check against the single-particle spectrum.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

DENSE_LIMIT = 2000  # default dimension up to which ground_state uses dense eigh


def sector_basis(L: int, n: int) -> np.ndarray:
    """Sorted integers of L bits with exactly n bits set (the basis of one charge sector)."""
    if not 0 <= n <= L:
        raise ValueError(f"need 0 <= n <= L, got n={n}, L={L}")
    states = [sum(1 << j for j in occ) for occ in combinations(range(L), n)]
    return np.array(sorted(states), dtype=np.int64)


def occupations(basis: np.ndarray, L: int) -> np.ndarray:
    """(dim, L) array of 0/1: bit j of each basis state."""
    return ((basis[:, None] >> np.arange(L)) & 1).astype(np.int64)


def _hopping(
    basis: np.ndarray, occ: np.ndarray, hops: list[tuple[int, int, complex]], fermionic: bool
) -> sp.csr_matrix:
    """Sparse matrix of sum amp * c+_i c_j (or S+_i S-_j if not fermionic) over (i, j, amp), i != j."""
    rows, cols, vals = [], [], []
    for i, j, amp in hops:
        if i == j:
            raise ValueError("on-site terms belong to the diagonal")
        src = np.nonzero((occ[:, j] == 1) & (occ[:, i] == 0))[0]
        new = basis[src] ^ ((1 << i) | (1 << j))
        dst = np.searchsorted(basis, new)
        if not np.array_equal(basis[dst], new):
            raise RuntimeError("hopping left the charge sector")
        sign = np.ones(src.size)
        if fermionic:
            lo, hi = min(i, j), max(i, j)
            between = occ[src, lo + 1 : hi].sum(axis=1)
            sign = (-1.0) ** between
        rows.append(dst)
        cols.append(src)
        vals.append(amp * sign)
    dim = basis.size
    if not rows:
        return sp.csr_matrix((dim, dim))
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim)
    )


def _bond_couplings(L: int, base: float, dimer: float) -> np.ndarray:
    """base * (1 + dimer * (-1)^j) for bonds j = 0..L-2."""
    j = np.arange(L - 1)
    return base * (1.0 + dimer * (-1.0) ** j)


def xxz_sector(
    L: int,
    n_up: int,
    J: float = 1.0,
    Delta: float = 1.0,
    h: float = 0.0,
    h_stag: float = 0.0,
    dimer: float = 0.0,
) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open xxz chain in the sector with ``n_up`` up spins.

    H = sum_{j=0}^{L-2} J_j (Sx_j Sx_{j+1} + Sy_j Sy_{j+1} + Delta Sz_j Sz_{j+1})
        + sum_j (h + h_stag (-1)^j) Sz_j,   J_j = J (1 + dimer (-1)^j),
    with Sx Sx + Sy Sy = (S+ S- + S- S+)/2.
    """
    basis = sector_basis(L, n_up)
    occ = occupations(basis, L)
    sz = occ - 0.5
    Jb = _bond_couplings(L, J, dimer)
    field = h + h_stag * (-1.0) ** np.arange(L)
    diag = (sz[:, :-1] * sz[:, 1:]) @ (Jb * Delta) + sz @ field
    hops = [(j, j + 1, Jb[j] / 2) for j in range(L - 1)] + [(j + 1, j, Jb[j] / 2) for j in range(L - 1)]
    H = sp.diags(diag) + _hopping(basis, occ, hops, fermionic=False)
    return sp.csr_matrix(H), basis


def fermion_sector(
    L: int,
    n: int,
    t: float = 1.0,
    V: float = 0.0,
    mu: float = 0.0,
    mu_stag: float = 0.0,
    dimer: float = 0.0,
) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open spinless t-V chain with ``n`` fermions.

    H = -sum_j t_j (c+_j c_{j+1} + h.c.) + V sum_j n_j n_{j+1} - sum_j (mu + mu_stag (-1)^j) n_j,
    t_j = t (1 + dimer (-1)^j).
    """
    basis = sector_basis(L, n)
    occ = occupations(basis, L)
    tb = _bond_couplings(L, t, dimer)
    pot = mu + mu_stag * (-1.0) ** np.arange(L)
    diag = V * (occ[:, :-1] * occ[:, 1:]).sum(axis=1) - occ @ pot
    hops = [(j, j + 1, -tb[j]) for j in range(L - 1)] + [(j + 1, j, -tb[j]) for j in range(L - 1)]
    H = sp.diags(diag) + _hopping(basis, occ, hops, fermionic=True)
    return sp.csr_matrix(H), basis


def quadratic_fermion_sector(hmat: np.ndarray, n: int) -> tuple[sp.csr_matrix, np.ndarray]:
    """H = sum_ij hmat_ij c+_i c_j (any range, complex allowed) with ``n`` fermions."""
    hmat = np.asarray(hmat)
    L = hmat.shape[0]
    basis = sector_basis(L, n)
    occ = occupations(basis, L)
    hops = [(i, j, hmat[i, j]) for i in range(L) for j in range(L) if i != j and hmat[i, j] != 0]
    H = sp.diags(occ @ np.diag(hmat)) + _hopping(basis, occ, hops, fermionic=True)
    return sp.csr_matrix(H), basis


def ground_state(
    H: sp.spmatrix, degeneracy_tol: float = 1e-9, dense_limit: int = DENSE_LIMIT
) -> tuple[float, np.ndarray]:
    """Lowest eigenpair; raises if the two lowest levels are within ``degeneracy_tol``.

    Dense ``eigh`` up to dimension ``dense_limit``, Lanczos (``eigsh``) beyond. The phase is fixed
    so that the largest component is real and positive.
    """
    dim = H.shape[0]
    if dim <= dense_limit:
        evals, evecs = sla.eigh(H.toarray())
        evals, evecs = evals[:2], evecs[:, :2]
    else:
        evals, evecs = spla.eigsh(H, k=2, which="SA", tol=0.0)
        order = np.argsort(evals)
        evals, evecs = evals[order], evecs[:, order]
    if evals.size > 1 and evals[1] - evals[0] < degeneracy_tol:
        raise ValueError(f"ground state degenerate: gap {evals[1] - evals[0]:.3e}")
    vec = evecs[:, 0]
    big = vec[np.argmax(np.abs(vec))]
    vec = vec * (abs(big) / big)
    vec = vec / np.linalg.norm(vec)
    return float(evals[0]), vec


def schmidt_by_sector(
    vector: np.ndarray,
    basis: np.ndarray,
    L: int,
    cut: int,
    unit: float = 1.0,
    offset_per_site: float = 0.0,
) -> dict[float, np.ndarray]:
    """Schmidt values of the left block (sites 0..cut-1), grouped by the block charge.

    Returns {unit * N_A + offset_per_site * cut: singular values, descending}, where N_A is the
    number of set bits in the block. Each sector's coefficient matrix (left states x right
    states) is built from the basis and decomposed by SVD.
    """
    if not 0 <= cut <= L:
        raise ValueError(f"cut must be in 0..{L}, got {cut}")
    left = basis & ((1 << cut) - 1)
    right = basis >> cut
    n_left = occupations(left, L)[:, :cut].sum(axis=1) if cut else np.zeros(basis.size, int)
    out: dict[float, np.ndarray] = {}
    for nA in np.unique(n_left):
        sel = n_left == nA
        lvals, rows = np.unique(left[sel], return_inverse=True)
        rvals, cols = np.unique(right[sel], return_inverse=True)
        mat = np.zeros((lvals.size, rvals.size), dtype=vector.dtype)
        mat[rows, cols] = vector[sel]
        out[float(unit * nA + offset_per_site * cut)] = np.linalg.svd(mat, compute_uv=False)
    return dict(sorted(out.items()))


def resolved_from_schmidt(
    sectors: dict[float, np.ndarray], renyi: list[float], alphas: np.ndarray
) -> dict[str, np.ndarray]:
    """Brute-force resolved entanglement from Schmidt values per sector.

    lambda = s^2; p(q) = sum lambda; S_n(q) = log(sum (lambda/p)^n)/(1 - n), with the limits
    n = 1 (-sum x log x) and n = inf (-log max x); total S_n likewise; moments
    Z_n(alpha)/Z_n(0) = sum_q e^{i alpha q} sum lambda^n / sum lambda^n (for n = inf, the
    levels within 1e-9 relative of the largest one).

    Returns a dict with ``charges``, ``probability``, ``sector_entropy`` (nrenyi, nsec),
    ``entropy`` (nrenyi,), ``moments`` (nrenyi, nalpha).
    """
    charges = np.array(list(sectors))
    lams = [np.asarray(s, dtype=float) ** 2 for s in sectors.values()]
    allq = np.concatenate([np.full(lam.size, q) for q, lam in zip(charges, lams)])
    alll = np.concatenate(lams)
    prob = np.array([lam.sum() for lam in lams])

    def renyi_of(x: np.ndarray, n: float) -> float:
        x = x[x > 0]
        if n == 1:
            return float(-np.sum(x * np.log(x)))
        if np.isinf(n):
            return float(-np.log(x.max()))
        return float(np.log(np.sum(x**n)) / (1 - n))

    sec = np.array([[renyi_of(lam / p, n) if p > 0 else np.nan for lam, p in zip(lams, prob)] for n in renyi])
    tot = np.array([renyi_of(alll, n) for n in renyi])
    alphas = np.asarray(alphas, dtype=float)
    moments = np.empty((len(renyi), alphas.size), dtype=complex)
    for r, n in enumerate(renyi):
        if np.isinf(n):
            weight = (alll >= alll.max() * (1 - 1e-9)).astype(float)
        else:
            weight = np.where(alll > 0, alll, 0.0) ** n
        phases = np.exp(1j * np.outer(alphas, allq))
        moments[r] = phases @ weight / weight.sum()
    return {"charges": charges, "probability": prob, "sector_entropy": sec, "entropy": tot, "moments": moments}


def block_charge_correlations(vector: np.ndarray, basis: np.ndarray, L: int) -> np.ndarray:
    """Connected density correlations <n_i n_j> - <n_i><n_j> of a state, (L, L)."""
    occ = occupations(basis, L).astype(float)
    w = np.abs(vector) ** 2
    mean = w @ occ
    return occ.T @ (w[:, None] * occ) - np.outer(mean, mean)
