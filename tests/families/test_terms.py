"""Products of site operators placed along a chain: parsing, coefficient patterns, placement."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from models.bases import make_basis
from models.terms import Amount, SitePattern, TermError, adjoint, parse_amount, parse_product, place
from mps.chain.lattice import Term

SPIN = make_basis("spin-half")
FERMION = make_basis("spinful-fermion")


@pytest.mark.parametrize("text, factors", [
    ("S^+(j) S^-(j+1)", ((0, "S^+"), (1, "S^-"))),
    ("S^z(j)S^z(j + 2)", ((0, "S^z"), (2, "S^z"))),
    ("  n_up(j) n_dn(j) ", ((0, "n_up"), (0, "n_dn"))),
    ("c_up^+(j+3) c_up(j)", ((3, "c_up^+"), (0, "c_up"))),
])
def test_parse_product(text, factors):
    p = parse_product(text)
    assert p.factors == factors
    assert parse_product(p.text) == p   # the canonical text reads back


@pytest.mark.parametrize("text", ["", "S^z", "S^z(i)", "S^z(j-1)", "S^z(j) + S^x(j)", "2 S^z(j)", "S^z(j"])
def test_parse_product_refuses(text):
    with pytest.raises(TermError):
        parse_product(text)


@pytest.mark.parametrize("raw, amount", [
    (0.5, Amount(0.5)), (2, Amount(2.0)), ("1e-3", Amount(1e-3)), ("J2", Amount(1.0, "J2")),
    ("-t", Amount(-1.0, "t")), ("0.5*J", Amount(0.5, "J")), ("- 2.5e-1 * Jz", Amount(-0.25, "Jz")),
])
def test_parse_amount(raw, amount):
    assert parse_amount(raw) == amount
    assert parse_amount(amount.written()) == amount


@pytest.mark.parametrize("raw", [True, None, "J+K", "2J", float("nan"), float("inf"), [1.0]])
def test_parse_amount_refuses(raw):
    with pytest.raises(TermError):
        parse_amount(raw)


def test_site_patterns():
    # value (1 + dimer (-1)^j) + stagger (-1)^j on j = 0, 1, 2, 3
    c = {"J": 2.0}
    sign = np.array([1.0, -1.0, 1.0, -1.0])
    np.testing.assert_allclose(SitePattern(Amount(1.0, "J")).values(4, c), [2.0] * 4)
    np.testing.assert_allclose(SitePattern(Amount(1.0, "J"), dimer=Amount(0.25)).values(4, c), 2 * (1 + 0.25 * sign))
    np.testing.assert_allclose(SitePattern(Amount(0.5), stagger=Amount(-1.0, "J")).values(4, c), 0.5 - 2 * sign)
    per = SitePattern(per_site=(Amount(1.0), Amount(0.5, "J"), Amount(0.0)))
    np.testing.assert_allclose(per.values(3, c), [1.0, 1.0, 0.0])
    assert per.names() == {"J"}
    with pytest.raises(TermError, match="per_site lists 3 values but the product has 4 placements"):
        per.values(4, c)


def test_place_with_conjugate_and_zero_coefficients():
    terms = place("S^+(j) S^-(j+2)", [0.5, 0.0, -1.0], SPIN, 5, add_conjugate=True)
    assert terms == [Term(0.5, ((0, "S^+"), (2, "S^-"))), Term(0.5, ((2, "S^+"), (0, "S^-"))),
                     Term(-1.0, ((2, "S^+"), (4, "S^-"))), Term(-1.0, ((4, "S^+"), (2, "S^-")))]
    # (c+_{j,up} c_{j+1,up})^dagger = c+_{j+1,up} c_{j,up}: reversed order, adjoint names
    assert adjoint(((0, "c_up^+"), (1, "c_up")), FERMION) == ((1, "c_up^+"), (0, "c_up"))


@pytest.mark.parametrize("text, sites, match", [
    ("S^z(j) S^z(j+6)", 6, "beyond the end of a 6-site chain"),
    ("c_up^+(j) n_dn(j+1)", 4, "odd number"),
    ("S^x(j)", 4, r"unknown operator 'S\^x'"),
])
def test_place_refuses(text, sites, match):
    space = FERMION if "c_" in text else SPIN
    with pytest.raises(TermError, match=match):
        place(text, 1.0, space, sites)


def test_adjoint_without_a_table_of_names():
    # A site built by hand without ``adjoints``: the conjugate is found by its matrix.
    bare = dataclasses.replace(SPIN, adjoints={})
    assert adjoint(((0, "S^+"), (1, "S^z")), bare) == ((1, "S^z"), (0, "S^-"))
    lonely = dataclasses.replace(SPIN, ops={"S^+": SPIN.ops["S^+"]}, adjoints={})
    with pytest.raises(TermError, match="conjugate of 'S\\^\\+'"):
        adjoint(((0, "S^+"),), lonely)


def test_product_charge():
    assert parse_product("c_up^+(j) c_dn(j+1)").charge(FERMION).tolist() == [0, 2]
    assert parse_product("S^+(j) S^+(j+1)").charge(SPIN).tolist() == [4]
    assert parse_product("S^+(j) S^-(j+1)").charge(SPIN).tolist() == [0]


def test_random_pattern_is_seeded_uniform_disorder():
    # Definition: value + random * u_j, u_j uniform in [-1, 1] from numpy's default_rng(seed)
    # (numpy's PCG64 generator is the reference library for the draw).
    c = {"W": 0.5, "sample": 3.0}
    pattern = SitePattern(Amount(1.0), random=Amount(1.0, "W"), seed=Amount(1.0, "sample"))
    np.testing.assert_array_equal(pattern.values(6, c),
                                  1.0 + 0.5 * np.random.default_rng(3).uniform(-1.0, 1.0, 6))
    assert pattern.names() == {"W", "sample"}
    assert not np.array_equal(pattern.values(6, c), pattern.values(6, {**c, "sample": 4.0}))
    with pytest.raises(TermError, match="disorder seed must be an integer >= 0"):
        pattern.values(6, {**c, "sample": 1.5})
