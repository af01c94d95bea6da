"""Exact charge-resolved entanglement of several independent free-fermion species (e.g. the two spin
species of the Hubbard chain at U = 0), each a Slater determinant.

With independent species the block's reduced density matrix is a product, rho_A = (x)_s rho_s,
each factor Gaussian with the occupations nu_{s,k} of its block correlation matrix (Peschel,
J. Phys. A 36, L205 (2003)). A level is a product of one level per species and its integer
charge vector is q = sum_s N_s a_s, where a_s is the charge one particle of species s carries
(Hubbard: up (1, 1) and down (1, -1) in the units of (N, 2 S^z)). The sector sums therefore
combine species by species:

- p(q) = sum_{N_1, N_2: q} p_1(N_1) p_2(N_2);
- Z_n(q) = sum_{lambda in q} lambda^n = sum Z_n,1(N_1) Z_n,2(N_2) (log domain);
- D(q) = sum_{lambda in q} lambda log lambda = sum [D_1 p_2 + p_1 D_2] (n = 1);
- lambda_max(q) = max lambda_max,1(N_1) lambda_max,2(N_2) (n = inf);
- Z_n(alpha)/Z_n(0) = prod_s prod_k [w0_{s,k} + w1_{s,k} e^{i alpha u a_{s,c}}] (the flux seen by one
  particle of species s in the resolved charge c);

with the one-species sums of :mod:`mps.theory.freefermions` (Bonsignori, Ruggiero and Calabrese,
J. Phys. A 52, 475302 (2019)). Two species are combined on the grid (N_1, N_2), cost O(cut^2).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import xlogy

from mps.analysis.resolved import CutResolved
from mps.theory.freefermions import (
    dual_sector_sums,
    level_counts,
    log_largest_level,
    log_sector_sums,
    replica_weights,
)


def species_fillings(per_particle: Sequence[Sequence[int]], target: Sequence[int]) -> list[int]:
    """Particles of each species for the integer total charge ``target``: solve sum_s N_s a_s = q.

    Raises ValueError when the charge does not fix non-negative integer fillings uniquely.
    """
    A = np.asarray(per_particle, dtype=float).T            # (k, species)
    q = np.asarray(target, dtype=float)
    n, *_ = np.linalg.lstsq(A, q, rcond=None)
    if np.linalg.matrix_rank(A) < A.shape[1] or not np.allclose(A @ np.round(n), q) or np.any(np.round(n) < 0):
        raise ValueError(f"charge {tuple(target)} does not fix the species fillings")
    return [int(round(x)) for x in n]


class _Grid:
    """Cells (N_1, N_2) of the two species grouped by their charge (one pass, reused by every sum)."""

    def __init__(self, labels: np.ndarray):
        self.keys, inverse = np.unique(labels, return_inverse=True)
        self.inverse = inverse.ravel()

    def total(self, values: np.ndarray) -> np.ndarray:
        return np.bincount(self.inverse, weights=values.ravel(), minlength=self.keys.size)

    def largest(self, values: np.ndarray) -> np.ndarray:
        out = np.full(self.keys.size, -np.inf)
        np.maximum.at(out, self.inverse, values.ravel())
        return out

    def log_total(self, log_values: np.ndarray) -> np.ndarray:
        """log sum exp over each group, shifted by the group's largest term (no under- or overflow)."""
        top = self.largest(log_values)
        shift = np.where(np.isfinite(top), top, 0.0)
        with np.errstate(divide="ignore"):
            return shift + np.log(self.total(np.exp(log_values.ravel() - shift[self.inverse])))


def resolve_species_block(
    nus: Sequence[np.ndarray],
    per_particle: Sequence[Sequence[int]],
    cut: int,
    renyi: Sequence[float],
    alphas: np.ndarray,
    units: Sequence[float],
    component: int = 0,
    floor: float = 1e-12,
) -> CutResolved:
    """Exact resolution of a block of two independent free species by charge ``component``.

    Parameters
    ----------
    nus : occupations (cut,) of the block for each of the two species.
    per_particle : integer charge vector a_s carried by one particle of each species.
    units : physical value of one integer unit of each charge; q_phys = units[c] * q[c].
    """
    if len(nus) != 2 or len(per_particle) != 2:
        raise ValueError("resolve_species_block combines exactly two species")
    ns = tuple(float(n) for n in renyi)
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    nus = [np.clip(np.asarray(nu, dtype=float), 0.0, 1.0) for nu in nus]
    a = [int(np.asarray(pp)[component]) for pp in per_particle]
    u = float(units[component])
    grid = _Grid(np.add.outer(a[0] * np.arange(nus[0].size + 1), a[1] * np.arange(nus[1].size + 1)))
    sums = [dual_sector_sums(nu) for nu in nus]                      # (p(N), D(N)) per species
    with np.errstate(divide="ignore"):
        logp = [np.log(p) for p, _ in sums]
    log_prob = grid.log_total(logp[0][:, None] + logp[1][None, :])
    present = np.exp(log_prob) > 0              # sectors whose p(q) is representable, as for one species
    keys, log_prob = grid.keys[present], log_prob[present]
    p = np.exp(log_prob)
    keep = p >= floor
    counts = grid.total(np.outer(*(_level_counts(nu) for nu in nus)))[present]

    entropy = np.zeros(len(ns))
    sector_entropy = np.full((len(ns), keys.size), np.nan)
    moments = np.ones((len(ns), alphas.size), dtype=complex)
    for r, n in enumerate(ns):
        parts = [replica_weights(nu, n) for nu in nus]
        if n == 1.0:
            entropy[r] = float(sum(-np.sum(xlogy(nu, nu) + xlogy(1 - nu, 1 - nu)) for nu in nus))
            (p0, d0), (p1, d1) = sums
            dgrid = d0[:, None] * p1[None, :] + p0[:, None] * d1[None, :]
            d = grid.total(dgrid)[present]
            values = log_prob - d / np.where(keep, p, 1.0)
        elif np.isinf(n):
            entropy[r] = -sum(lnorm for _, _, lnorm in parts)
            top = [log_largest_level(nu) for nu in nus]
            values = log_prob - grid.largest(top[0][:, None] + top[1][None, :])[present]
        else:
            entropy[r] = sum(lnorm for _, _, lnorm in parts) / (1.0 - n)
            logz = [lnorm + log_sector_sums(w0, w1) for w0, w1, lnorm in parts]
            values = (grid.log_total(logz[0][:, None] + logz[1][None, :])[present] - n * log_prob) / (1.0 - n)
        sector_entropy[r, keep] = values[keep]
        for (w0, w1, _), charge in zip(parts, a):
            phase = np.exp(1j * alphas * u * charge)
            with np.errstate(divide="ignore"):
                moments[r] *= np.exp(np.log(w0[None, :] + w1[None, :] * phase[:, None]).sum(axis=1))
    return CutResolved(cut=cut, charges=u * keys, probability=p, counts=counts, renyi=ns, entropy=entropy,
                       sector_entropy=sector_entropy, alphas=alphas, moments=moments, floor=floor)


def _level_counts(nu: np.ndarray) -> np.ndarray:
    """Number of non-zero levels with N = 0..cut particles: binomial(m, N - k1), zero outside."""
    k1 = int(np.sum(nu == 1.0))
    m = int(np.sum((nu > 0) & (nu < 1)))
    filled = np.arange(nu.size + 1)
    inside = (filled >= k1) & (filled <= k1 + m)
    out = np.zeros(nu.size + 1)
    out[inside] = level_counts(m, filled[inside] - k1)
    return out
