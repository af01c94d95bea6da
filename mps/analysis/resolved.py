"""Record of the charge-resolved entanglement of one bipartition, and the figures derived from it.

Both the Schmidt-value analysis of a matrix-product state and the exact free-fermion engine
produce a :class:`CutResolved`, so the two can be compared entry by entry.

Definitions (Lukin et al., Science 364, 256 (2019); Wiseman and Vaccaro, PRL 91, 097902 (2003)):
p(q) = sum of the Schmidt weights lambda in sector q; S_n(q) is the Renyi entropy of the
normalised sector spectrum lambda/p(q); S_number = -sum_q p log p; S_config = sum_q p S_1(q).
Exact sum rule: S_1 = S_number + S_config.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


class SectorWeights:
    """Number and configurational entropy, shared by the per-charge and joint records."""

    @property
    def number_entropy(self) -> float:
        """S_number = -sum_q p(q) log p(q)."""
        p = self.probability[self.probability > 0]
        return float(-np.dot(p, np.log(p)))

    @property
    def config_entropy(self) -> float:
        """S_config = sum_q p(q) S_1(q), over sectors above the floor (exact when the floor is 0)."""
        if 1.0 not in self.renyi:
            raise ValueError("configurational entropy needs the von Neumann index n = 1")
        s1 = self.sector_entropy[self.renyi.index(1.0)]
        ok = ~np.isnan(s1)
        return float(np.dot(self.probability[ok], s1[ok]))


@dataclass(frozen=True)
class CutResolved(SectorWeights):
    """Charge-resolved entanglement of the left block of ``cut`` sites.

    Attributes
    ----------
    cut : number of sites in the left block.
    charges : (nsec,) physical charge of the left block in each sector (e.g. S^z_A, half-integers
        allowed, or N_A), sorted ascending.
    probability : (nsec,) p(q).
    counts : (nsec,) number of Schmidt values (non-zero many-body levels) in each sector.
    renyi : Renyi indices n (``np.inf`` allowed).
    entropy : (nrenyi,) total S_n of the block.
    sector_entropy : (nrenyi, nsec) S_n(q); NaN for sectors with p(q) < floor.
    alphas : (nalpha,) flux values in [-pi, pi].
    moments : (nrenyi, nalpha) complex Z_n(alpha)/Z_n(0) = Tr[rho^n e^{i alpha Q_A}] / Tr[rho^n].
    floor : probability below which sector entropies are not reported.
    """

    cut: int
    charges: np.ndarray
    probability: np.ndarray
    counts: np.ndarray
    renyi: tuple[float, ...]
    entropy: np.ndarray
    sector_entropy: np.ndarray
    alphas: np.ndarray
    moments: np.ndarray
    floor: float

    def cumulant(self, order: int) -> float:
        """Cumulant kappa_order of the block charge under p(q) (order 1..4)."""
        p, q = self.probability, self.charges
        mean = float(np.dot(p, q))
        if order == 1:
            return mean
        d = q - mean
        m2 = float(np.dot(p, d**2))
        if order == 2:
            return m2
        if order == 3:
            return float(np.dot(p, d**3))
        if order == 4:
            return float(np.dot(p, d**4)) - 3.0 * m2**2
        raise ValueError(f"cumulant order must be 1..4, got {order}")


@dataclass(frozen=True)
class JointResolved(SectorWeights):
    """Entanglement resolved by the full charge vector (k >= 2 charges) of the left block.

    Same content as :class:`mps.analysis.resolved.CutResolved`, except that ``charges`` is a
    (nsec, k) array of physical charge vectors (rows in lexicographic order) and the charged
    moments are taken at flux vectors: ``moments[i, a] = Tr[rho^n e^{i fluxes[a] . Q_A}] /
    Tr[rho^n]`` for n = ``renyi[i]``.
    """

    cut: int
    charges: np.ndarray
    probability: np.ndarray
    counts: np.ndarray
    renyi: tuple[float, ...]
    entropy: np.ndarray
    sector_entropy: np.ndarray
    fluxes: np.ndarray
    moments: np.ndarray
    floor: float
