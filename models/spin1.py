"""Spin-1 chain with exchange anisotropy, single-ion anisotropy and a field (open ends).

H = J sum_{j=0}^{L-2} (Sx_j Sx_{j+1} + Sy_j Sy_{j+1} + Delta Sz_j Sz_{j+1}) + D sum_j (Sz_j)^2
    + h sum_j Sz_j,

on the ``spin-one`` site of :mod:`models.bases`; the conserved charge is S^z (unit 1). At
J = Delta = 1, D = h = 0 this is the Heisenberg chain in the gapped Haldane phase (Haldane, PRL
50, 1153 (1983)), a massive chain with no free-fermion description; its open ends carry
spin-1/2 edge states, so the lowest states of S^z = 0 and S^z = +-1 are nearly degenerate on long
chains.
"""

from __future__ import annotations

from collections.abc import Mapping

from models.bases import spin_one
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "spin1"
DESCRIPTION = "spin-1 chain: exchange J, anisotropy Delta, single-ion D, field h"
CHARGE_NAMES = ("Sz",)
COUPLINGS = {"J": 1.0, "Delta": 1.0, "D": 0.0, "h": 0.0}


def space(opts=None) -> LocalSpace:
    """Spin-1 site, basis m = (-1, 0, 1), charge S^z."""
    return spin_one()


def terms(sites: int, c: Mapping[str, float], opts=None) -> list[Term]:
    """Terms of H (see module docstring); (Sz_j)^2 is the product Sz(j) Sz(j)."""
    s = space()
    return (place("S^+(j) S^-(j+1)", 0.5 * c["J"], s, sites, add_conjugate=True)
            + place("S^z(j) S^z(j+1)", c["J"] * c["Delta"], s, sites)
            + place("S^z(j) S^z(j)", c["D"], s, sites)
            + place("S^z(j)", c["h"], s, sites))


def single_particle(sites: int, c: Mapping[str, float], opts=None) -> None:
    """None: spin 1 has no free-fermion form."""
    return None


def default_charge(sites: int, opts=None) -> dict[str, float]:
    """S^z = 0."""
    return {"Sz": 0.0}
