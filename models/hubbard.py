"""Spinful Hubbard chain with chemical potentials and dimerised hopping (open ends).

H = -sum_{j=0}^{L-2} sum_{s=up,dn} t_j (c+_{j,s} c_{j+1,s} + h.c.) + U sum_j n_{j,up} n_{j,dn}
    - sum_j (mu + mu_stag (-1)^j) n_j,                       t_j = t (1 + dimer (-1)^j),

on the ``spinful-fermion`` site of :mod:`models.bases`. Two conserved charges: the particle
number N and S^z = (N_up - N_dn)/2 (stored as N_up - N_dn, unit 1/2). At half filling and U > 0
the charge sector is gapped (Lieb and Wu, PRL 20, 1445 (1968)) while the spin sector stays
critical; away from half filling both are Luttinger liquids with parameters K_c and K_s.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from models.bases import spinful_fermion
from models.patterns import dimerised, staggered
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "hubbard"
DESCRIPTION = "spinful Hubbard chain: hopping t, on-site U, potentials mu and mu_stag, dimerisation"
CHARGE_NAMES = ("N", "Sz")
COUPLINGS = {"t": 1.0, "U": 4.0, "mu": 0.0, "mu_stag": 0.0, "dimer": 0.0}

# Block variances of the two charges for one entangling point, in the convention where free
# fermions have K_c = K_s = 1: each spin species is a free chain with sigma^2 = (1/(2 pi^2)) log
# l_eff, so sigma_N^2 = (K_c/pi^2) log l_eff and sigma_Sz^2 = (K_s/(4 pi^2)) log l_eff
# (spin-charge separation with N = N_up + N_dn, S^z = (N_up - N_dn)/2; Giamarchi, Quantum
# Physics in One Dimension (2004), from memory, for the K_c, K_s convention).
VARIANCE_SLOPES = {"N": 1.0 / math.pi**2, "Sz": 1.0 / (4.0 * math.pi**2)}
# One up particle carries (N, 2 S^z) = (1, 1), one down particle (1, -1).
SPECIES = ((1, 1), (1, -1))


def space(opts=None) -> LocalSpace:
    """Spinful fermion site (|0>, |up>, |dn>, |up dn>), charges N and N_up - N_dn."""
    return spinful_fermion()


def terms(sites: int, c: Mapping[str, float], opts=None) -> list[Term]:
    """Terms of H (see module docstring); terms with a coefficient of exactly zero are left out."""
    s = space()
    hop = -dimerised(c["t"], c["dimer"], sites - 1)
    return (place("c_up^+(j) c_up(j+1)", hop, s, sites, add_conjugate=True)
            + place("c_dn^+(j) c_dn(j+1)", hop, s, sites, add_conjugate=True)
            + place("n_up(j) n_dn(j)", c["U"], s, sites)
            + place("n(j)", -staggered(c["mu"], c["mu_stag"], sites), s, sites))


def single_particle(sites: int, c: Mapping[str, float], opts=None) -> tuple[np.ndarray, float, float] | None:
    """At U = 0, the hopping matrix shared by both spin species (see ``SPECIES``), else None.

    h_{j,j+1} = h_{j+1,j} = -t_j, h_jj = -(mu + mu_stag (-1)^j): each species is a free chain and
    the block's state is the product of the two (exact).
    """
    if c["U"] != 0.0:
        return None
    hop = dimerised(c["t"], c["dimer"], sites - 1)
    h = np.diag(-staggered(c["mu"], c["mu_stag"], sites)) + 0.0
    idx = np.arange(sites - 1)
    h[idx, idx + 1] = h[idx + 1, idx] = -hop
    return h, 1.0, 0.0


def default_charge(sites: int, opts=None) -> dict[str, float]:
    """Half filling N = L, S^z = 0 for even L (1/2 for odd L)."""
    return {"N": float(sites), "Sz": 0.0 if sites % 2 == 0 else 0.5}
