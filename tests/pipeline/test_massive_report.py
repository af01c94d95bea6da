"""The massive section of comparison.json and the sum rules, on exact free chains.

Sources: the exact lattice engines (Peschel, J. Phys. A 36, L205 (2003) for free fermions; the
harmonic-chain Gaussian method, Peschel and Eisler, J. Phys. A 42, 504003 (2009), from memory, for
the complex scalar), whose moments are exactly those of free fields; the lattice correlation lengths
sinh(1/xi) = mu_stag/(2t) and 2 sinh(1/(2 xi)) = m from the poles of the dispersions (derived in
mps.theory.massive); Wick's theorem for the charge-density correlations.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from mps.analysis.correlations import correlation_length
from mps.analysis.entanglement import default_alphas
from mps.pipeline.massive_report import massive_section
from mps.pipeline.sum_rules import sum_rules
from mps.theory import scalar
from mps.theory.freefermions import charge_correlations, correlation_matrix, resolve_all_cuts
from mps.theory.massive import dirac_correlation_length, scalar_correlation_length

L = 240
RENYI = (1.0, 2.0, math.inf)


def staggered(mu: float) -> np.ndarray:
    return np.diag(mu * (-1.0) ** np.arange(L)) - np.eye(L, k=1) - np.eye(L, k=-1)


@pytest.mark.parametrize("mu", [0.3, 0.6])
def test_charge_correlations_decay_at_half_the_field_length_dirac(mu):
    # Wick: <n_i n_j>_c = -|C_ij|^2 decays at twice the rate of C_ij (the field correlator).
    corr = charge_correlations(correlation_matrix(staggered(mu), L // 2))
    xi = correlation_length(corr, floor=1e-14)["xi"]
    assert xi == pytest.approx(dirac_correlation_length(1.0, mu) / 2, rel=0.02)


@pytest.mark.parametrize("m", [0.3, 0.6])
def test_charge_correlations_decay_at_half_the_field_length_scalar(m):
    X, P = scalar.correlations(scalar.mass_matrix(np.full(L, m)))
    xi = correlation_length(scalar.charge_correlations(X, P), floor=1e-14)["xi"]
    assert xi == pytest.approx(scalar_correlation_length(m) / 2, rel=0.02)


def _free_records(field: str, mass: float):
    alphas = default_alphas(33)
    cuts = list(range(1, L))
    if field == "dirac":
        C = correlation_matrix(staggered(mass), L // 2)
        return resolve_all_cuts(staggered(mass), L // 2, cuts, RENYI, alphas), charge_correlations(C)
    V = scalar.mass_matrix(np.full(L, mass))
    X, P = scalar.correlations(V)
    return scalar.resolve_all_cuts(V, cuts, RENYI, alphas), scalar.charge_correlations(X, P)


@pytest.mark.parametrize("field, mass", [("dirac", 0.4), ("scalar", 0.3)])
def test_free_chain_follows_its_own_field_and_matches_the_free_reference(field, mass):
    records, corr = _free_records(field, mass)
    mid = records[L // 2 - 1]
    xi = correlation_length(corr, floor=1e-14)["xi"]
    sec = massive_section(None, mid, records, xi, math.pi)
    assert sec["flux"]["1"]["ladder"]["verdict"] == field
    assert sec["flux"]["2"]["ladder"]["verdict"] == field
    # the free reference at the measured xi is the same kind of chain at (almost) the same mass:
    # its fitted coefficient agrees with the chain's own to the accuracy of the measured xi (2 %)
    ref = sec["free_reference"][field]["flux"]["1"]["leading"][f"b_{field}"]
    own = sec["flux"]["1"]["leading"][f"b_{field}"]
    assert ref == pytest.approx(own, rel=0.03)
    assert field in sec["summary"]


def test_sum_rules_on_exact_records():
    records, _ = _free_records("scalar", 0.5)
    rules = sum_rules(records, "complex-scalar", 0.0)
    assert rules["normalisation"]["value"] < 1e-12
    assert rules["entropy_split"]["value"] < 1e-9
    assert rules["conjugation"]["value"] < 1e-12   # charge conjugation: p(q) = p(-q)
    fermions, _ = _free_records("dirac", 0.5)
    assert sum_rules(fermions, "fermions", 120.0)["conjugation"] is None
