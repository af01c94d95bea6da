"""Every family, and chains written in YAML, against exact diagonalisation in the same sector.

Source of every reference value here: exact diagonalisation with scipy.sparse
(tests/reference_sites.py, Hamiltonians written from their formulas as Kronecker products,
sharing no code with the engine). Energies must agree to 1e-9 and the Schmidt values of every
charge sector of every cut to 1e-7.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from mps.pipeline.config import config_hash, parse_config
from mps.pipeline.schema import dump_config
from mps.solver.sweep import Stage, SweepSettings, energy_and_variance

import reference_sites as ref
from chains import solve

EXACT = SweepSettings((Stage(32, 2, 1e-5), Stage(160, 6, 0.0)), discard=1e-15, energy_tol=1e-12)
WIDE = SweepSettings((Stage(48, 2, 1e-5), Stage(320, 5, 0.0)), discard=1e-15, energy_tol=1e-12)


def check_against_ed(search, mpo, H, charges, site_charges, target, units, sites):
    e_exact, vec, index = ref.sector_ground_state(H, charges, target)
    energy, variance = energy_and_variance(search.state, mpo)
    assert energy == pytest.approx(e_exact, abs=1e-9)
    assert abs(variance) < 1e-8
    for cut in range(1, sites):
        exact = ref.schmidt_by_sector(vec, index, sites, site_charges, cut)
        ours = {tuple(round(u * c, 9) + 0.0 for u, c in zip(units, q)): v
                for q, v in search.state.spectra[cut].as_dict().items()}
        for q, s in exact.items():
            s = s[s > 1e-7]
            mine = np.sort(ours.get(q, np.zeros(0)))[::-1][:len(s)]
            assert len(mine) == len(s), (cut, q)
            np.testing.assert_allclose(mine, s, atol=1e-7, err_msg=f"cut {cut}, sector {q}")


# name -> (family, sites, couplings, charge, options, reference builder, local site, settings)
CASES = {
    "hubbard-half-filling": ("hubbard", 6, dict(t=1.0, U=4.0), {"N": 6, "Sz": 0.0}, None,
                             lambda: ref.hubbard(6, t=1.0, U=4.0), ref.spinful_fermion(), EXACT),
    "hubbard-doped-all-couplings": ("hubbard", 6, dict(t=0.9, U=2.5, mu=0.3, mu_stag=0.4, dimer=0.2),
                                    {"N": 4, "Sz": 1.0}, None,
                                    lambda: ref.hubbard(6, t=0.9, U=2.5, mu=0.3, mu_stag=0.4, dimer=0.2),
                                    ref.spinful_fermion(), EXACT),
    "bosons-unit-filling": ("bosons", 8, dict(t=1.0, U=2.0, mu=0.3), {"N": 8}, {"nmax": 3},
                            lambda: ref.bosons(8, 3, t=1.0, U=2.0, mu=0.3), ref.boson(3), WIDE),
    "spin1-heisenberg": ("spin1", 8, dict(J=1.0, Delta=1.0), {"Sz": 0}, None,
                         lambda: ref.spin1(8, J=1.0, Delta=1.0), ref.spin_one(), EXACT),
    "spin1-anisotropic": ("spin1", 7, dict(J=0.8, Delta=1.3, D=0.4, h=0.2), {"Sz": 1}, None,
                          lambda: ref.spin1(7, J=0.8, Delta=1.3, D=0.4, h=0.2), ref.spin_one(), EXACT),
}


@pytest.mark.parametrize("name", list(CASES), ids=list(CASES))
def test_family_matches_exact_diagonalisation(name):
    family, sites, couplings, charge, options, build, site, settings = CASES[name]
    mpo, search = solve(family, sites, couplings, charge, settings, options=options)
    H, charges = build()
    names = list(charge)
    target = tuple(float(charge[n]) for n in names)
    units = tuple(1.0 if n != "Sz" or family == "spin1" else 0.5 for n in names)
    check_against_ed(search, mpo, H, charges, site.charges, target, units, sites)


def written(basis, sites, couplings, charge, terms, **extra):
    cfg = parse_config({"model": {"family": "written", "basis": basis, "sites": sites, "couplings": couplings,
                                  "charge": charge, "terms": terms, **extra}})
    return cfg.model


def solve_written(model, settings):
    return solve("written", model.sites, model.couplings, model.charge, settings, options=model.options)


def test_written_zigzag_chain_with_next_nearest_neighbours():
    # J1-J2 chain (zig-zag ladder) with an xxz anisotropy on the second-neighbour bonds.
    L = 10
    model = written("spin-half", L, {"J1": 1.0, "J2": 0.45}, {"Sz": 0}, [
        {"product": "S^+(j) S^-(j+1)", "coef": "0.5*J1", "add_conjugate": True},
        {"product": "S^z(j) S^z(j+1)", "coef": "J1"},
        {"product": "S^+(j) S^-(j+2)", "coef": "0.5*J2", "add_conjugate": True},
        {"product": "S^z(j) S^z(j+2)", "coef": "0.7*J2"},
    ])
    mpo, search = solve_written(model, EXACT)
    pairs = [(j, j + 1, 1.0, 1.0) for j in range(L - 1)] + [(j, j + 2, 0.45, 0.7 * 0.45) for j in range(L - 2)]
    H, charges = ref.spin_half_graph(L, pairs)
    check_against_ed(search, mpo, H, charges, ref.spin_half().charges, (0.0,), (0.5,), L)


def test_written_chain_with_per_site_couplings():
    # A disorder realisation: random exchange per bond and random fields per site (fixed seed).
    L = 9
    rng = np.random.default_rng(7)
    bonds, fields = rng.uniform(0.5, 1.5, L - 1), rng.uniform(-1.0, 1.0, L)
    model = written("spin-half", L, {}, {"Sz": 0.5}, [
        {"product": "S^+(j) S^-(j+1)", "coef": {"per_site": [0.5 * b for b in bonds]}, "add_conjugate": True},
        {"product": "S^z(j) S^z(j+1)", "coef": {"per_site": bonds.tolist()}},
        {"product": "S^z(j)", "coef": {"per_site": fields.tolist()}},
    ])
    mpo, search = solve_written(model, EXACT)
    H, charges = ref.spin_half_graph(L, [(j, j + 1, bonds[j], bonds[j]) for j in range(L - 1)], fields)
    check_against_ed(search, mpo, H, charges, ref.spin_half().charges, (0.5,), (0.5,), L)


def test_written_chain_with_seeded_random_fields():
    # Random fields drawn by the chain itself ({random: W, seed: sample}); the reference draws the same
    # fields with numpy's default_rng(sample) and diagonalises the Heisenberg chain with them.
    L, W, sample = 8, 0.8, 5
    terms = [{"product": "S^+(j) S^-(j+1)", "coef": 0.5, "add_conjugate": True},
             {"product": "S^z(j) S^z(j+1)", "coef": 1.0},
             {"product": "S^z(j)", "coef": {"value": 0.0, "random": "W", "seed": "sample"}}]
    model = written("spin-half", L, {"W": W, "sample": sample}, {"Sz": 0}, terms)
    again = parse_config(yaml.safe_load(dump_config(parse_config({"model": model.to_dict()})))).model
    assert config_hash(again) == config_hash(model)    # the dumped config.yaml describes the same chain
    fields = W * np.random.default_rng(sample).uniform(-1.0, 1.0, L)
    mpo, search = solve_written(model, EXACT)
    H, charges = ref.spin_half_graph(L, [(j, j + 1, 1.0, 1.0) for j in range(L - 1)], fields)
    check_against_ed(search, mpo, H, charges, ref.spin_half().charges, (0.0,), (0.5,), L)


def test_written_two_species_bosons():
    # Two boson species with hopping, on-site repulsion within and between species; both
    # Q = N_a - N_b and N = N_a + N_b conserved. L = 6, nmax = 2 (d = 9).
    L = 6
    model = written("boson-ab", L, {"t": 1.0, "U": 1.5, "V": 0.7}, {"Q": 1, "N": 5}, [
        {"product": "a^+(j) a(j+1)", "coef": "-t", "add_conjugate": True},
        {"product": "b^+(j) b(j+1)", "coef": "-t", "add_conjugate": True},
        {"product": "n_a(j) n_a(j)", "coef": "0.5*U"},
        {"product": "n_a(j)", "coef": "-0.5*U"},
        {"product": "n_b(j) n_b(j)", "coef": "0.5*U"},
        {"product": "n_b(j)", "coef": "-0.5*U"},
        {"product": "n_a(j) n_b(j)", "coef": "V"},
    ], nmax=2)
    mpo, search = solve_written(model, WIDE)
    H, charges = ref.two_species(L, 2, t=1.0, U=1.5, V=0.7)
    check_against_ed(search, mpo, H, charges, ref.two_boson_species(2).charges, (1.0, 5.0), (1.0, 1.0), L)
