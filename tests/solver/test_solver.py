"""Two-site ground-state sweeps against exact references.

Sources: exact diagonalisation with scipy.sparse (tests/reference_ed.py, a general-purpose
reference library, sharing no code with the engine); the XX chain's free-fermion spectrum
J cos(pi k/(L+1)) (Lieb, Schultz and Mattis, Ann. Phys. 16, 407 (1961)); Hulthen's ground-state
energy 1/4 - ln 2 per site of the Heisenberg chain (Hulthen, Ark. Mat. Astron. Fys. 26A (1938);
Bethe ansatz).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from models import get_family
from mps.solver.sweep import Stage, SweepSettings, energy_and_variance

import reference_ed as ed
from chains import CASES, SETTINGS, reference, solve, solved_case


@pytest.mark.parametrize("name", sorted(CASES))
def test_energy_and_schmidt_values_match_exact_diagonalisation(name):
    # Source: exact diagonalisation with scipy.sparse in the same charge sector.
    _check_against_exact_diagonalisation(name, *solved_case(name))


@pytest.mark.parametrize("name", ["xxz-all-couplings", "xxz-ferro-side-odd", "fermions-low-filling"])
def test_single_site_updates_with_expansion_match_exact_diagonalisation(name):
    # Source: exact diagonalisation with scipy.sparse in the same charge sector; single-site
    # updates with subspace expansion (Hubig et al., PRB 91, 155115 (2015)) from the same
    # random start must reach the same energy and every sector's Schmidt values, stopping by
    # the default rule (energy and Schmidt values settled).
    family, sites, couplings, charge = CASES[name]
    settings = dataclasses.replace(SETTINGS, update="single-site")
    _check_against_exact_diagonalisation(name, *solve(family, sites, couplings, charge, settings=settings))


def _check_against_exact_diagonalisation(name, mpo, search):
    family, sites, couplings, charge = CASES[name]
    h, basis, unit, offset = reference(family, sites, couplings, charge)
    e_exact, vec = ed.ground_state(h)
    assert search.progress.history[-1].energy == pytest.approx(e_exact, abs=1e-9)
    energy, variance = energy_and_variance(search.state, mpo)
    assert energy == pytest.approx(e_exact, abs=1e-9)
    assert abs(variance) < 1e-8
    units = get_family(family).space().charge_units
    for cut in range(1, sites):
        exact = ed.schmidt_by_sector(vec, basis, sites, cut, unit, offset)
        ours = {units[0] * q[0]: v for q, v in search.state.spectra[cut].as_dict().items()}
        for q, s in exact.items():
            s = s[s > 1e-7]
            mine = np.sort(ours.get(q, np.zeros(0)))[::-1][:len(s)]
            assert len(mine) == len(s), (cut, q)
            np.testing.assert_allclose(mine, s, atol=1e-7)


@pytest.mark.slow
def test_xx_chain_of_100_sites_matches_free_fermions():
    # Source: XX chain = free fermions with hopping J/2, single-particle energies J cos(pi k/(L+1)),
    # the ground state fills the negative ones (Lieb, Schultz and Mattis 1961; DESIGN.md section 5).
    sites = 100
    settings = SweepSettings((Stage(48, 2, 1e-5), Stage(96, 3, 0.0)), discard=1e-12, energy_tol=1e-10)
    _, search = solve("xxz", sites, dict(J=1.0, Delta=0.0), {"Sz": 0.0}, settings)
    k = np.arange(1, sites + 1)
    eps = np.cos(np.pi * k / (sites + 1))
    exact = eps[eps < 0].sum()
    assert abs(search.progress.energy - exact) / abs(exact) < 1e-8


def test_heisenberg_energy_per_site_extrapolates_to_hulthen():
    # Source: e0 = 1/4 - ln 2 (Hulthen 1938, Bethe ansatz). Open chains: E(L) = e0 L + b + O(1/L),
    # so the difference of two lengths removes the boundary energy b.
    settings = SweepSettings((Stage(32, 2, 1e-5), Stage(64, 4, 0.0)), discard=1e-10, energy_tol=1e-8)
    energies = {}
    for sites in (24, 48):
        _, search = solve("xxz", sites, dict(J=1.0, Delta=1.0), {"Sz": 0.0}, settings)
        energies[sites] = search.progress.energy
    e0 = (energies[48] - energies[24]) / 24
    assert abs(e0 - (0.25 - math.log(2))) < 1e-3


def test_jordan_wigner_equivalence_of_xxz_and_free_fermions():
    # Source: exact Jordan-Wigner map (DESIGN.md section 5): xxz at Delta = 0 equals the fermion
    # chain with t = J/2 (hopping sign is a gauge choice), S^z_j = n_j - 1/2 so that a staggered
    # field h_stag equals mu_stag = -h_stag, up to the constant -(1/2) sum_j h_stag (-1)^j = 0
    # for an even chain.
    sites = 14
    _, spins = solve("xxz", sites, dict(J=1.0, Delta=0.0, h_stag=0.3, dimer=0.2), {"Sz": 1.0})
    _, ferm = solve("fermions", sites, dict(t=0.5, V=0.0, mu_stag=-0.3, dimer=0.2), {"N": 8})
    assert spins.progress.energy == pytest.approx(ferm.progress.energy, abs=1e-10)


def test_state_vector_equals_exact_ground_state():
    # Source: exact diagonalisation with scipy.sparse; the whole MPS, contracted to a vector,
    # equals the exact ground state up to a global phase, and is normalised.
    from mps.chain.state import overlap, to_dense_vector

    family, sites, couplings, charge = CASES["xxz-all-couplings"]
    _, search = solved_case("xxz-all-couplings")
    h, basis, _, _ = reference(family, sites, couplings, charge)
    _, vec = ed.ground_state(h)
    psi = to_dense_vector(search.state)           # basis (down, up) is already charge-sorted
    bits = (basis[:, None] >> np.arange(sites)[None, :]) & 1
    amplitudes = psi[tuple(bits.T)]
    assert abs(np.vdot(vec, amplitudes)) == pytest.approx(1.0, abs=1e-10)
    assert abs(overlap(search.state, search.state)) == pytest.approx(1.0, abs=1e-12)
    assert np.linalg.norm(psi) == pytest.approx(1.0, abs=1e-12)


def test_reusing_contraction_plans_gives_bit_identical_sweeps(monkeypatch):
    """A plan is a pure function of the block structure, so a search that rebuilds every plan
    and every direct MPO step (caches that keep one of each) must give the same energies and
    tensors, bit for bit, as one that reuses them across bond steps and sweeps (issue
    requirement; checked here directly). The plans of whole chains (effective Hamiltonian,
    environment updates) are cached by the identity of their MPO entries, the riskiest key in
    the engine, so they are rebuilt too."""
    from mps.blocks.chain_plan import plan_three_cached
    from mps.blocks.contract import pair_plans, plan_contraction

    settings = SweepSettings((Stage(16, 3, 0.0),), discard=0.0, energy_tol=0.0)
    couplings = dict(J=1.0, Delta=0.6, h=0.1, h_stag=0.0, dimer=0.0)

    def search():
        _, s = solve("xxz", 12, couplings, {"Sz": 0.0}, settings=settings, seed=8)
        return s

    caches = (plan_contraction, pair_plans, plan_three_cached)
    for c in caches:
        c.cache_clear()
    before = [c.cache_info() for c in caches]
    reused = search()
    reuse_info = [c.cache_info() for c in caches]
    for c in caches:
        monkeypatch.setattr(c, "max_bytes", 0)
        c.cache_clear()
    rebuilt = search()
    rebuild_info = [c.cache_info() for c in caches]
    for c in caches:
        c.cache_clear()
    for b, u, r in zip(before, reuse_info, rebuild_info):
        assert u.hits - b.hits > 0
        assert r.misses - u.misses > u.misses - b.misses  # really rebuilt
    assert [r.energy for r in reused.progress.history] == [r.energy for r in rebuilt.progress.history]
    assert len(reused.progress.history) == 3
    for x, y in zip(reused.state.tensors, rebuilt.state.tensors):
        assert x.legs == y.legs and np.array_equal(x.data, y.data)
