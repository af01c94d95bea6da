"""Spin-1/2 xxz chain with uniform and staggered fields and bond dimerisation (open ends).

H = sum_{j=0}^{L-2} J_j (Sx_j Sx_{j+1} + Sy_j Sy_{j+1} + Delta Sz_j Sz_{j+1})
    + sum_{j=0}^{L-1} (h + h_stag (-1)^j) Sz_j,            J_j = J (1 + dimer (-1)^j),

with Sx Sx + Sy Sy = (S+ S- + S- S+) / 2, on the ``spin-half`` site of :mod:`models.bases`.
The conserved charge is S^z, stored as the integer 2 S^z (basis (down, up) -> charges (-1, +1)),
unit 0.5.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from models.bases import spin_half
from models.patterns import dimerised, staggered
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "xxz"
DESCRIPTION = "spin-1/2 xxz chain: J, anisotropy Delta, fields h and h_stag, dimerisation"
CHARGE_NAMES = ("Sz",)
COUPLINGS = {"J": 1.0, "Delta": 1.0, "h": 0.0, "h_stag": 0.0, "dimer": 0.0}


def space(opts=None) -> LocalSpace:
    """Spin-1/2 site, basis (down, up), charge 2 S^z in (-1, +1), unit 0.5."""
    return spin_half()


def bond_couplings(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """J_j = J (1 + dimer (-1)^j) for the bonds j = 0..L-2 (bond j joins sites j and j+1)."""
    return dimerised(c["J"], c["dimer"], sites - 1)


def site_fields(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """h + h_stag (-1)^j on the sites j = 0..L-1."""
    return staggered(c["h"], c["h_stag"], sites)


def terms(sites: int, c: Mapping[str, float], opts=None) -> list[Term]:
    """Terms of H (see module docstring); terms with a coefficient of exactly zero are left out.

    Count: per bond with J_j != 0, two flip terms plus one Sz Sz term when Delta != 0; per site
    with a non-zero field, one Sz term.
    """
    s, jj = space(), bond_couplings(sites, c)
    return (place("S^+(j) S^-(j+1)", 0.5 * jj, s, sites, add_conjugate=True)
            + place("S^z(j) S^z(j+1)", jj * c["Delta"], s, sites)
            + place("S^z(j)", site_fields(sites, c), s, sites))


def single_particle(sites: int, c: Mapping[str, float], opts=None) -> tuple[np.ndarray, float, float] | None:
    """Free-fermion form of the chain at Delta = 0 (Jordan-Wigner), else ``None``.

    With S+_j = c+_j prod_{k<j} (1 - 2 n_k) and S^z_j = n_j - 1/2 (Lieb, Schultz and Mattis,
    Ann. Phys. 16, 407 (1961)), S+_j S-_{j+1} = c+_j c_{j+1}, so

        H = sum_j (J_j / 2) (c+_j c_{j+1} + h.c.) + sum_j (h + h_stag (-1)^j) n_j + const,

    const = -(1/2) sum_j (h + h_stag (-1)^j). The hopping sign +J_j/2 is a gauge choice on an open
    chain (c_j -> (-1)^j c_j flips it) and changes no spectrum or entanglement. The block charge is
    S^z_A = N_A - l/2: unit 1, offset_per_site -0.5.
    """
    if c["Delta"] != 0.0:
        return None
    h = np.diag(site_fields(sites, c)).astype(float)
    hop = 0.5 * bond_couplings(sites, c)
    idx = np.arange(sites - 1)
    h[idx, idx + 1] = hop
    h[idx + 1, idx] = hop
    return h, 1.0, -0.5


def default_charge(sites: int, opts=None) -> dict[str, float]:
    """S^z = 0 for even L, 1/2 for odd L."""
    return {"Sz": 0.0 if sites % 2 == 0 else 0.5}
