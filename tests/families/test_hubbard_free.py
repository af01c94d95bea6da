"""The Hubbard chain at U = 0 against the exact free-fermion answer, resolved by N, by S^z and jointly.

Source: at U = 0 the two spin species are independent free chains, so the block's reduced density
matrix is rho_up (x) rho_dn with each factor Gaussian; its levels are the products of the
single-mode weights nu_k or 1 - nu_k of the block correlation matrix of each species (Peschel,
J. Phys. A 36, L205 (2003)). Here the levels are enumerated outright (modes with
min(nu, 1 - nu) < 1e-15 are frozen at 0 or 1, changing no weight above 1e-13), which shares
nothing with the engine's Schmidt-value analysis.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from mps.analysis.entanglement import default_alphas, resolve_cut, resolve_cut_joint
from mps.pipeline.comparison import compare_run
from mps.pipeline.config import parse_config
from mps.solver.sweep import Stage, SweepSettings
from mps.theory.freefermions import correlation_matrix

from chains import solve

L, FILLING = 32, 16          # 16 up and 16 down fermions on 32 sites: half filling, S^z = 0
# Dimerised hopping and a staggered potential open a single-particle gap: the block entropy stays
# bounded, so a modest bond dimension holds the state to machine precision and the comparison can
# be tight (a critical chain at this size needs bond >~ 500 for 1e-5 on rare sectors).
COUPLINGS = {"t": 1.0, "U": 0.0, "mu": 0.1, "mu_stag": 0.5, "dimer": 0.4}
RENYI = (1.0, 2.0, 3.0)
FROZEN = 1e-15


def species_levels(nu: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(weights, particle numbers) of every many-body level of one Gaussian block."""
    frozen_full = int(np.sum(nu > 1 - FROZEN))
    live = nu[(nu >= FROZEN) & (nu <= 1 - FROZEN)]
    occ = np.array(list(itertools.product((0, 1), repeat=live.size)), dtype=float)
    logw = occ @ np.log(live) + (1 - occ) @ np.log1p(-live)
    return np.exp(logw), occ.sum(axis=1).astype(int) + frozen_full


def exact_sectors(levels: np.ndarray, labels: np.ndarray) -> dict[tuple, tuple[float, list[float]]]:
    """label -> (p, [S_n for n in RENYI]) from the levels carrying that label."""
    out = {}
    for lab in np.unique(labels, axis=0):
        w = levels[np.all(labels == lab, axis=1)]
        p = w.sum()
        x = w / p
        x = x[x > 0]
        s = [float(-np.dot(x, np.log(x))) if n == 1 else float(np.log(np.sum(x**n)) / (1 - n)) for n in RENYI]
        out[tuple(float(v) for v in lab)] = (float(p), s)
    return out


@pytest.fixture(scope="module")
def solved():
    settings = SweepSettings((Stage(64, 2, 1e-5), Stage(160, 4, 0.0)), discard=1e-14, energy_tol=1e-11)
    _, search = solve("hubbard", L, COUPLINGS, {"N": 2 * FILLING, "Sz": 0.0}, settings)
    c, sign = COUPLINGS, (-1.0) ** np.arange(L)
    bonds = c["t"] * (1 + c["dimer"] * sign[:-1])
    h = -np.diag(bonds, 1) - np.diag(bonds, -1) - np.diag(c["mu"] + c["mu_stag"] * sign)
    return search, correlation_matrix(h, FILLING)


@pytest.mark.slow
@pytest.mark.parametrize("cut", [4, 9, 16, 23, 30])
def test_resolved_by_n_by_sz_and_jointly_match_free_fermions(solved, cut):
    search, C = solved
    w, n = species_levels(np.linalg.eigvalsh(C[:cut, :cut]))
    levels = np.outer(w, w).ravel()                       # rho_up (x) rho_dn, same occupations per species
    n_up, n_dn = np.repeat(n, n.size), np.tile(n, n.size)
    keep = levels > 1e-30
    levels, n_up, n_dn = levels[keep], n_up[keep], n_dn[keep]
    by = {
        "N": (exact_sectors(levels, (n_up + n_dn)[:, None]), 0),
        "Sz": (exact_sectors(levels, (0.5 * (n_up - n_dn))[:, None]), 1),
        "joint": (exact_sectors(levels, np.column_stack([n_up + n_dn, 0.5 * (n_up - n_dn)])), None),
    }
    spec = search.state.spectra[cut].as_dict()
    units = (1.0, 0.5)
    for name, (exact, component) in by.items():
        if component is None:
            rec = resolve_cut_joint(spec, cut, RENYI, units, floor=0.0)
            ours = {tuple(float(c) for c in q): i for i, q in enumerate(rec.charges)}
        else:
            rec = resolve_cut(spec, cut, RENYI, default_alphas(5), units, component=component, floor=0.0)
            ours = {(float(q),): i for i, q in enumerate(rec.charges)}
        for q, (p, s) in exact.items():
            i = ours.get(q)
            mine_p = rec.probability[i] if i is not None else 0.0
            assert abs(mine_p - p) < 1e-8, (name, cut, q)
            if p > 1e-5:
                for r, n in enumerate(RENYI):
                    assert math.isclose(rec.sector_entropy[r, i], s[r], abs_tol=1e-7), (name, cut, q, n)


@pytest.mark.slow
@pytest.mark.parametrize("resolve", ["N", "Sz"])
def test_comparison_stage_checks_the_two_species_exactly(solved, resolve):
    # The comparison stage's own exact answer for a quadratic two-species chain (sector sums
    # combined species by species, mps.theory.species) must find the solver within the same
    # tolerances as the enumerated levels above, on every cut.
    search, _ = solved
    cfg = parse_config({"model": {"family": "hubbard", "sites": L, "couplings": COUPLINGS,
                                  "charge": {"N": 2 * FILLING, "Sz": 0}},
                        "analysis": {"resolve": resolve, "renyi": list(RENYI)}})
    exact = compare_run(cfg, search.state)["exact"]
    assert exact["n_particles"] == [FILLING, FILLING] and exact["missing_sectors"] == 0
    dev = exact["max_deviation"]
    assert dev["probability"]["value"] < 1e-10
    assert dev["entropy"]["value"] < 1e-9
    assert dev["moments"]["value"] < 1e-10
    assert dev["sector_entropy"]["value"] < 1e-6       # sectors down to p = 1e-6 (rare_sector)
    assert dev["charge_correlations"]["value"] < 1e-7
