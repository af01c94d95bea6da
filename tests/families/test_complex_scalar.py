"""The lattice complex scalar (family ``complex-scalar``): terms against exact diagonalisation, the free
chain against the exact harmonic-chain energy, a run through the command line, config refusals.

The reference Hamiltonian is written here from the field formula (DESIGN.md section 3),
H = sum_j [pi+_j pi_j + m_j^2 phi+_j phi_j] + sum over the L + 1 bonds (Dirichlet ends) of
|phi_{j+1} - phi_j|^2 + lam sum_j (phi+_j phi_j)^2, with phi and pi built from the ladder matrices
of tests/reference_sites.py (two_boson_species): it shares no code with models/scalar.py and never
uses its a/b bond formula.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.sparse as sp
import yaml
from test_families_ed import EXACT, check_against_ed

from models import get_family
from models.bases import NMAX_LIMIT
from mps.pipeline.cli import main

import reference_sites as ref
from chains import solve


def onsite_block(nmax: int, mass: float, lam: float) -> np.ndarray:
    """pi+ pi + (mass^2 + 2) phi+ phi + lam (phi+ phi)^2 on one site, as P O P (real).

    phi = (a + b+)/sqrt(2 w), pi = i sqrt(w/2)(a+ - b), w = sqrt(mass^2 + 2). The products are taken
    on occupations 0..nmax + 2 and restricted to 0..nmax, so every matrix element between kept states
    is that of the untruncated operator (the same projection the family documents).
    """
    big = ref.two_boson_species(nmax + 2).ops
    w = np.sqrt(mass**2 + 2.0)
    phi = (big["a"] + big["b_dag"]) / np.sqrt(2.0 * w)
    pi = 1j * np.sqrt(w / 2.0) * (big["a_dag"] - big["b"])
    dens = phi.conj().T @ phi
    h = pi.conj().T @ pi + w**2 * dens + lam * dens @ dens
    na, nb = np.divmod(np.arange((nmax + 3) ** 2), nmax + 3)
    keep = np.nonzero((na <= nmax) & (nb <= nmax))[0]
    h = h[np.ix_(keep, keep)]
    assert np.abs(h.imag).max() < 1e-12
    return h.real


def scalar_chain(L: int, nmax: int, m: float, m_stag: float = 0.0, lam: float = 0.0):
    """(H, charges (Q,) of all product states) of the truncated chain, from the field formula.

    The gradient sum over the L + 1 bonds gives phi+_j phi_j twice per site (in onsite_block with
    m_j^2 + 2) and the cross terms -(phi+_{j+1} phi_j + h.c.) on the L - 1 inner bonds; phi on one
    site changes each occupation by one, so its truncated matrix is already P phi P.
    """
    site = ref.two_boson_species(nmax)
    masses = m + m_stag * (-1.0) ** np.arange(L)
    w = np.sqrt(masses**2 + 2.0)
    phi = [(site.ops["a"] + site.ops["b_dag"]) / np.sqrt(2.0 * wj) for wj in w]
    H = sp.csr_matrix((site.dim**L,) * 2)
    for j in range(L - 1):
        cross = ref.operator_product(site, L, [(j + 1, phi[j + 1].T), (j, phi[j])])   # phi real: phi+ = phi.T
        H = H - cross - cross.T
    for j in range(L):
        H = H + ref.site_operator(site, L, j, onsite_block(nmax, masses[j], lam))
    H = sp.csr_matrix(H)
    H.eliminate_zeros()
    return H, ref.product_charges(site.charges, L)[:, :1]


def harmonic_energy(masses: np.ndarray) -> float:
    """sum_k omega_k, omega_k^2 the eigenvalues of V = diag(m_j^2 + 2) - shift - shift^T."""
    L = masses.size
    V = np.diag(masses**2 + 2.0) - np.eye(L, k=1) - np.eye(L, k=-1)
    return float(np.sqrt(np.linalg.eigvalsh(V)).sum())


def site_digits(index: np.ndarray, L: int, d: int) -> np.ndarray:
    """(len(index), L) local basis index of every site (site 0 the slowest, reference_sites order)."""
    return (index[:, None] // d ** np.arange(L - 1, -1, -1)) % d


# ----------------------------------------------------------------------------- terms against ED


@pytest.mark.parametrize("charge", [0, 1])
def test_terms_match_exact_diagonalisation_with_every_coupling(charge):
    # Source: exact diagonalisation with scipy.sparse (tests/reference_sites.py, reference library),
    # Hamiltonian written above from the field formula of DESIGN.md section 3. Energy to 1e-9 and
    # the Schmidt values of every charge sector of both cuts to 1e-7, as for the other families.
    L, nmax, couplings = 3, 3, dict(m=0.8, m_stag=0.3, lam=0.6)
    mpo, search = solve("complex-scalar", L, couplings, {"Q": charge}, EXACT, options={"nmax": nmax})
    H, charges = scalar_chain(L, nmax, **couplings)
    site = ref.two_boson_species(nmax)
    check_against_ed(search, mpo, H, charges, site.charges[:, :1], (float(charge),), (1.0,), L)


def test_free_chain_hooks():
    fam = get_family("complex-scalar")
    np.testing.assert_allclose(fam.scalar_masses(5, {"m": 0.5, "m_stag": 0.2}), [0.7, 0.3, 0.7, 0.3, 0.7])
    assert fam.scalar_masses(5, {"lam": 0.1}) is None            # interacting: not quadratic
    assert fam.single_particle(5) is None                         # not a fermion chain
    assert get_family("xxz").scalar_masses(4) is None             # the default of every other family
    assert fam.default_charge(7) == {"Q": 0.0}
    assert fam.space({"nmax": 2}).charge_names == ("Q",)


# ----------------------------------------------------------------------------- free chain


def thermal_top(masses: np.ndarray, nmax: int) -> float:
    """p = max_j nbar_j^nmax / (1 + nbar_j)^(nmax + 1) of the untruncated free ground state.

    X = V^{-1/2}/2, P = V^{1/2}/2 (Peschel and Eisler, J. Phys. A 42, 504003 (2009), harmonic chain,
    from memory); each of a_j, b_j is thermal with nbar_j = (w X_jj + P_jj / w)/2 - 1/2 (derived in
    models/scalar.py), so the probability of n_a = nmax or n_b = nmax lies in [p_j, 2 p_j].
    """
    L = masses.size
    e, U = np.linalg.eigh(np.diag(masses**2 + 2.0) - np.eye(L, k=1) - np.eye(L, k=-1))
    X = np.einsum("jk,k,jk->j", U, e**-0.5, U) / 2
    P = np.einsum("jk,k,jk->j", U, e**0.5, U) / 2
    w = np.sqrt(masses**2 + 2.0)
    nbar = (w * X + P / w) / 2 - 0.5
    return float(np.max(nbar**nmax / (1 + nbar) ** (nmax + 1)))


@pytest.mark.parametrize("m, m_stag, nmaxes", [(1.0, 0.0, (2, 3, 4, 5)), (0.3, 0.0, (3, 4, 5, 6)),
                                               (0.8, 0.4, (3, 5))])
def test_free_chain_energy_approaches_the_harmonic_chain(m, m_stag, nmaxes):
    # Source: exact diagonalisation with scipy.sparse (reference library) of the truncated chain,
    # against E = sum_k omega_k (Peschel and Eisler, J. Phys. A 42, 504003 (2009), from memory,
    # harmonic chain). The truncated Hamiltonian is P H P, so E(nmax) >= E exactly (variational) and
    # decreases with nmax; the bound E(nmax) - E <= (nmax + 1) w0 sum_j top_j (the top-occupation
    # weight of each site times the energy of nmax + 1 local quanta) is a rule of thumb (common
    # practice), not a derived bound. The top weight itself must lie near [p, 2p] of thermal_top
    # (factor 2 allowed either way for the truncation's own effect: rule of thumb).
    L = 3
    masses = get_family("complex-scalar").scalar_masses(L, {"m": m, "m_stag": m_stag})
    exact = harmonic_energy(masses)
    w0 = np.sqrt(masses.max() ** 2 + 2.0)
    errors = []
    for nmax in nmaxes:
        H, charges = scalar_chain(L, nmax, m, m_stag)
        energy, vec, index = ref.sector_ground_state(H, charges, (0.0,))
        na, nb = np.divmod(site_digits(index, L, (nmax + 1) ** 2), nmax + 1)
        top = (np.abs(vec) ** 2) @ ((na == nmax) | (nb == nmax))
        error = energy - exact
        assert -1e-10 < error <= (nmax + 1) * w0 * top.sum(), (nmax, error, top)
        p = thermal_top(masses, nmax)
        assert 0.5 * p < top.max() < 4.0 * p, (nmax, top.max(), p)
        errors.append(error)
    assert all(a > b for a, b in zip(errors, errors[1:])), errors


def test_free_ground_state_is_neutral_and_charge_conjugation_symmetric():
    # Source: exact diagonalisation with scipy.sparse (reference library). H commutes with the
    # exchange a <-> b on every site (charge conjugation, Q -> -Q; exact, the cutoff is symmetric),
    # so E(Q) = E(-Q); the free ground state is the neutral vacuum (Q = 0, C-even).
    L, nmax, m = 3, 3, 1.0
    H, charges = scalar_chain(L, nmax, m)
    energies = {q: ref.sector_ground_state(H, charges, (float(q),))[0] for q in (-1, 0, 1)}
    assert energies[1] == pytest.approx(energies[-1], abs=1e-9)
    assert energies[0] < energies[1] - 0.5          # gap of about 2 omega_min = 2.3 (pair of quanta)
    _, vec, index = ref.sector_ground_state(H, charges, (0.0,))
    d = (nmax + 1) ** 2
    digits = site_digits(index, L, d)
    na, nb = np.divmod(digits, nmax + 1)
    swapped = (nb * (nmax + 1) + na) @ d ** np.arange(L - 1, -1, -1)
    position = {int(i): k for k, i in enumerate(index)}
    image = vec[[position[int(i)] for i in swapped]]    # (C psi) on the same sector states
    assert float(vec @ image) == pytest.approx(1.0, abs=1e-9)


# ----------------------------------------------------------------------------- command line


def test_run_through_the_command_line(tmp_path, capsys):
    # Source: exact diagonalisation with scipy.sparse (reference library) of the same truncated
    # chain (Hamiltonian written above). L = 6 and nmax = 2 keep the reference at 9^6 states (nmax 3
    # would be 16^6); the cutoff then holds about 7e-4 (thermal_top), so the run also warns.
    # Tolerances 1e-8 on the energy and on the cutoff weight: common practice for these stages
    # (measured: 2e-11 and 5e-12, variance 3e-10).
    L, nmax, m = 6, 2, 1.0
    cfg = {"name": "scalar", "model": {"family": "complex-scalar", "sites": L, "nmax": nmax,
                                       "couplings": {"m": m}},
           "solver": {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 32, "sweeps": 3}], "discard": 1e-14,
                      "energy_tol": 1e-12},
           "output": {"dir": str(tmp_path / "run"), "plots": False}}
    (tmp_path / "c.yaml").write_text(yaml.safe_dump(cfg))
    assert main(["run", str(tmp_path / "c.yaml")]) == 0
    assert "raise model.nmax" in capsys.readouterr().err
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    H, charges = scalar_chain(L, nmax, m)
    energy, vec, index = ref.sector_ground_state(H, charges, (0.0,))
    assert summary["energy"] == pytest.approx(energy, abs=1e-8)
    na, nb = np.divmod(site_digits(index, L, (nmax + 1) ** 2), nmax + 1)
    top = (np.abs(vec) ** 2) @ ((na == nmax) | (nb == nmax))
    assert summary["cutoff_weight"] == pytest.approx(top.max(), abs=1e-8)


# ----------------------------------------------------------------------------- config refusals


@pytest.mark.parametrize("model, field", [
    ({"couplings": {"m": 1.0, "mu": 0.2}}, "chargewise: model.couplings.mu: unknown coupling"),
    ({"nmax": NMAX_LIMIT + 1}, f"chargewise: model.nmax: must be an integer in 1..{NMAX_LIMIT}"),
    ({"nmax": 0}, "chargewise: model.nmax: must be an integer >= 1"),
])
def test_bad_config_is_refused_with_exit_2(tmp_path, capsys, model, field):
    path = tmp_path / "c.yaml"
    path.write_text(yaml.safe_dump({"name": "s", "model": {"family": "complex-scalar", "sites": 4, **model}}))
    assert main(["check", str(path)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith(field), captured.err
