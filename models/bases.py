"""Catalogue of local bases: the states of one site, their charges, named operators and parity.

Every chain is built on one of these sites; the built-in families and chains written in YAML use
the same catalogue, so an operator name means the same matrix everywhere. Operator names are the
textbook symbols spelled with ``^`` for superscripts and ``_`` for species labels:

- ``spin-half``: ``S^z S^+ S^-``; charge Sz (stored as 2 S^z, unit 1/2).
- ``spin-one``: ``S^z S^+ S^-``; charge Sz (unit 1).
- ``spinless-fermion``: ``c^+ c n``; charge N.
- ``spinful-fermion``: ``c_up^+ c_up c_dn^+ c_dn n_up n_dn n`` and the on-site spin ``S^z S^+ S^-``;
  charges N and Sz (stored as N_up - N_dn, unit 1/2).
- ``boson-mode``: ``b^+ b n``, occupations 0..``nmax``; charge N.
- ``boson-ab``: ``a^+ a b^+ b n_a n_b n``, 0..``nmax`` each; charges Q = N_a - N_b and N = N_a + N_b.

``X^+`` is the Hermitian conjugate of ``X`` (c^dagger written c^+), so ``S^+`` raises S^z and
``c^+`` creates a fermion; ``n`` is the total number on the site. Fermionic operators (``c``-type)
act as lattice fermions: the operator builder adds the Jordan-Wigner strings (Jordan and Wigner,
Z. Phys. 47, 631 (1928)); on a spinful site the doubly occupied state is
|up dn> = c_up^+ c_dn^+ |0>, which fixes the on-site signs.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from mps.chain.lattice import LocalSpace

NMAX_LIMIT = 12   # largest boson cutoff accepted (d = 13 per species; 169 for boson-ab)


def _spin(s2: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """S^z and S^+ of spin s = s2/2 in the basis m = -s, ..., s (ascending), ops[out, in]."""
    m = np.arange(-s2, s2 + 1, 2) / 2.0
    s = s2 / 2.0
    sp = np.zeros((m.size, m.size))
    for i in range(m.size - 1):  # S^+ |m> = sqrt(s(s+1) - m(m+1)) |m+1>
        sp[i + 1, i] = np.sqrt(s * (s + 1) - m[i] * (m[i] + 1))
    return m, np.diag(m), sp


def _spin_site(s2: int, unit: float) -> LocalSpace:
    m, sz, sp = _spin(s2)
    return LocalSpace(
        charges=np.rint(m / unit).astype(np.int64)[:, None],
        charge_names=("Sz",),
        charge_units=(unit,),
        ops={"S^z": sz, "S^+": sp, "S^-": sp.T.copy()},
        adjoints={"S^z": "S^z", "S^+": "S^-", "S^-": "S^+"},
    )


def spin_half() -> LocalSpace:
    """Spin 1/2, basis (down, up), charge 2 S^z in (-1, 1), unit 1/2."""
    return _spin_site(1, 0.5)


def spin_one() -> LocalSpace:
    """Spin 1, basis m = (-1, 0, 1), charge S^z, unit 1."""
    return _spin_site(2, 1.0)


def spinless_fermion() -> LocalSpace:
    """One fermion mode, basis (empty, occupied), charge N, parity (1, -1)."""
    c = np.array([[0.0, 1.0], [0.0, 0.0]])  # c |1> = |0>
    return LocalSpace(
        charges=np.array([[0], [1]]),
        charge_names=("N",),
        charge_units=(1.0,),
        ops={"c^+": c.T.copy(), "c": c, "n": np.diag([0.0, 1.0])},
        fermionic=frozenset({"c^+", "c"}),
        parity=np.array([1.0, -1.0]),
        adjoints={"c^+": "c", "c": "c^+", "n": "n"},
    )


def spinful_fermion() -> LocalSpace:
    """Spin-1/2 fermions, basis (|0>, |up>, |dn>, |up dn> = c_up^+ c_dn^+ |0>).

    Charges N (unit 1) and Sz stored as N_up - N_dn (unit 1/2); parity (1, -1, -1, 1).
    c_dn^+ |up> = c_dn^+ c_up^+ |0> = -|up dn>: the on-site sign of the fixed order (up before dn).
    """
    cu_dag = np.zeros((4, 4))
    cu_dag[1, 0] = 1.0   # |0> -> |up>
    cu_dag[3, 2] = 1.0   # |dn> -> c_up^+ c_dn^+ |0> = |up dn>
    cd_dag = np.zeros((4, 4))
    cd_dag[2, 0] = 1.0   # |0> -> |dn>
    cd_dag[3, 1] = -1.0  # |up> -> c_dn^+ c_up^+ |0> = -|up dn>
    n_up, n_dn = cu_dag @ cu_dag.T, cd_dag @ cd_dag.T
    flip = cu_dag @ cd_dag.T   # S^+ = c_up^+ c_dn
    return LocalSpace(
        charges=np.array([[0, 0], [1, 1], [1, -1], [2, 0]]),
        charge_names=("N", "Sz"),
        charge_units=(1.0, 0.5),
        ops={"c_up^+": cu_dag, "c_up": cu_dag.T.copy(), "c_dn^+": cd_dag, "c_dn": cd_dag.T.copy(),
             "n_up": n_up, "n_dn": n_dn, "n": n_up + n_dn, "S^z": 0.5 * (n_up - n_dn),
             "S^+": flip, "S^-": flip.T.copy()},
        fermionic=frozenset({"c_up^+", "c_up", "c_dn^+", "c_dn"}),
        parity=np.array([1.0, -1.0, -1.0, 1.0]),
        adjoints={"c_up^+": "c_up", "c_up": "c_up^+", "c_dn^+": "c_dn", "c_dn": "c_dn^+", "n_up": "n_up",
                  "n_dn": "n_dn", "n": "n", "S^z": "S^z", "S^+": "S^-", "S^-": "S^+"},
    )


def _ladder(nmax: int) -> np.ndarray:
    """b^+ on occupations 0..nmax: b^+ |n> = sqrt(n + 1) |n + 1> (the top state is cut off)."""
    return np.diag(np.sqrt(np.arange(1.0, nmax + 1)), -1)


def boson(nmax: int) -> LocalSpace:
    """One boson mode with occupations 0..nmax, charge N."""
    up = _ladder(nmax)
    return LocalSpace(
        charges=np.arange(nmax + 1)[:, None],
        charge_names=("N",),
        charge_units=(1.0,),
        ops={"b^+": up, "b": up.T.copy(), "n": np.diag(np.arange(nmax + 1.0))},
        adjoints={"b^+": "b", "b": "b^+", "n": "n"},
        cutoff=(np.arange(nmax + 1) == nmax).astype(float),
    )


def boson_ab(nmax: int) -> LocalSpace:
    """Two boson species a, b with occupations 0..nmax each; basis index n_a (nmax + 1) + n_b.

    Charges Q = N_a - N_b and N = N_a + N_b (unit 1 each). With particles a and antiparticles b
    this is the site of the lattice complex scalar, whose Hamiltonian conserves Q only
    (keep just Q with ``LocalSpace.keep_charges``).
    """
    up, eye = _ladder(nmax), np.eye(nmax + 1)
    na, nb = np.divmod(np.arange((nmax + 1) ** 2), nmax + 1)
    a_dag, b_dag = np.kron(up, eye), np.kron(eye, up)
    return LocalSpace(
        charges=np.column_stack([na - nb, na + nb]).astype(np.int64),
        charge_names=("Q", "N"),
        charge_units=(1.0, 1.0),
        ops={"a^+": a_dag, "a": a_dag.T.copy(), "b^+": b_dag, "b": b_dag.T.copy(),
             "n_a": np.diag(na.astype(float)), "n_b": np.diag(nb.astype(float)),
             "n": np.diag((na + nb).astype(float))},
        adjoints={"a^+": "a", "a": "a^+", "b^+": "b", "b": "b^+", "n_a": "n_a", "n_b": "n_b", "n": "n"},
        cutoff=((na == nmax) | (nb == nmax)).astype(float),
    )


@dataclass(frozen=True)
class BasisEntry:
    """One catalogue entry: ``make()`` or ``make(nmax)`` builds the site."""

    name: str
    description: str
    needs_nmax: bool
    make: Callable[..., LocalSpace]


CATALOGUE: dict[str, BasisEntry] = {
    e.name: e for e in (
        BasisEntry("spin-half", "spin 1/2; charge Sz", False, spin_half),
        BasisEntry("spin-one", "spin 1; charge Sz", False, spin_one),
        BasisEntry("spinless-fermion", "one fermion mode; charge N", False, spinless_fermion),
        BasisEntry("spinful-fermion", "spin-1/2 fermions; charges N and Sz", False, spinful_fermion),
        BasisEntry("boson-mode", "one boson mode, occupations 0..nmax; charge N", True, boson),
        BasisEntry("boson-ab", "two boson species a, b, 0..nmax each; charges Q = N_a - N_b, N = N_a + N_b",
                   True, boson_ab),
    )
}


def basis_names() -> list[str]:
    """Names of the catalogue, in catalogue order."""
    return list(CATALOGUE)


def make_basis(name: str, nmax: int | None = None) -> LocalSpace:
    """The site ``name`` of the catalogue; ``nmax`` (1..NMAX_LIMIT) for the boson bases only."""
    if name not in CATALOGUE:
        raise KeyError(f"unknown basis {name!r}; known: {', '.join(CATALOGUE)}")
    entry = CATALOGUE[name]
    if not entry.needs_nmax:
        if nmax is not None:
            raise ValueError(f"basis {name!r} takes no nmax")
        return entry.make()
    if isinstance(nmax, bool) or not isinstance(nmax, (int, np.integer)) or not 1 <= nmax <= NMAX_LIMIT:
        raise ValueError(f"basis {name!r} needs an integer nmax in 1..{NMAX_LIMIT}, got {nmax!r}")
    return entry.make(int(nmax))
