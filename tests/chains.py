"""Shared test helpers: solve a small chain with the engine, and its exact-diagonalisation twin."""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from models import get_family
from mps.chain.mpo import build_mpo
from mps.solver.sweep import Stage, SweepSettings, solve_sector

import reference_ed as ed

SETTINGS = SweepSettings((Stage(32, 2, 1e-5), Stage(128, 8, 0.0)), discard=1e-14, energy_tol=1e-12)

# Every coupling of each family switched on (DESIGN.md section 3).
CASES = {
    "xxz-all-couplings": ("xxz", 10, dict(J=1.0, Delta=0.7, h=0.13, h_stag=0.3, dimer=0.2), {"Sz": 0.0}),
    "xxz-ferro-side-odd": ("xxz", 11, dict(J=0.8, Delta=-0.4, h=0.05, h_stag=-0.2, dimer=-0.1), {"Sz": 0.5}),
    "xxz-magnetised": ("xxz", 12, dict(J=1.0, Delta=1.0, h=0.4, h_stag=0.1, dimer=0.15), {"Sz": 1.0}),
    "fermions-all-couplings": ("fermions", 10, dict(t=1.0, V=0.9, mu=0.2, mu_stag=0.35, dimer=0.25), {"N": 5}),
    "fermions-low-filling": ("fermions", 12, dict(t=0.7, V=-0.5, mu=0.1, mu_stag=-0.2, dimer=0.1), {"N": 4}),
}


def solve(family: str, sites: int, couplings: dict, charge: dict, settings=SETTINGS, seed=3, options=None):
    """(mpo, finished search) for the chain, started from a random state in the sector."""
    fam = get_family(family)
    space = fam.space(options)
    mpo = build_mpo(space, sites, fam.terms(sites, couplings, options))
    target = tuple(int(round(charge[n] / u)) for n, u in zip(space.charge_names, space.charge_units))
    return mpo, solve_sector(mpo, target, settings, np.random.default_rng(seed))


def reference(family: str, sites: int, couplings: dict, charge: dict):
    """(H, basis, unit, offset_per_site) of exact diagonalisation in the same sector."""
    if family == "xxz":
        n_up = int(round(charge["Sz"] + sites / 2))
        h, basis = ed.xxz_sector(sites, n_up, **couplings)
        return h, basis, 1.0, -0.5
    h, basis = ed.fermion_sector(sites, int(charge["N"]), **couplings)
    return h, basis, 1.0, 0.0


@lru_cache(maxsize=None)
def solved_case(name: str):
    """(mpo, search) of one of CASES, solved once per test session."""
    family, sites, couplings, charge = CASES[name]
    return solve(family, sites, couplings, charge)
