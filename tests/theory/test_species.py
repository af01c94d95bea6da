"""Two independent free-fermion species (the Hubbard chain at U = 0) resolved by N or by S^z.

Source: rho_A = rho_up (x) rho_dn with Gaussian factors (Peschel, J. Phys. A 36, L205 (2003));
the reference enumerates every many-body level of the product outright (this file), sharing no
code with the sector-sum engine under test.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from mps.theory.species import resolve_species_block, species_fillings

HUBBARD = ((1, 1), (1, -1))     # one up / down particle in the integer units of (N, 2 S^z)
UNITS = (1.0, 0.5)
RENYI = (1.0, 2.0, 3.0, np.inf)


def levels(nu):
    occ = np.array(list(itertools.product((0, 1), repeat=nu.size)), dtype=bool)
    return np.prod(np.where(occ, nu, 1.0 - nu), axis=1), occ.sum(axis=1)


def brute(nu_up, nu_dn, component, alphas):
    w_up, n_up = levels(nu_up)
    w_dn, n_dn = levels(nu_dn)
    lam = np.outer(w_up, w_dn).ravel()
    q_int = np.add.outer(n_up * HUBBARD[0][component], n_dn * HUBBARD[1][component]).ravel()
    keep = lam > 0
    lam, q = lam[keep], UNITS[component] * q_int[keep]
    charges = np.unique(q)
    prob = np.array([lam[q == c].sum() for c in charges])
    sec = np.full((len(RENYI), charges.size), np.nan)
    moments = np.empty((len(RENYI), alphas.size), dtype=complex)
    for r, n in enumerate(RENYI):
        for i, c in enumerate(charges):
            x = lam[q == c] / prob[i]
            sec[r, i] = (-np.dot(x, np.log(x)) if n == 1 else -np.log(x.max()) if np.isinf(n)
                         else np.log(np.sum(x**n)) / (1 - n))
        weight = (lam >= lam.max() * (1 - 1e-9)).astype(float) if np.isinf(n) else lam**n
        moments[r] = np.exp(1j * np.outer(alphas, q)) @ weight / weight.sum()
    return charges, prob, sec, moments


@pytest.mark.parametrize("component", [0, 1], ids=["by-N", "by-Sz"])
@pytest.mark.parametrize("seed", [1, 2])
def test_two_species_match_enumerated_levels(component, seed):
    rng = np.random.default_rng(seed)
    nu_up = np.concatenate([rng.uniform(0.02, 0.98, 7), [1.0, 0.0]])   # a filled and an empty mode too
    nu_dn = np.concatenate([rng.uniform(0.02, 0.98, 6), [1.0, 1.0, 0.0]])
    alphas = np.linspace(-np.pi, np.pi, 9)
    rec = resolve_species_block([nu_up, nu_dn], HUBBARD, 9, RENYI, alphas, UNITS, component, floor=0.0)
    charges, prob, sec, moments = brute(nu_up, nu_dn, component, alphas)
    np.testing.assert_allclose(rec.charges, charges, atol=1e-12)
    np.testing.assert_allclose(rec.probability, prob, atol=1e-13)
    np.testing.assert_allclose(rec.sector_entropy, sec, atol=1e-10)
    np.testing.assert_allclose(rec.moments, moments, atol=1e-12)
    assert rec.probability.sum() == pytest.approx(1.0, abs=1e-13)
    # levels per sector: all non-zero products of the two species' levels with that charge
    w_up, n_up = levels(nu_up)
    w_dn, n_dn = levels(nu_dn)
    q = UNITS[component] * np.add.outer(n_up * HUBBARD[0][component], n_dn * HUBBARD[1][component])
    nonzero = np.outer(w_up, w_dn) > 0
    np.testing.assert_array_equal(rec.counts, [np.sum(nonzero & (q == c)) for c in charges])
    # total entropies add over species (product state)
    lam = np.outer(w_up, w_dn).ravel()
    lam = lam[lam > 0]
    assert rec.entropy[0] == pytest.approx(-np.dot(lam, np.log(lam)), abs=1e-12)
    assert rec.entropy[1] == pytest.approx(-np.log(np.sum(lam**2)), abs=1e-12)


def test_species_fillings():
    assert species_fillings(HUBBARD, (10, 2)) == [6, 4]      # N = 10, 2 S^z = 2
    with pytest.raises(ValueError):
        species_fillings(HUBBARD, (10, 1))                   # N and 2 S^z of different parity
