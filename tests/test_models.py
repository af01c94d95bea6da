"""Model families as data: operator algebra, charges, term lists, registry, and the spectra
their terms produce compared with an independent exact diagonalisation."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

import models
from models import ModelFamily, UnknownNameError, family_names, get_family, register
from mps.chain.lattice import LocalSpace, Term

import reference_ed as ref

# ----------------------------------------------------------------------------- helpers


def op_charge(space: LocalSpace, mat: np.ndarray) -> np.ndarray | None:
    """The charge change q(out) - q(in) shared by every non-zero entry, or None if not definite."""
    out, inn = np.nonzero(np.abs(mat) > 1e-14)
    if out.size == 0:
        return np.zeros(space.nq, dtype=int)
    deltas = {tuple(space.charges[o] - space.charges[i]) for o, i in zip(out, inn)}
    return np.array(deltas.pop()) if len(deltas) == 1 else None


def dense_hamiltonian(space: LocalSpace, terms: list[Term], sites: int) -> np.ndarray:
    """Dense H on the full product space (site 0 leftmost in the Kronecker product).

    Fermionic operators get the Jordan-Wigner string prod_{k<j} P_k (P the local parity), so
    that they anticommute on different sites.
    """
    eye = np.eye(space.dim)
    full = np.zeros((space.dim**sites,) * 2, dtype=complex)
    cache: dict[tuple[int, str], np.ndarray] = {}

    def site_op(j: int, name: str) -> np.ndarray:
        if (j, name) not in cache:
            cache[j, name] = _site_op(j, name)
        return cache[j, name]

    def _site_op(j: int, name: str) -> np.ndarray:
        fermionic = name in space.fermionic
        mats = [
            space.ops[name] if k == j else (np.diag(space.parity) if fermionic and k < j else eye)
            for k in range(sites)
        ]
        out = mats[0]
        for m in mats[1:]:
            out = np.kron(out, m)
        return out

    for term in terms:
        (j0, name0), *rest = term.ops
        prod = site_op(j0, name0)
        for j, name in rest:
            prod = prod @ site_op(j, name)
        full += term.coef * prod
    return full


def total_charges(space: LocalSpace, sites: int) -> np.ndarray:
    """(dim**sites, k) total integer charge of every product state, in Kronecker order."""
    idx = np.indices((space.dim,) * sites).reshape(sites, -1).T
    return space.charges[idx].sum(axis=1)


def sector_spectra(fam: ModelFamily, sites: int, couplings: dict) -> dict[tuple[int, ...], np.ndarray]:
    """Eigenvalues of the dense H built from the family's terms, per total integer charge."""
    space = fam.space()
    H = dense_hamiltonian(space, fam.terms(sites, couplings), sites)
    q = total_charges(space, sites)
    out = {}
    for charge in sorted(set(map(tuple, q))):
        keep = np.all(q == np.array(charge), axis=1)
        out[charge] = np.linalg.eigvalsh(H[np.ix_(keep, keep)])
    return out


def adjoint_names(space: LocalSpace) -> dict[str, str]:
    out = {}
    for a, ma in space.ops.items():
        for b, mb in space.ops.items():
            if np.allclose(ma.conj().T, mb):
                out[a] = b
    return out


COUPLING_TABLE = {
    "xxz": [
        {},
        {"Delta": 0.6, "h_stag": 0.1},
        {"J": 0.7, "Delta": -0.4, "h": 0.3, "h_stag": -0.2, "dimer": 0.25},
        {"Delta": 0.0, "h": 0.2, "dimer": -0.3},
        {"dimer": 1.0},  # every odd bond switched off
    ],
    "fermions": [
        {},
        {"V": 1.3, "mu": 0.4},
        {"t": 0.8, "V": -0.5, "mu": 0.1, "mu_stag": 0.3, "dimer": 0.2},
        {"mu_stag": 0.5, "dimer": -1.0},
    ],
}
CASES = [(name, c) for name, table in COUPLING_TABLE.items() for c in table]
CASE_IDS = [f"{name}-{i}" for name, table in COUPLING_TABLE.items() for i in range(len(table))]


# ----------------------------------------------------------------------------- local algebra


def test_spin_half_algebra():
    # Source: spin-1/2 commutation relations (exact, standard).
    s = get_family("xxz").space()
    sp, sm, sz, one = s.ops["S^+"], s.ops["S^-"], s.ops["S^z"], np.eye(2)
    np.testing.assert_allclose(sp @ sm - sm @ sp, 2 * sz)
    np.testing.assert_allclose(sz @ sp - sp @ sz, sp)
    np.testing.assert_allclose(sz @ sm - sm @ sz, -sm)
    np.testing.assert_allclose(sm, sp.conj().T)
    sx, sy = (sp + sm) / 2, (sp - sm) / 2j
    np.testing.assert_allclose(sx @ sx + sy @ sy + sz @ sz, 0.75 * one)
    # basis (down, up) with charge 2 S^z and unit 0.5
    np.testing.assert_array_equal(s.charges[:, 0], [-1, 1])
    np.testing.assert_allclose(np.diag(sz), s.charges[:, 0] * s.charge_units[0])
    assert s.parity is None and not s.fermionic


def test_fermion_algebra():
    # Source: canonical anticommutation relations of one fermion mode (exact, standard).
    s = get_family("fermions").space()
    c, cd, n, one = s.ops["c"], s.ops["c^+"], s.ops["n"], np.eye(2)
    np.testing.assert_allclose(c @ cd + cd @ c, one)
    np.testing.assert_allclose(c @ c, 0)
    np.testing.assert_allclose(cd, c.conj().T)
    np.testing.assert_allclose(n, cd @ c)
    parity = np.diag(s.parity)
    np.testing.assert_allclose(parity, one - 2 * n)
    assert s.fermionic == {"c", "c^+"}
    np.testing.assert_allclose(np.diag(n), s.charges[:, 0] * s.charge_units[0])


BUILT_IN = [name for name in family_names() if not get_family(name).free_couplings]


@pytest.mark.parametrize("name", BUILT_IN)
def test_operators_have_definite_charge_and_parity(name):
    s = get_family(name).space()
    assert s.charges.shape == (s.dim, s.nq) and s.charges.dtype.kind == "i"
    assert s.charge_names == get_family(name).charge_names
    for op, mat in s.ops.items():
        assert mat.shape == (s.dim, s.dim)
        assert op_charge(s, mat) is not None, op
        if s.parity is not None:
            sign = -1 if op in s.fermionic else 1
            np.testing.assert_allclose(np.diag(s.parity) @ mat @ np.diag(s.parity), sign * mat)


def test_jordan_wigner_builder_anticommutes():
    # The test's own dense builder must make lattice fermions: {c_i, c+_j} = delta_ij.
    s = get_family("fermions").space()
    L = 3
    c = [dense_hamiltonian(s, [Term(1.0, ((j, "c"),))], L) for j in range(L)]
    for i, j in itertools.product(range(L), repeat=2):
        anti = c[i] @ c[j].conj().T + c[j].conj().T @ c[i]
        np.testing.assert_allclose(anti, np.eye(2**L) * (i == j), atol=1e-14)


# ----------------------------------------------------------------------------- terms


@pytest.mark.parametrize("name, couplings", CASES, ids=CASE_IDS)
def test_terms_conserve_charge_and_are_hermitian_as_a_set(name, couplings):
    fam = get_family(name)
    s, L = fam.space(), 7
    terms = fam.terms(L, couplings)
    adj = adjoint_names(s)
    assert set(adj) == set(s.ops)

    def key(coef, ops):
        ops = list(ops)
        if not any(op in s.fermionic for _, op in ops):
            ops.sort()  # bosonic operators on distinct sites commute
        return (complex(coef), tuple(ops))

    present = [key(t.coef, t.ops) for t in terms]
    for t in terms:
        assert all(0 <= j < L and op in s.ops for j, op in t.ops)
        total = sum(op_charge(s, s.ops[op]) for _, op in t.ops)
        assert not np.any(total), t
        conj = key(np.conj(t.coef), [(j, adj[op]) for j, op in reversed(t.ops)])
        assert present.count(conj) == present.count(key(t.coef, t.ops)), t
    H = dense_hamiltonian(s, fam.terms(5, couplings), 5)
    np.testing.assert_allclose(H, H.conj().T, atol=1e-14)


def _expected_count(name: str, L: int, c: dict) -> int:
    """Number of non-zero terms from the formula in the family's docstring."""
    stag = [1 if j % 2 == 0 else -1 for j in range(L)]
    if name == "xxz":
        c = {**models.xxz.COUPLINGS, **c}
        bonds = sum(c["J"] * (1 + c["dimer"] * stag[j]) != 0 for j in range(L - 1))
        fields = sum(c["h"] + c["h_stag"] * stag[j] != 0 for j in range(L))
        return bonds * (2 + (c["Delta"] != 0)) + fields
    c = {**models.fermions.COUPLINGS, **c}
    bonds = sum(c["t"] * (1 + c["dimer"] * stag[j]) != 0 for j in range(L - 1))
    pots = sum(c["mu"] + c["mu_stag"] * stag[j] != 0 for j in range(L))
    return 2 * bonds + (L - 1) * (c["V"] != 0) + pots


@pytest.mark.parametrize("name, couplings", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("L", [2, 5, 8])
def test_number_of_terms(name, couplings, L):
    assert len(get_family(name).terms(L, couplings)) == _expected_count(name, L, couplings)


def test_number_of_terms_closed_forms():
    # generic couplings: xxz 3 per bond + 1 per site; t-V 3 per bond + 1 per site
    assert len(get_family("xxz").terms(10, {"Delta": 0.5, "h": 0.1})) == 3 * 9 + 10
    assert len(get_family("xxz").terms(10, {"Delta": 0.0})) == 2 * 9
    assert len(get_family("fermions").terms(10, {"V": 1.0, "mu": 0.2})) == 3 * 9 + 10
    assert len(get_family("fermions").terms(10, {})) == 2 * 9


def test_default_charge():
    assert get_family("xxz").default_charge(32) == {"Sz": 0.0}
    assert get_family("xxz").default_charge(33) == {"Sz": 0.5}
    assert get_family("fermions").default_charge(9) == {"N": 4.0}


# ----------------------------------------------------------------------------- registry


def test_registry_lookup_and_errors():
    assert {"xxz", "fermions"} <= set(family_names())
    assert family_names() == sorted(family_names())
    with pytest.raises(KeyError) as info:
        get_family("hubbard-ish")
    assert "hubbard-ish" in str(info.value)
    for valid in family_names():
        assert valid in str(info.value)
    with pytest.raises(UnknownNameError, match="valid: Delta, J, dimer, h, h_stag"):
        get_family("xxz").terms(4, {"t": 1.0})
    with pytest.raises(ValueError, match="already registered"):
        register(get_family("xxz"))


def test_family_from_module_layout():
    fam = ModelFamily.from_module(models.xxz)
    assert fam.name == "xxz" and fam.couplings == models.xxz.COUPLINGS
    assert fam.resolve_couplings({"Delta": 2}) == {**models.xxz.COUPLINGS, "Delta": 2.0}


# ----------------------------------------------------------------------------- free chains


def test_xx_chain_single_particle_energies():
    # Source: DESIGN.md section 5 -- open XX chain = free fermions with hopping J/2, energies
    # J cos(pi k/(L+1)), k = 1..L (Lieb, Schultz and Mattis, Ann. Phys. 16, 407 (1961); exact).
    L, J = 12, 1.3
    h, unit, offset = get_family("xxz").single_particle(L, {"J": J, "Delta": 0.0})
    k = np.arange(1, L + 1)
    np.testing.assert_allclose(np.linalg.eigvalsh(h), np.sort(J * np.cos(np.pi * k / (L + 1))), atol=1e-12)
    assert (unit, offset) == (1.0, -0.5)


def test_single_particle_only_for_quadratic_chains():
    assert get_family("xxz").single_particle(6, {"Delta": 0.3}) is None
    assert get_family("fermions").single_particle(6, {"V": 0.3}) is None
    h, unit, offset = get_family("fermions").single_particle(6, {"mu": 0.2})
    assert h.shape == (6, 6) and (unit, offset) == (1.0, 0.0)
    np.testing.assert_allclose(h, h.T)


@pytest.mark.parametrize(
    "name, couplings",
    [
        ("xxz", {"Delta": 0.0}),
        ("xxz", {"J": 0.9, "Delta": 0.0, "h": 0.15, "h_stag": -0.3, "dimer": 0.4}),
        ("fermions", {}),
        ("fermions", {"t": 1.1, "mu": -0.2, "mu_stag": 0.35, "dimer": -0.25}),
    ],
)
def test_single_particle_matrix_reproduces_many_body_spectrum(name, couplings):
    # Source: exact -- for H = sum h_ij c+_i c_j + const the N-particle levels are sums of N
    # distinct single-particle energies (Slater determinants); checked on the dense H of the terms.
    fam, L = get_family(name), 6
    h, unit, offset = fam.single_particle(L, couplings)
    eps = np.linalg.eigvalsh(h)
    c = fam.resolve_couplings(couplings)
    const = -0.5 * sum(c["h"] + c["h_stag"] * (-1) ** j for j in range(L)) if name == "xxz" else 0.0
    spectra = sector_spectra(fam, L, couplings)
    for n in range(L + 1):
        q = int(round((unit * n + offset * L) / fam.space().charge_units[0]))
        levels = sorted(sum(eps[list(occ)]) + const for occ in itertools.combinations(range(L), n))
        np.testing.assert_allclose(spectra[(q,)], levels, atol=1e-11)


# ----------------------------------------------------------------------------- reference ED


@pytest.mark.parametrize("name, couplings", CASES, ids=CASE_IDS)
def test_spectrum_matches_reference_ed_in_every_sector(name, couplings):
    # Source: exact diagonalisation with scipy.sparse (tests/reference_ed.py, built from the
    # DESIGN.md section 3 formulas without project code); every sector of L = 6 compared.
    L, fam = 6, get_family(name)
    spectra = sector_spectra(fam, L, couplings)
    c = fam.resolve_couplings(couplings)
    for n in range(L + 1):
        if name == "xxz":
            H, _ = ref.xxz_sector(L, n, **c)
            charge = (2 * n - L,)  # integer charge 2 S^z with n up spins
        else:
            H, _ = ref.fermion_sector(L, n, **c)
            charge = (n,)
        np.testing.assert_allclose(spectra[charge], np.linalg.eigvalsh(H.toarray()), atol=1e-11)
