"""Spinless fermions with nearest-neighbour repulsion (t-V chain), chemical potentials, dimerisation.

H = -sum_{j=0}^{L-2} t_j (c+_j c_{j+1} + c+_{j+1} c_j) + V sum_{j=0}^{L-2} n_j n_{j+1}
    - sum_{j=0}^{L-1} (mu + mu_stag (-1)^j) n_j,             t_j = t (1 + dimer (-1)^j),

open ends, on the ``spinless-fermion`` site of :mod:`models.bases`. The conserved charge is the
particle number N (basis (empty, occupied), unit 1). ``c^+`` and ``c`` are lattice fermion
operators; the operator builder adds Jordan-Wigner strings.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from models.bases import spinless_fermion
from models.patterns import dimerised, staggered
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "fermions"
DESCRIPTION = "spinless fermions (t-V chain): hopping t, repulsion V, potentials mu and mu_stag, dimerisation"
CHARGE_NAMES = ("N",)
COUPLINGS = {"t": 1.0, "V": 0.0, "mu": 0.0, "mu_stag": 0.0, "dimer": 0.0}


def space(opts=None) -> LocalSpace:
    """Spinless fermion site, basis (empty, occupied), charge N in (0, 1), parity (1, -1)."""
    return spinless_fermion()


def hoppings(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """t_j = t (1 + dimer (-1)^j) for the bonds j = 0..L-2."""
    return dimerised(c["t"], c["dimer"], sites - 1)


def potentials(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """mu + mu_stag (-1)^j on the sites j = 0..L-1 (enters H with a minus sign)."""
    return staggered(c["mu"], c["mu_stag"], sites)


def terms(sites: int, c: Mapping[str, float], opts=None) -> list[Term]:
    """Terms of H (see module docstring); terms with a coefficient of exactly zero are left out.

    Count: per bond with t_j != 0, two hopping terms; per bond one n n term when V != 0; per site
    with a non-zero potential, one n term.
    """
    s = space()
    return (place("c^+(j) c(j+1)", -hoppings(sites, c), s, sites, add_conjugate=True)
            + place("n(j) n(j+1)", c["V"], s, sites)
            + place("n(j)", -potentials(sites, c), s, sites))


def single_particle(sites: int, c: Mapping[str, float], opts=None) -> tuple[np.ndarray, float, float] | None:
    """``(h, 1, 0)`` with H = sum_ij h_ij c+_i c_j when V = 0, else ``None``.

    h_{j,j+1} = h_{j+1,j} = -t_j, h_jj = -(mu + mu_stag (-1)^j); the block charge is N_A.
    """
    if c["V"] != 0.0:
        return None
    h = np.diag(-potentials(sites, c)) + 0.0  # + 0.0 turns -0.0 into 0.0
    idx = np.arange(sites - 1)
    h[idx, idx + 1] = -hoppings(sites, c)
    h[idx + 1, idx] = -hoppings(sites, c)
    return h, 1.0, 0.0


def default_charge(sites: int, opts=None) -> dict[str, float]:
    """Half filling rounded down, N = L // 2."""
    return {"N": float(sites // 2)}
