"""Exact diagonalisation of small open chains with any local dimension (test reference).

Independent of the engine (numpy and scipy only): every Hamiltonian is written straight from its
formula as a sum of Kronecker products of sparse local matrices on the full product space of L
sites, then restricted to one charge sector by selecting basis states.

Conventions.

* Product basis: |s_0 s_1 ... s_{L-1}> has index sum_j s_j d^(L-1-j), i.e. site 0 is the leftmost,
  slowest factor of ``kron(op_0, op_1, ..., op_{L-1})``.
* Local matrices are ``op[out, in]`` in the basis order documented by each site constructor.
* Charges are in physical units (half-integer S^z stays 0.5), one column per conserved quantity;
  the total charge of a product state is the sum of its sites' charges.
* Fermions carry a Jordan-Wigner string: c_{j,s} = (prod_{k<j} P_k) (x) c_s at site j, with
  P = (-1)^(n_up + n_dn) the local parity, so operators on different sites anticommute and
  the two spin species on one site anticommute through the local matrices themselves.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np
import scipy.sparse as sp

from reference_ed import ground_state

DENSE_LIMIT = 3000  # sector dimension up to which sector_ground_state uses dense eigh
CHARGE_TOL = 1e-9  # two physical charges are equal when they differ by less than this


@dataclass(frozen=True)
class SiteType:
    """One kind of lattice site.

    ``ops[name]`` is a dense (d, d) matrix ``[out, in]``; ``charges`` is (d, k), the physical
    charges of the basis states; names in ``fermionic`` get a Jordan-Wigner string of
    ``parity`` (diagonal +-1) on every site to their left.
    """

    name: str
    ops: dict[str, np.ndarray]
    charges: np.ndarray
    fermionic: frozenset = frozenset()
    parity: np.ndarray | None = None

    @property
    def dim(self) -> int:
        return self.charges.shape[0]


def _ladder_down(nmax: int) -> np.ndarray:
    """Boson annihilator on n = 0..nmax: b|n> = sqrt(n)|n-1>, so b[n-1, n] = sqrt(n)."""
    return np.diag(np.sqrt(np.arange(1, nmax + 1, dtype=float)), k=1)


def spin_one() -> SiteType:
    """Spin 1, basis m = +1, 0, -1; charge (S^z,).

    S+|m> = sqrt(s(s+1) - m(m+1)) |m+1> with s = 1 gives sqrt(2) for m = 0 and m = -1.
    """
    m = np.array([1.0, 0.0, -1.0])
    sp_ = np.zeros((3, 3))
    sp_[0, 1] = sp_[1, 2] = np.sqrt(2.0)
    ops = {"id": np.eye(3), "s_z": np.diag(m), "s_plus": sp_, "s_minus": sp_.T.copy()}
    return SiteType("spin1", ops, m[:, None])


def spin_half() -> SiteType:
    """Spin 1/2, basis m = +1/2, -1/2; charge (S^z,) = (+-0.5,). S+ = |up><dn|."""
    m = np.array([0.5, -0.5])
    sp_ = np.array([[0.0, 1.0], [0.0, 0.0]])
    ops = {"id": np.eye(2), "s_z": np.diag(m), "s_plus": sp_, "s_minus": sp_.T.copy()}
    return SiteType("spin_half", ops, m[:, None])


def boson(nmax: int) -> SiteType:
    """Boson with cutoff ``nmax``, basis n = 0..nmax; charge (N,). b, b+ = b^T, n = b+ b."""
    b = _ladder_down(nmax)
    n = np.arange(nmax + 1, dtype=float)
    ops = {"id": np.eye(nmax + 1), "b": b, "b_dag": b.T.copy(), "n": np.diag(n)}
    return SiteType("boson", ops, n[:, None])


def two_boson_species(nmax: int) -> SiteType:
    """Two bosons a, b on one site, each cut at ``nmax``; basis (n_a, n_b), index n_a (nmax+1) + n_b.

    a = b_local (x) 1, b = 1 (x) b_local, so a and b commute. Charges (Q, Ntot) with
    Q = n_a - n_b and Ntot = n_a + n_b.
    """
    one, low = np.eye(nmax + 1), _ladder_down(nmax)
    a, b = np.kron(low, one), np.kron(one, low)
    na, nb = np.divmod(np.arange((nmax + 1) ** 2), nmax + 1)
    ops = {"id": np.eye(a.shape[0]), "a": a, "a_dag": a.T.copy(), "b": b, "b_dag": b.T.copy(),
           "n_a": np.diag(na.astype(float)), "n_b": np.diag(nb.astype(float))}
    return SiteType("two_species", ops, np.stack([na - nb, na + nb], axis=1).astype(float))


def spinful_fermion() -> SiteType:
    """Spinful fermion, basis |0>, |up>, |dn>, |up dn> = c+_up c+_dn |0>; charges (N, S^z).

    c+_up: |0> -> |up>, |dn> -> c+_up c+_dn|0> = +|up dn>.
    c+_dn: |0> -> |dn>, |up> -> c+_dn c+_up|0> = -|up dn> (one anticommutation).
    Parity P = (-1)^(n_up + n_dn) = diag(1, -1, -1, 1).
    """
    c_up_dag = np.zeros((4, 4))
    c_up_dag[1, 0], c_up_dag[3, 2] = 1.0, 1.0
    c_dn_dag = np.zeros((4, 4))
    c_dn_dag[2, 0], c_dn_dag[3, 1] = 1.0, -1.0
    n_up, n_dn = np.array([0.0, 1, 0, 1]), np.array([0.0, 0, 1, 1])
    parity = np.diag((-1.0) ** (n_up + n_dn))
    ops = {"id": np.eye(4), "c_up_dag": c_up_dag, "c_up": c_up_dag.T.copy(), "c_dn_dag": c_dn_dag,
           "c_dn": c_dn_dag.T.copy(), "n_up": np.diag(n_up), "n_dn": np.diag(n_dn), "parity": parity}
    charges = np.stack([n_up + n_dn, (n_up - n_dn) / 2], axis=1)
    return SiteType("spinful_fermion", ops, charges, frozenset({"c_up", "c_dn", "c_up_dag", "c_dn_dag"}), parity)


def product_charges(site_charges: np.ndarray, n: int) -> np.ndarray:
    """(d^n, k) total charges of all product states of ``n`` sites, in the index order above.

    Q(s_0..s_{n-1}) = sum_j q(s_j); site 0 is the slowest index. n = 0 gives one row of zeros.
    """
    site_charges = np.asarray(site_charges, dtype=float)
    total = np.zeros((1, site_charges.shape[1]))
    for _ in range(n):
        total = (total[:, None, :] + site_charges[None, :, :]).reshape(-1, site_charges.shape[1])
    return total


def site_operator(site: SiteType, L: int, j: int, name) -> sp.csr_matrix:
    """Full-space matrix of local operator ``name`` on site j: 1 (x) .. (x) op_j (x) .. (x) 1.

    ``name`` is a key of ``site.ops`` or a (d, d) matrix (taken as bosonic). For a fermionic
    name the sites k < j carry the parity P instead of 1 (Jordan-Wigner string).
    """
    if not 0 <= j < L:
        raise ValueError(f"site {j} outside 0..{L - 1}")
    fermionic = isinstance(name, str) and name in site.fermionic
    op = site.ops[name] if isinstance(name, str) else np.asarray(name)
    left = site.parity if fermionic else site.ops["id"]
    factors = [left] * j + [op] + [site.ops["id"]] * (L - j - 1)
    return reduce(lambda x, y: sp.kron(x, y, format="csr"), [sp.csr_matrix(f) for f in factors])


def operator_product(site: SiteType, L: int, factors) -> sp.csr_matrix:
    """Product op_1 op_2 ... of full-space site operators, ``factors`` = [(site j, name), ...].

    The matrix product is taken in the order written (rightmost acts first), strings included.
    """
    mats = [site_operator(site, L, j, name) for j, name in factors]
    return reduce(lambda x, y: (x @ y).tocsr(), mats)


def _total(site: SiteType, L: int, H: sp.spmatrix) -> tuple[sp.csr_matrix, np.ndarray]:
    """(H as csr without stored zeros, e.g. from zero couplings; total charges of all product states)."""
    H = sp.csr_matrix(H)
    H.eliminate_zeros()
    return H, product_charges(site.charges, L)


def _zero(site: SiteType, L: int) -> sp.csr_matrix:
    """Empty full-space matrix, d^L x d^L, to accumulate terms into."""
    dim = site.dim**L
    return sp.csr_matrix((dim, dim))


def hubbard(L: int, t: float = 1.0, U: float = 0.0, mu: float = 0.0, mu_stag: float = 0.0,
            dimer: float = 0.0) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open Hubbard chain on the full space; returns (H, charges (4^L, 2) of (N, S^z)).

    H = -sum_{j,s} t_j (c+_{j,s} c_{j+1,s} + h.c.) + U sum_j n_{j,up} n_{j,dn}
        - sum_j (mu + mu_stag (-1)^j)(n_{j,up} + n_{j,dn}),   t_j = t (1 + dimer (-1)^j).
    """
    site = spinful_fermion()
    H = _zero(site, L)
    for j in range(L - 1):
        tj = t * (1.0 + dimer * (-1.0) ** j)
        for s in ("up", "dn"):
            hop = operator_product(site, L, [(j, f"c_{s}_dag"), (j + 1, f"c_{s}")])
            H = H - tj * (hop + hop.T)  # real matrices: h.c. is the transpose
    for j in range(L):
        H = H + U * operator_product(site, L, [(j, "n_up"), (j, "n_dn")])
        pot = mu + mu_stag * (-1.0) ** j
        H = H - pot * (site_operator(site, L, j, "n_up") + site_operator(site, L, j, "n_dn"))
    return _total(site, L, H)


def bosons(L: int, nmax: int, t: float = 1.0, U: float = 0.0, mu: float = 0.0
           ) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open Bose-Hubbard chain with cutoff nmax; returns (H, charges ((nmax+1)^L, 1) of (N,)).

    H = -t sum_j (b+_j b_{j+1} + h.c.) + (U/2) sum_j n_j (n_j - 1) - mu sum_j n_j.
    """
    site = boson(nmax)
    n = site.ops["n"]
    onsite = 0.5 * U * n @ (n - np.eye(nmax + 1)) - mu * n
    H = _zero(site, L)
    for j in range(L - 1):
        hop = operator_product(site, L, [(j, "b_dag"), (j + 1, "b")])
        H = H - t * (hop + hop.T)
    for j in range(L):
        H = H + site_operator(site, L, j, onsite)
    return _total(site, L, H)


def spin1(L: int, J: float = 1.0, Delta: float = 1.0, D: float = 0.0, h: float = 0.0
          ) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open spin-1 xxz chain; returns (H, charges (3^L, 1) of (S^z,)).

    H = J sum_j [(S+_j S-_{j+1} + S-_j S+_{j+1})/2 + Delta Sz_j Sz_{j+1}] + D sum_j (Sz_j)^2 + h sum_j Sz_j.
    """
    site = spin_one()
    sz = site.ops["s_z"]
    onsite = D * sz @ sz + h * sz
    H = _zero(site, L)
    for j in range(L - 1):
        H = H + 0.5 * J * (operator_product(site, L, [(j, "s_plus"), (j + 1, "s_minus")])
                           + operator_product(site, L, [(j, "s_minus"), (j + 1, "s_plus")]))
        H = H + J * Delta * operator_product(site, L, [(j, "s_z"), (j + 1, "s_z")])
    for j in range(L):
        H = H + site_operator(site, L, j, onsite)
    return _total(site, L, H)


def two_species(L: int, nmax: int, t: float = 1.0, U: float = 0.0, V: float = 0.0, mu: float = 0.0
                ) -> tuple[sp.csr_matrix, np.ndarray]:
    """Open two-species Bose-Hubbard chain; returns (H, charges ((nmax+1)^(2L), 2) of (Q, Ntot)).

    H = -t sum_j (a+_j a_{j+1} + b+_j b_{j+1} + h.c.) + (U/2) sum_j [n_a(n_a-1) + n_b(n_b-1)]_j
        + V sum_j (n_a n_b)_j - mu sum_j (n_a + n_b)_j,  which conserves Q = N_a - N_b and Ntot.
    """
    site = two_boson_species(nmax)
    na, nb, one = site.ops["n_a"], site.ops["n_b"], site.ops["id"]
    onsite = 0.5 * U * (na @ (na - one) + nb @ (nb - one)) + V * na @ nb - mu * (na + nb)
    H = _zero(site, L)
    for j in range(L - 1):
        for x in ("a", "b"):
            hop = operator_product(site, L, [(j, f"{x}_dag"), (j + 1, x)])
            H = H - t * (hop + hop.T)
    for j in range(L):
        H = H + site_operator(site, L, j, onsite)
    return _total(site, L, H)


def spin_half_graph(L: int, pairs, fields=None) -> tuple[sp.csr_matrix, np.ndarray]:
    """Spin-1/2 couplings on any pairs; returns (H, charges (2^L, 1) of (S^z,), values +-1/2 per site).

    H = sum_{(i, j, Jxy, Jz) in pairs} [Jxy (S+_i S-_j + S-_i S+_j)/2 + Jz Sz_i Sz_j] + sum_j fields[j] Sz_j,
    i != j any distance (next-nearest neighbours, long range); ``fields`` of length L or None.
    """
    site = spin_half()
    H = _zero(site, L)
    for i, j, jxy, jz in pairs:
        if i == j:
            raise ValueError(f"pair ({i}, {j}) couples a site to itself")
        H = H + 0.5 * jxy * (operator_product(site, L, [(i, "s_plus"), (j, "s_minus")])
                             + operator_product(site, L, [(i, "s_minus"), (j, "s_plus")]))
        H = H + jz * operator_product(site, L, [(i, "s_z"), (j, "s_z")])
    if fields is not None:
        if len(fields) != L:
            raise ValueError(f"need {L} fields, got {len(fields)}")
        for j, f in enumerate(fields):
            H = H + f * site_operator(site, L, j, "s_z")
    return _total(site, L, H)


def sector_index(charges: np.ndarray, target) -> np.ndarray:
    """Indices of the product states whose total charge equals ``target`` within CHARGE_TOL."""
    target = np.atleast_1d(np.asarray(target, dtype=float))
    if target.size != charges.shape[1]:
        raise ValueError(f"target has {target.size} charges, the chain has {charges.shape[1]}")
    return np.nonzero(np.all(np.abs(charges - target) < CHARGE_TOL, axis=1))[0]


def sector_ground_state(H: sp.spmatrix, charges: np.ndarray, target, degeneracy_tol: float = 1e-9
                        ) -> tuple[float, np.ndarray, np.ndarray]:
    """Lowest eigenpair of H restricted to the sector ``target``: (energy, vector, index).

    ``index`` lists the sector's product states in the full space (ascending), ``vector`` is the
    normalised ground state on them (largest component made real positive). Dense eigh up to
    DENSE_LIMIT states, Lanczos (eigsh, which="SA", tol=0) beyond. Raises ValueError for an
    empty sector or when the two lowest levels are closer than ``degeneracy_tol``.
    """
    index = sector_index(charges, target)
    if index.size == 0:
        raise ValueError(f"no product state has charge {tuple(target)}")
    energy, vec = ground_state(sp.csr_matrix(H)[index][:, index], degeneracy_tol, DENSE_LIMIT)
    return energy, vec, index


def _charge_key(q: np.ndarray) -> tuple:
    """Charge row as a clean dict key: rounded to 1e-9, -0.0 turned into 0.0."""
    return tuple(float(x) + 0.0 for x in np.round(q, 9))


def schmidt_by_sector(vector: np.ndarray, index: np.ndarray, L: int, site_charges: np.ndarray, cut: int
                      ) -> dict[tuple, np.ndarray]:
    """Schmidt values of the left block (sites 0..cut-1), grouped by its total physical charge.

    A state sum_x psi_x |x> on product states x = (l, r), l the left block's d^cut states and r
    the right block's, with definite total charge, has psi block-diagonal in the left charge
    Q_A(l): psi = (+)_{Q_A} M_{Q_A}. The singular values of each M_{Q_A} (descending) are the
    Schmidt values of that sector; keys are tuples of floats (e.g. (2.0, 0.5)), sorted.
    """
    if not 0 <= cut <= L:
        raise ValueError(f"cut must be in 0..{L}, got {cut}")
    site_charges = np.asarray(site_charges, dtype=float)
    right_dim = site_charges.shape[0] ** (L - cut)
    left, right = np.divmod(np.asarray(index, dtype=np.int64), right_dim)
    left_q = np.round(product_charges(site_charges, cut)[left], 9)
    keys, group = np.unique(left_q, axis=0, return_inverse=True)
    group = np.asarray(group).ravel()
    out = {}
    for g, q in enumerate(keys):
        sel = group == g
        lvals, rows = np.unique(left[sel], return_inverse=True)
        rvals, cols = np.unique(right[sel], return_inverse=True)
        mat = np.zeros((lvals.size, rvals.size), dtype=vector.dtype)
        mat[rows, cols] = vector[sel]
        out[_charge_key(q)] = np.linalg.svd(mat, compute_uv=False)
    return dict(sorted(out.items()))
