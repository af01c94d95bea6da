"""Bose-Hubbard chain with an occupation cutoff (open ends).

H = -t sum_{j=0}^{L-2} (b+_j b_{j+1} + h.c.) + (U/2) sum_j n_j (n_j - 1) - mu sum_j n_j,

on the ``boson-mode`` site of :mod:`models.bases` with occupations 0..nmax (``nmax`` is a key of
``model:``). The conserved charge is the particle number N. The cutoff is exact only when the
weight of the top occupation is negligible; at small U keep nmax well above the filling.
"""

from __future__ import annotations

from collections.abc import Mapping

from models.bases import boson
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "bosons"
DESCRIPTION = "Bose-Hubbard chain: hopping t, on-site U, chemical potential mu; cutoff nmax"
CHARGE_NAMES = ("N",)
COUPLINGS = {"t": 1.0, "U": 1.0, "mu": 0.0}
OPTIONS = {"nmax": 4}


def space(opts) -> LocalSpace:
    """Boson site with occupations 0..nmax, charge N."""
    return boson(opts["nmax"])


def terms(sites: int, c: Mapping[str, float], opts) -> list[Term]:
    """Terms of H (see module docstring); n (n - 1) is written as the product n(j) n(j) - n(j)."""
    s = space(opts)
    return (place("b^+(j) b(j+1)", -c["t"], s, sites, add_conjugate=True)
            + place("n(j) n(j)", 0.5 * c["U"], s, sites)
            + place("n(j)", -0.5 * c["U"] - c["mu"], s, sites))


def single_particle(sites: int, c: Mapping[str, float], opts) -> None:
    """None: bosons are not described by the free-fermion engine."""
    return None


def default_charge(sites: int, opts) -> dict[str, float]:
    """Unit filling, N = L."""
    return {"N": float(sites)}
