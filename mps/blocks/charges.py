"""U(1)^k charge labels: legs (ordered charge sectors with a direction), fusion and conservation.

A leg is an ordered list of sectors, each an integer charge vector of length k with a block size,
and a flow f = +1 or -1. A tensor with legs (L_1, ..., L_r) and total charge Q may hold an entry
only where sum_i f_i q_i = Q (conservation rule; Singh, Pfeifer and Vidal, PRB 83, 115125 (2011)).
Physical units (half-integer S^z and the like) are handled at the edges; here every charge is an
integer vector.

Fusing a group of legs into one leg of flow f collects every combination of their sectors with
the same combined charge c = sum_i f_i q_i into one sector of charge f c; a :class:`FusionMap`
remembers where each combination sits inside its fused sector so the fused leg can be split again.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np

_MAX_CHARGES = 3
_SHIFT = 21
_BIAS = 1 << (_SHIFT - 1)

Charge = tuple[int, ...]


def encode(charges: np.ndarray) -> np.ndarray:
    """Pack integer charge vectors of shape (..., k), k <= 3, |q| < 2^20, into single int64 keys."""
    charges = np.asarray(charges, dtype=np.int64)
    key = np.zeros(charges.shape[:-1], dtype=np.int64)
    for i in range(charges.shape[-1]):
        key |= (charges[..., i] + _BIAS) << (_SHIFT * i)
    return key


@dataclass(frozen=True)
class Leg:
    """One tensor leg: sectors sorted by charge vector, each with a block size, and a flow.

    Attributes
    ----------
    charges : tuple of integer charge vectors, strictly increasing (lexicographic).
    sizes : block size of every sector (>= 0).
    flow : +1 or -1, the sign with which this leg's charge enters the conservation rule.
    """

    charges: tuple[Charge, ...]
    sizes: tuple[int, ...]
    flow: int

    def __post_init__(self) -> None:
        if self.flow not in (1, -1):
            raise ValueError(f"leg flow must be +1 or -1, got {self.flow!r}")
        if len(self.charges) != len(self.sizes):
            raise ValueError("a leg needs one size per charge sector")
        if not self.charges:
            raise ValueError("a leg needs at least one sector")
        k = len(self.charges[0])
        if not 1 <= k <= _MAX_CHARGES or any(len(q) != k for q in self.charges):
            raise ValueError(f"all charge vectors of a leg must have the same length 1..{_MAX_CHARGES}")
        if any(a >= b for a, b in zip(self.charges, self.charges[1:])):
            raise ValueError("leg sectors must be sorted by charge with no repeats")
        if any(s < 0 for s in self.sizes):
            raise ValueError("leg sector sizes must be >= 0")
        if any(abs(c) >= _BIAS for q in self.charges for c in q):
            raise ValueError(f"charges must be smaller than {_BIAS} in magnitude")

    @classmethod
    def make(cls, charges, sizes, flow: int) -> "Leg":
        """Build a leg from any iterable of charges (ints or vectors) and sizes, sorting sectors."""
        qs = [tuple(int(c) for c in np.atleast_1d(q)) for q in charges]
        order = sorted(range(len(qs)), key=lambda i: qs[i])
        return cls(tuple(qs[i] for i in order), tuple(int(sizes[i]) for i in order), int(flow))

    @property
    def nq(self) -> int:
        """Number of U(1) charges k."""
        return len(self.charges[0])

    @property
    def nsec(self) -> int:
        return len(self.charges)

    @cached_property
    def dim(self) -> int:
        return int(sum(self.sizes))

    @cached_property
    def charge_array(self) -> np.ndarray:
        return np.array(self.charges, dtype=np.int64).reshape(self.nsec, self.nq)

    @cached_property
    def offsets(self) -> np.ndarray:
        """Start of every sector in the dense index, plus the total dimension at the end."""
        return np.concatenate([[0], np.cumsum(self.sizes, dtype=np.int64)])

    @cached_property
    def _lookup(self) -> dict[int, int]:
        """Encoded charge -> sector index (for vectorised look-ups)."""
        return {int(k): i for i, k in enumerate(encode(self.charge_array))}

    @cached_property
    def _sector_of(self) -> dict[Charge, int]:
        return {q: i for i, q in enumerate(self.charges)}

    def index(self, charge: Charge) -> int:
        """Sector index of ``charge``, or -1 if the leg has no such sector."""
        return self._sector_of.get(tuple(charge), -1)

    def __hash__(self) -> int:
        h = self.__dict__.get("_hash")
        if h is None:
            h = hash((self.charges, self.sizes, self.flow))
            object.__setattr__(self, "_hash", h)
        return h

    def dual(self) -> "Leg":
        """The same sectors with the opposite flow (the leg it contracts with)."""
        return Leg(self.charges, self.sizes, -self.flow)

    def state_charges(self) -> np.ndarray:
        """(dim, k) charge vector of every dense index."""
        return np.repeat(self.charge_array, self.sizes, axis=0)

    def is_dual_of(self, other: "Leg") -> bool:
        return self.charges == other.charges and self.sizes == other.sizes and self.flow == -other.flow


def leg_from_states(state_charges: np.ndarray, flow: int) -> tuple[Leg, np.ndarray]:
    """Group basis states by charge into a leg.

    Returns the leg and the permutation ``perm`` such that basis state ``perm[i]`` is dense index i
    of the leg (states of one sector keep their relative order).
    """
    q = np.asarray(state_charges, dtype=np.int64)
    if q.ndim == 1:
        q = q[:, None]
    perm = np.lexsort(q.T[::-1])
    uniq, counts = np.unique(q[perm], axis=0, return_counts=True)
    return Leg(tuple(tuple(int(c) for c in row) for row in uniq), tuple(int(c) for c in counts), flow), perm


@dataclass(frozen=True)
class FusionMap:
    """Where every combination of sectors of a group of legs sits inside the fused leg.

    ``entries[combo] = (fused sector index, offset, shape)`` for every combination ``combo`` (tuple
    of sector indices, one per leg) whose block is non-empty; ``fused`` is the resulting leg.
    """

    legs: tuple[Leg, ...]
    fused: Leg
    entries: dict[tuple[int, ...], tuple[int, int, tuple[int, ...]]]

    def combos_of(self, sector: int) -> list[tuple[int, ...]]:
        """Combinations that make up one fused sector, in offset order."""
        return self._by_sector.get(sector, [])

    @cached_property
    def _by_sector(self) -> dict[int, list[tuple[int, ...]]]:
        out: dict[int, list[tuple[int, ...]]] = {}
        for combo, (s, _, _) in sorted(self.entries.items(), key=lambda kv: (kv[1][0], kv[1][1])):
            out.setdefault(s, []).append(combo)
        return out


def combined_charges(legs: tuple[Leg, ...]) -> tuple[np.ndarray, np.ndarray]:
    """All sector combinations of ``legs`` and their combined charge sum_i f_i q_i.

    Returns ``combos`` of shape (ncombo, nlegs) (lexicographic order) and charges (ncombo, k).
    """
    grids = np.meshgrid(*[np.arange(leg.nsec) for leg in legs], indexing="ij")
    combos = np.stack([g.ravel() for g in grids], axis=1)
    total = np.zeros((combos.shape[0], legs[0].nq), dtype=np.int64)
    for i, leg in enumerate(legs):
        total += leg.flow * leg.charge_array[combos[:, i]]
    return combos, total


@lru_cache(maxsize=4096)
def fuse(legs: tuple[Leg, ...], flow: int = 1) -> FusionMap:
    """Fuse ``legs`` into one leg of flow ``flow`` (sectors sorted by charge).

    The fused sector of combined charge c = sum_i f_i q_i carries charge ``flow * c`` so that the
    conservation rule is unchanged. Inside a sector, combinations are laid out in lexicographic
    order of their sector indices.
    """
    if not legs:
        raise ValueError("fuse needs at least one leg")
    combos, total = combined_charges(legs)
    sizes = np.ones(combos.shape[0], dtype=np.int64)
    for i, leg in enumerate(legs):
        sizes *= np.asarray(leg.sizes, dtype=np.int64)[combos[:, i]]
    keep = sizes > 0
    combos, total, sizes = combos[keep], flow * total[keep], sizes[keep]
    if combos.shape[0] == 0:  # every combination is empty: a single empty sector
        return FusionMap(legs, Leg(((0,) * legs[0].nq,), (0,), flow), {})
    order = np.lexsort(np.concatenate([combos.T[::-1], total.T[::-1]], axis=0))
    combos, total, sizes = combos[order], total[order], sizes[order]
    new_sector = np.concatenate([[True], np.any(total[1:] != total[:-1], axis=1)])
    sector_id = np.cumsum(new_sector) - 1
    starts = np.flatnonzero(new_sector)
    csum = np.cumsum(sizes) - sizes
    offsets = csum - csum[starts][sector_id]
    fused_sizes = np.add.reduceat(sizes, starts)
    fused = Leg(tuple(tuple(int(c) for c in row) for row in total[starts]),
                tuple(int(s) for s in fused_sizes), flow)
    shapes = np.stack([np.asarray(leg.sizes, dtype=np.int64)[combos[:, i]] for i, leg in enumerate(legs)], axis=1)
    entries = {combo: (s, off, shape) for combo, s, off, shape in
               zip(map(tuple, combos.tolist()), sector_id.tolist(), offsets.tolist(), map(tuple, shapes.tolist()))}
    return FusionMap(legs, fused, entries)


def reachable_totals(local: np.ndarray, sites: int) -> np.ndarray:
    """All total integer charge vectors of ``sites`` sites with local charges ``local`` (dim, k).

    Dynamic programme over sites on the set of reachable vectors, R_0 = {0} and
    R_{s+1} = {r + q : r in R_s, q a local charge}, with the set held as a boolean grid over
    its bounding box (cost ~ dim * sites * box, fine for k = 1 up to 10^4 sites).
    Returns the reachable vectors as rows (m, k), sorted lexicographically.
    """
    local = np.asarray(local, dtype=np.int64)
    local = local.reshape(len(local), -1)
    lo = local.min(axis=0)
    shifted = local - lo
    span = shifted.max(axis=0)
    grid = np.ones((1,) * local.shape[1], dtype=bool)  # shifted sums of zero sites: {0}
    for _ in range(sites):
        grown = np.zeros(tuple(np.add(grid.shape, span)), dtype=bool)
        for q in shifted:
            grown[tuple(slice(a, a + n) for a, n in zip(q, grid.shape))] |= grid
        grid = grown
    return np.argwhere(grid) + sites * lo



def reachable_charges(site_charges: np.ndarray, sites: int) -> set[Charge]:
    """Set of total integer charges reachable as a sum of ``sites`` local charges."""
    return {tuple(int(c) for c in row) for row in reachable_totals(site_charges, sites)}


__all__ = ["Leg", "FusionMap", "fuse", "leg_from_states", "combined_charges", "encode",
           "reachable_charges", "reachable_totals"]
