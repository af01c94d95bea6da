"""Lattice complex scalar field with Dirichlet ends, in particle (a) and antiparticle (b) modes.

H = sum_{j=0}^{L-1} [pi_j^+ pi_j + m_j^2 phi_j^+ phi_j] + sum_{j=-1}^{L-1} |phi_{j+1} - phi_j|^2
    + lam sum_j (phi_j^+ phi_j)^2,        m_j = m + m_stag (-1)^j,   phi_{-1} = phi_L = 0,

with [phi_j, pi_k] = [phi_j^+, pi_k^+] = i delta_jk. The gradient sum runs over the L + 1 bonds
including the two boundary bonds to the fixed ends, so every site carries the on-site frequency
omega0_j^2 = m_j^2 + 2 (DESIGN.md section 3). ``lam`` is an on-site |phi|^4 interaction; at
lam = 0 the chain is quadratic: two independent harmonic chains (real and imaginary part of phi)
with normal-mode frequencies omega_k, omega_k^2 the eigenvalues of
V = diag(m_j^2 + 2) - shift - shift^T, and ground-state energy sum_k omega_k (each of the L modes
appears twice with zero-point energy omega_k/2; Peschel and Eisler, J. Phys. A 42, 504003 (2009),
harmonic chain, from memory).

Local modes of frequency omega0_j (standard oscillator algebra, derived here):

    phi_j = (a_j + b_j^+) / sqrt(2 omega0_j),   pi_j = i sqrt(omega0_j / 2) (a_j^+ - b_j),

so that pi_j^+ pi_j + omega0_j^2 phi_j^+ phi_j = omega0_j (n_a + n_b + 1) (the cross terms
a b and a^+ b^+ cancel), and each bond j, j+1 contributes -(phi_{j+1}^+ phi_j + h.c.) =

    -(1 / (2 sqrt(omega0_j omega0_{j+1}))) [a_j^+ a_{j+1} + b_j^+ b_{j+1}
                                             + a_j^+ b_{j+1}^+ + a_{j+1}^+ b_j^+ + h.c.].

The interaction is phi_j^+ phi_j = R_j / (2 omega0_j) with R = (a^+ + b)(a + b^+), hence
lam (phi_j^+ phi_j)^2 = lam R_j^2 / (4 omega0_j^2). Every operator conserves Q = N_a - N_b; the
pair terms a^+ b^+ change N = N_a + N_b, so only Q is kept (charge "Q", default sector Q = 0).

Truncation. The site is ``boson-ab`` of :mod:`models.bases` with occupations 0..nmax per species
(``nmax`` under ``model:``), and every operator is the projection P O P of the untruncated one
onto that space: the ladder operators' matrix elements between kept states are exact, the
zero-point term is the diagonal omega0 (n_a + n_b + 1), and R^2 is computed as R @ R in
occupations 0..nmax + 2 (enough for every intermediate state of R R between kept states) and then
restricted to 0..nmax (:func:`density_power`), not as the square of the truncated R. The truncated
Hamiltonian is thus P H P, and its ground energy lies above the untruncated one (variational).

Choosing nmax. The weight of the top occupation (``cutoff_weight`` in summary.json: the largest
probability, over sites, of n_a = nmax or n_b = nmax) is set by the occupation of the local modes
in the free ground state. There a and b are each in a thermal state of mean nbar_j =
(omega0_j X_jj + P_jj / omega0_j)/2 - 1/2 (X = V^{-1/2}/2, P = V^{1/2}/2; derived here from
a = (c_1 + i c_2)/sqrt(2) with c_1, c_2 the local modes of the real and imaginary parts), so the
weight is between p and 2p with p = max_j nbar_j^nmax / (1 + nbar_j)^(nmax + 1). Values of 2p
follow; measured top weights of the truncated chain are 0.86-0.96 of them by exact
diagonalisation at L = 3 (m = 1 and 0.3, nmax 2..6; tests/families/test_complex_scalar.py) and
0.91-0.95 with the solver at L = 8, m = 1, nmax 2..4 (bond 32); 0.65-0.72 at L = 8, m = 0.3,
nmax 3 and 4 (bond 24, not fully converged), where the cutoff itself is coarse:

    m = 1   (nbar 0.020, any L >= 8):  nmax 3: 1.6e-5, nmax 4: 3.1e-7, nmax 5: 6.3e-9
    m = 0.3 (nbar 0.106, L >= 32):     nmax 5: 1.5e-5, nmax 6: 1.4e-6, nmax 7: 1.3e-7
    m = 0.3, L = 8:                    nmax 5: 8.8e-6, nmax 6: 7.6e-7

so nmax 4 keeps the weight below 1e-6 at m = 1 and nmax 7 at m = 0.3 (6 up to L = 8); every step
of nmax divides the weight by (1 + nbar)/nbar, about 50 at m = 1 and 10 at m = 0.3. The weight
grows as m decreases, since the local omega0 modes then differ more from the normal modes.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np

from models.bases import boson_ab
from models.patterns import staggered
from models.terms import place
from mps.chain.lattice import LocalSpace, Term

NAME = "complex-scalar"
DESCRIPTION = ("lattice complex scalar, Dirichlet ends: mass m, staggered mass m_stag, on-site |phi|^4 "
               "interaction lam; particles a and antiparticles b, cutoff nmax; charge Q = N_a - N_b")
CHARGE_NAMES = ("Q",)
COUPLINGS = {"m": 1.0, "m_stag": 0.0, "lam": 0.0}
OPTIONS = {"nmax": 4}

# Operators this family adds to the two-species site (all Hermitian, all conserve Q).
ZERO_POINT = "n+1"   # n_a + n_b + 1: the on-site oscillator energy in units of omega0
DENSITY = "R"        # R = (a^+ + b)(a + b^+) = 2 omega0 phi^+ phi (an observable; not in H)
DENSITY_SQUARED = "R^2"


def density_power(nmax: int, power: int) -> np.ndarray:
    """P R^power P for R = (a^+ + b)(a + b^+), power 1 or 2, on occupations 0..nmax per species.

    R is built from ladder matrices on occupations 0..nmax + 2, raised to the power there and
    restricted to 0..nmax (basis index n_a (nmax + 1) + n_b, as :func:`models.bases.boson_ab`).
    R changes each occupation by at most one and its b b^+ part reads occupation n_b + 1, so the
    intermediate states of R R between kept states reach n_a, n_b <= nmax + 1 and the b b^+ of the
    second factor reads nmax + 2: the result is the exact matrix of the untruncated operator between
    kept states (the square of the truncated R would miss the paths through the top states).
    """
    if power not in (1, 2):
        raise ValueError(f"power must be 1 or 2, got {power!r}")
    big = nmax + 2
    ops = boson_ab(big).ops
    r = (ops["a^+"] + ops["b"]) @ (ops["a"] + ops["b^+"])
    na, nb = np.divmod(np.arange((big + 1) ** 2), big + 1)
    keep = np.nonzero((na <= nmax) & (nb <= nmax))[0]   # ascending: same order as the small site
    return np.linalg.matrix_power(r, power)[np.ix_(keep, keep)]


def space(opts) -> LocalSpace:
    """``boson-ab`` site with occupations 0..nmax keeping only Q, plus ``n+1``, ``R`` and ``R^2``."""
    nmax = opts["nmax"]
    site = boson_ab(nmax).keep_charges(("Q",))
    extra = {ZERO_POINT: site.ops["n"] + np.eye(site.dim), DENSITY: density_power(nmax, 1),
             DENSITY_SQUARED: density_power(nmax, 2)}
    return replace(site, ops={**site.ops, **extra},
                   adjoints={**site.adjoints, **{name: name for name in extra}})


def masses(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """m_j = m + m_stag (-1)^j for j = 0..L-1."""
    return staggered(c["m"], c["m_stag"], sites)


def onsite_frequencies(sites: int, c: Mapping[str, float]) -> np.ndarray:
    """omega0_j = sqrt(m_j^2 + 2): the local frequency with both gradient bonds of a site."""
    return np.sqrt(masses(sites, c) ** 2 + 2.0)


def terms(sites: int, c: Mapping[str, float], opts) -> list[Term]:
    """Terms of H (module docstring): omega0_j (n + 1) per site, four pair/hopping products plus
    their conjugates per bond with -1/(2 sqrt(omega0_j omega0_{j+1})), and lam R^2/(4 omega0_j^2)."""
    s = space(opts)
    w = onsite_frequencies(sites, c)
    bond = -0.5 / np.sqrt(w[:-1] * w[1:])
    out = place(f"{ZERO_POINT}(j)", w, s, sites)
    for product in ("a^+(j) a(j+1)", "b^+(j) b(j+1)", "a^+(j) b^+(j+1)", "b^+(j) a^+(j+1)"):
        out += place(product, bond, s, sites, add_conjugate=True)
    return out + place(f"{DENSITY_SQUARED}(j)", c["lam"] / (4.0 * w**2), s, sites)


def single_particle(sites: int, c: Mapping[str, float], opts) -> None:
    """None: a boson chain is not a fermion chain (the free case goes through :func:`scalar_masses`)."""
    return None


def scalar_masses(sites: int, c: Mapping[str, float], opts) -> np.ndarray | None:
    """Per-site masses m_j (length L) when the chain is quadratic (lam = 0), else None.

    With them an exact engine builds V = diag(m_j^2 + 2) - shift - shift^T (DESIGN.md section 5).
    """
    if c["lam"] != 0.0:
        return None
    return masses(sites, c)


def default_charge(sites: int, opts) -> dict[str, float]:
    """The neutral sector Q = 0 (the free ground state's sector, by charge conjugation)."""
    return {"Q": 0.0}
