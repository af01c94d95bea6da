"""Local expectation values, connected charge correlations and the correlation length of an MPS."""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import pytest

from models import get_family
from mps.analysis.correlations import (
    bulk_profile,
    connected_charge_correlations,
    correlation_length,
    local_expectations,
)
from mps.chain.state import canonicalize
from mps.solver.sweep import Stage, SweepSettings
from mps.theory.freefermions import charge_correlations, correlation_matrix

import reference_ed as ed
from chains import CASES, reference, solve

# No truncation at L <= 12 (bond 64 holds every state): the only error left is the eigensolver's,
# so correlations can be compared with exact diagonalisation to 1e-8. With a discarded-weight
# threshold of 1e-14 the long-distance correlations of these chains are off by ~1e-8.
EXACT = SweepSettings((Stage(16, 2, 1e-5), Stage(64, 4, 0.0)), discard=0.0, energy_tol=1e-13, lanczos_tol=1e-12)
# Gapped free chain of 40 sites: bond ~40 reaches discarded weight 1e-14.
GAPPED = SweepSettings((Stage(16, 2, 1e-5), Stage(64, 6, 0.0)), discard=1e-14, energy_tol=1e-13,
                       lanczos_tol=1e-12)

SITE_CHARGE = {"xxz": np.array([-0.5, 0.5]), "fermions": np.array([0.0, 1.0])}  # sorted basis
ED_CASES = ["xxz-all-couplings", "xxz-magnetised", "fermions-low-filling"]

FREE_CHAIN = dict(t=1.0, V=0.0, mu_stag=0.4, dimer=0.2)   # fermions family, gapped, half filling


@lru_cache(maxsize=None)
def exact_case(name: str):
    family, sites, couplings, charge = CASES[name]
    _, search = solve(family, sites, couplings, charge, settings=EXACT)
    return search.state


@lru_cache(maxsize=None)
def free_chain_state():
    _, search = solve("fermions", 40, FREE_CHAIN, {"N": 20}, settings=GAPPED)
    return search.state


def exact_free_correlations(sites: int) -> np.ndarray:
    fam = get_family("fermions")
    h, _, _ = fam.single_particle(sites, fam.resolve_couplings(FREE_CHAIN))
    return charge_correlations(correlation_matrix(h, sites // 2))


# ----------------------------------------------------------------------------- against ED
@pytest.mark.parametrize("name", ED_CASES)
def test_correlations_match_exact_diagonalisation(name):
    family, sites, couplings, charge = CASES[name]
    state = exact_case(name)
    H, basis, _, _ = reference(family, sites, couplings, charge)
    _, vec = ed.ground_state(H)
    q = SITE_CHARGE[family]
    corr = connected_charge_correlations(state, q)
    # reference: exact diagonalisation with scipy.sparse (density n = bit, S^z = n - 1/2)
    np.testing.assert_allclose(corr, ed.block_charge_correlations(vec, basis, sites), rtol=0, atol=1e-8)
    occ = ed.occupations(basis, sites)
    mean = np.abs(vec) ** 2 @ occ + q[0]
    np.testing.assert_allclose(local_expectations(state, np.diag(q)), mean, rtol=0, atol=1e-8)


@pytest.mark.parametrize("name", ED_CASES[:2])
def test_local_expectation_of_a_conserving_off_diagonal_operator(name):
    # S+_j S-_j-type operators do not exist on one spin site; instead check that the charge-changing
    # part of an operator is ignored (its expectation vanishes in a state of definite charge) and
    # that the rest is the diagonal expectation: exact diagonalisation with scipy.sparse.
    family, sites, couplings, charge = CASES[name]
    state = exact_case(name)
    H, basis, _, _ = reference(family, sites, couplings, charge)
    _, vec = ed.ground_state(H)
    op = np.array([[0.3, 1.0], [2.0, -0.7]])          # sorted basis (down, up); off-diagonals flip S^z
    ref = (np.abs(vec) ** 2 @ ed.occupations(basis, sites)) * (-0.7 - 0.3) + 0.3
    np.testing.assert_allclose(local_expectations(state, op), ref, rtol=0, atol=1e-8)


def test_result_does_not_depend_on_the_orthogonality_centre():
    state = exact_case("xxz-magnetised")
    q = SITE_CHARGE["xxz"]
    base = connected_charge_correlations(state, q)
    for centre in (5, state.sites - 1):
        moved = canonicalize(state, centre)
        np.testing.assert_allclose(connected_charge_correlations(moved, q), base, rtol=0, atol=1e-12)
        np.testing.assert_allclose(local_expectations(moved, np.diag(q)),
                                   local_expectations(state, np.diag(q)), rtol=0, atol=1e-12)


def test_rows_sum_to_zero_in_a_state_of_fixed_total_charge():
    # exact identity: sum_j C_ij = <(Q_i - <Q_i>) Q_total> = Q_total <Q_i - <Q_i>> = 0
    corr = connected_charge_correlations(exact_case("fermions-low-filling"), SITE_CHARGE["fermions"])
    np.testing.assert_allclose(corr.sum(axis=1), 0.0, atol=1e-12)
    np.testing.assert_array_equal(corr, corr.T)


def test_wrong_site_charge_length_is_refused():
    with pytest.raises(ValueError, match="entries"):
        connected_charge_correlations(exact_case("xxz-all-couplings"), np.array([0.0, 0.5, 1.0]))


# ----------------------------------------------------------------------------- free fermions
def test_free_chain_of_40_sites_matches_wick():
    # reference: exact free-fermion correlations, <n_i n_j>_c = delta_ij C_ii - |C_ij|^2 (Wick's
    # theorem; Peschel, J. Phys. A 36, L205, 2003), from mps.theory.freefermions
    corr = connected_charge_correlations(free_chain_state(), SITE_CHARGE["fermions"])
    np.testing.assert_allclose(corr, exact_free_correlations(40), rtol=0, atol=1e-7)


def test_correlation_length_of_mps_agrees_with_long_exact_chain():
    # reference: exact free-fermion correlations of the same chain with L = 400 (Wick, as above);
    # the 40-site MPS must give the same xi within 10 %
    exact = correlation_length(exact_free_correlations(400))
    mps = correlation_length(connected_charge_correlations(free_chain_state(), SITE_CHARGE["fermions"]))
    assert exact["exponential"] and mps["exponential"]
    assert abs(mps["xi"] / exact["xi"] - 1) < 0.10, (mps["xi"], exact["xi"])


def test_correlation_length_of_dimerised_chain_approaches_the_exact_asymptote():
    # Dimerised tight-binding chain, hoppings t(1 +- d): the single-particle correlation
    # <c+_i c_j> decays as ((1-d)/(1+d))^{r/2}, so the density correlation |C_ij|^2 as
    # e^{-r/xi} with xi = 1/log((1+d)/(1-d)) (exact, standard: analytic continuation of the
    # two-band dispersion; from memory). L = 400, exact free-fermion data.
    fam = get_family("fermions")
    d = 0.3
    h, _, _ = fam.single_particle(400, fam.resolve_couplings(dict(t=1.0, V=0.0, dimer=d)))
    fit = correlation_length(charge_correlations(correlation_matrix(h, 200)))
    assert fit["exponential"]
    assert abs(fit["xi"] * np.log((1 + d) / (1 - d)) - 1) < 0.05, fit["xi"]


def test_critical_chain_is_not_exponential():
    # XX chain at half filling is critical: |C(r)| = 1/(pi r)^2 for odd r in the bulk of an
    # infinite chain (Wick with C_ij = sin(pi r/2)/(pi r); exact, standard). Exact free-fermion
    # data of 400 sites, and the MPS-sized 40-site chain.
    fam = get_family("xxz")
    for sites in (40, 400):
        h, _, _ = fam.single_particle(sites, fam.resolve_couplings(dict(J=1.0, Delta=0.0)))
        fit = correlation_length(charge_correlations(correlation_matrix(h, sites // 2)))
        assert not fit["exponential"] and fit["xi"] == np.inf
        assert fit["power_residual"] < fit["pure_residual"]
    assert abs(fit["prefactor_exponent"] - 2.0) < 0.1       # the r^{-2} decay of the 400-site chain


# ----------------------------------------------------------------------------- the fit itself
def _synthetic(L: int, profile) -> np.ndarray:
    r = np.abs(np.subtract.outer(np.arange(L), np.arange(L)))
    return np.where(r % 2, -1.0, 1.0) * profile(r)


def test_fit_recovers_a_planted_ornstein_zernike_decay():
    # constructed data: C(i, j) = (-1)^r A_{r mod 2} e^{-r/xi} r^{-a}, r = |i - j|
    xi, a = 3.0, 0.5
    amp = lambda r: np.where(r % 2, 0.2, 0.05)
    corr = _synthetic(120, lambda r: amp(r) * np.exp(-r / xi) * np.maximum(r, 1) ** -a)
    fit = correlation_length(corr)
    assert fit["exponential"]
    assert fit["xi"] == pytest.approx(xi, rel=1e-9)
    assert fit["prefactor_exponent"] == pytest.approx(a, rel=1e-9)
    assert fit["amplitudes"] == pytest.approx([0.05, 0.2], rel=1e-9)
    assert fit["reach"] > 3


def test_too_few_points_give_no_verdict():
    corr = _synthetic(120, lambda r: np.exp(-r / 0.3))      # below the floor after a few sites
    fit = correlation_length(corr)
    assert fit["points"] < 5 and not fit["exponential"] and fit["xi"] == np.inf


def test_bulk_profile_leaves_out_the_edges():
    corr = np.zeros((20, 20))
    corr[0, 1] = corr[1, 0] = 5.0                           # an edge artefact
    corr[10, 11] = corr[11, 10] = 1.0
    g, counts = bulk_profile(corr, edge=2)
    assert counts[0] == 16 and g[1] == pytest.approx(1.0 / 15)
