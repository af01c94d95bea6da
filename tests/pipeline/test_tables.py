"""Charge-resolved entanglement of solver ground states against exact diagonalisation.

Source for every comparison: exact diagonalisation with scipy.sparse (tests/reference_ed.py),
whose Schmidt values per block charge go through the independent brute-force evaluation
``reference_ed.resolved_from_schmidt``. Sum rules are exact identities (Lukin et al., Science 364,
256 (2019); Wiseman and Vaccaro, PRL 91, 097902 (2003)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from models import get_family
from mps.analysis.entanglement import default_alphas
from mps.pipeline.config import parse_config
from mps.pipeline.tables import entanglement_tables, resolve_state

import reference_ed as ed
from chains import CASES, reference, solve, solved_case

RENYI = (1.0, 2.0, math.inf)


def analysis_config(family, sites, **extra):
    return parse_config({"model": {"family": family, "sites": sites},
                         "analysis": {"renyi": [1, 2, "inf"], "weight_floor": 0.0, **extra}}).analysis


@pytest.fixture(scope="module", params=sorted(CASES))
def solved(request):
    family, sites, couplings, charge = CASES[request.param]
    _, search = solved_case(request.param)
    h, basis, unit, offset = reference(family, sites, couplings, charge)
    _, vec = ed.ground_state(h)
    space = get_family(family).space()
    records = resolve_state(search.state, space.charge_units, analysis_config(family, sites), space.charge_names)
    return family, sites, vec, basis, unit, offset, records


def test_every_cut_and_sector_matches_exact_diagonalisation(solved):
    family, sites, vec, basis, unit, offset, records = solved
    alphas = default_alphas(65)
    for rec in records:
        exact = ed.resolved_from_schmidt(ed.schmidt_by_sector(vec, basis, sites, rec.cut, unit, offset),
                                         list(RENYI), alphas)
        order = np.argsort(exact["charges"])
        q_exact, p_exact = exact["charges"][order], exact["probability"][order]
        keep = p_exact > 1e-13          # sectors the truncated state may drop entirely
        mine = dict(zip(rec.charges, range(len(rec.charges))))
        for q, p in zip(q_exact[keep], p_exact[keep]):
            assert q in mine, (rec.cut, q)
            assert rec.probability[mine[q]] == pytest.approx(p, abs=1e-9)
        for r, n in enumerate(RENYI):
            i = rec.renyi.index(n)
            assert rec.entropy[i] == pytest.approx(exact["entropy"][r], abs=1e-8)
            np.testing.assert_allclose(rec.moments[i], exact["moments"][r], atol=1e-8)
            for q, s_exact, p in zip(q_exact, exact["sector_entropy"][r][order], p_exact):
                if p > 1e-6:  # sector entropies of rarer sectors are set by round-off in lambda/p
                    assert rec.sector_entropy[i][mine[q]] == pytest.approx(s_exact, abs=1e-8), (rec.cut, q, n)
        lam = {q: s**2 for q, s in ed.schmidt_by_sector(vec, basis, sites, rec.cut, unit, offset).items()}
        mean = sum(q * l.sum() for q, l in lam.items())
        var = sum((q - mean) ** 2 * l.sum() for q, l in lam.items())
        assert rec.cumulant(2) == pytest.approx(var, abs=1e-9)
        s_number = -sum(l.sum() * math.log(l.sum()) for l in lam.values() if l.sum() > 0)
        assert rec.number_entropy == pytest.approx(s_number, abs=1e-8)


def test_exact_sum_rules(solved):
    *_, records = solved
    for rec in records:
        assert rec.probability.sum() == pytest.approx(1.0, abs=1e-12)
        s1 = rec.entropy[rec.renyi.index(1.0)]
        assert s1 == pytest.approx(rec.number_entropy + rec.config_entropy, abs=1e-10)


def test_moments_are_the_fourier_transform_of_the_sector_sums(solved):
    # Exact identity: Z_n(alpha)/Z_n(0) = sum_q e^{i alpha q} P_n(q) / sum_q P_n(q) with
    # P_n(q) = p(q)^n exp((1 - n) S_n(q)).
    *_, records = solved
    for rec in records:
        i = rec.renyi.index(2.0)
        pn = rec.probability**2 * np.exp(-np.nan_to_num(rec.sector_entropy[i]))
        expect = np.exp(1j * np.outer(rec.alphas, rec.charges)) @ pn / pn.sum()
        np.testing.assert_allclose(rec.moments[i], expect, atol=1e-12)


def test_zero_field_half_filling_gives_a_symmetric_charge_distribution():
    # Symmetry (exact): at zero field the xxz chain is invariant under a global spin flip, so in
    # the S^z = 0 sector p(q) = p(-q) at every cut of an even block, and about the mean in general.
    _, search = solve("xxz", 12, dict(J=1.0, Delta=0.6, dimer=0.3), {"Sz": 0.0})
    space = get_family("xxz").space()
    for rec in resolve_state(search.state, space.charge_units, analysis_config("xxz", 12), space.charge_names):
        mean = rec.cumulant(1)
        assert mean == pytest.approx(0.0, abs=1e-9)
        table = dict(zip(rec.charges, rec.probability))
        for q, p in table.items():
            assert table.get(-q, 0.0) == pytest.approx(p, abs=1e-9)
        assert abs(rec.cumulant(3)) < 1e-9


def test_tables_have_the_documented_columns():
    _, search = solve("fermions", 8, dict(t=1.0, V=0.5), {"N": 4})
    space = get_family("fermions").space()
    tables = entanglement_tables(search.state, space.charge_units, analysis_config("fermions", 8, cuts=[2, 4]),
                                 space.charge_names)
    assert tables["entropies"].columns[:4] == ["cut", "S_1", "S_2", "S_inf"]
    assert {"charge_mean", "charge_var", "S_number", "S_config"} <= set(tables["entropies"].columns)
    assert tables["sectors"].columns == ["cut", "charge", "probability", "S_1", "S_2", "S_inf", "count"]
    assert tables["moments"].columns == ["cut", "n", "alpha", "re", "im"]
    assert tables["spectrum"].columns == ["cut", "charge", "level", "value"]
    assert sorted(set(tables["entropies"].column("cut"))) == [2, 4]
    assert all(isinstance(q, int) for q in tables["sectors"].column("charge"))
    assert len(tables["moments"].rows) == 2 * 3 * 65
