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
from itertools import accumulate

import numpy as np

from mps.blocks.sector_kernel import fuse_sectors

_MAX_CHARGES = 3
_SHIFT = 21
_BIAS = 1 << (_SHIFT - 1)

Charge = tuple[int, ...]


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
    def max_charge(self) -> int:
        """Largest |charge component| of the leg (with one charge, the sectors are sorted, so it
        sits at one of the two ends)."""
        if len(self.charges[0]) == 1:
            return max(-self.charges[0][0], self.charges[-1][0])
        return max(abs(c) for q in self.charges for c in q)

    @cached_property
    def size_array(self) -> np.ndarray:
        return np.array(self.sizes, dtype=np.int64)

    @cached_property
    def offsets(self) -> np.ndarray:
        """Start of every sector in the dense index, plus the total dimension at the end."""
        return np.concatenate([[0], np.cumsum(self.sizes, dtype=np.int64)])

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
        """The same sectors with the opposite flow (the leg it contracts with). Built once per
        leg and linked both ways, so legs and their duals stay the same objects (cheap to hash
        and compare in the plan caches)."""
        d = self.__dict__.get("_dual")
        if d is None:
            d = object.__new__(Leg)
            for name, value in (("charges", self.charges), ("sizes", self.sizes), ("flow", -self.flow),
                                ("_dual", self)):
                object.__setattr__(d, name, value)
            object.__setattr__(self, "_dual", d)
        return d

    def state_charges(self) -> np.ndarray:
        """(dim, k) charge vector of every dense index."""
        return np.repeat(self.charge_array, self.sizes, axis=0)

    def is_dual_of(self, other: "Leg") -> bool:
        """Whether ``other`` has the same sectors and the opposite flow (a leg it contracts
        with); the linked dual of :meth:`dual` is recognised without comparing sectors."""
        return self.__dict__.get("_dual") is other or (
            self.charges == other.charges and self.sizes == other.sizes and self.flow == -other.flow)


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

    ``combos`` (n, nlegs) lists every combination of sector indices whose block is non-empty, in
    order of its mixed-radix code ``codes`` (its index among all combinations in C order, see
    :attr:`radix`); ``sector`` and ``offset`` give its fused sector and its offset inside that
    sector. The compiled planner looks combinations up by bisection on the codes (:attr:`arrays`);
    ``entries[combo] = (fused sector, offset, shape)`` is the same as a dict.
    """

    legs: tuple[Leg, ...]
    fused: Leg
    combos: np.ndarray
    codes: np.ndarray
    sector: np.ndarray
    offset: np.ndarray

    @cached_property
    def radix(self) -> np.ndarray:
        """Multipliers of the mixed-radix code of a combination (C order over the legs)."""
        return mixed_radix([leg.nsec for leg in self.legs])

    @cached_property
    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(codes in increasing order, sector, offset, radix, fused sizes) for compiled look-ups."""
        return self.codes, self.sector, self.offset, self.radix, self.fused.size_array

    @cached_property
    def leg_sizes(self) -> tuple[np.ndarray, np.ndarray]:
        """(sizes, starts) of the fused legs' sectors, packed (:func:`pack_legs`)."""
        return pack_legs(self.legs)[1:3]

    @cached_property
    def entries(self) -> dict[tuple[int, ...], tuple[int, int, tuple[int, ...]]]:
        sizes = [np.asarray(leg.sizes, dtype=np.int64) for leg in self.legs]
        shapes = np.stack([s[self.combos[:, i]] for i, s in enumerate(sizes)], axis=1) if self.legs else \
            np.zeros((len(self.combos), 0), dtype=np.int64)
        return {combo: (s, off, shape) for combo, s, off, shape in
                zip(map(tuple, self.combos.tolist()), self.sector.tolist(), self.offset.tolist(),
                    map(tuple, shapes.tolist()))}

    def combos_of(self, sector: int) -> list[tuple[int, ...]]:
        """Combinations that make up one fused sector, in offset order."""
        return self._by_sector.get(sector, [])

    @cached_property
    def _by_sector(self) -> dict[int, list[tuple[int, ...]]]:
        out: dict[int, list[tuple[int, ...]]] = {}
        for combo, (s, _, _) in sorted(self.entries.items(), key=lambda kv: (kv[1][0], kv[1][1])):
            out.setdefault(s, []).append(combo)
        return out


def pack_legs(legs: tuple[Leg, ...]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sectors of several legs as flat arrays for the compiled kernels: (charges, sizes, starts,
    flows), the sectors of leg i being rows starts[i]:starts[i+1]."""
    starts = np.array([0, *accumulate(leg.nsec for leg in legs)], dtype=np.int64)
    return (np.concatenate([leg.charge_array for leg in legs]), np.concatenate([leg.size_array for leg in legs]),
            starts, np.array([leg.flow for leg in legs], dtype=np.int64))


def charge_bound(legs: tuple[Leg, ...]) -> int:
    """Largest |combined charge| a combination of sectors of ``legs`` can reach."""
    return sum(leg.max_charge for leg in legs)


def leg_of_arrays(charges: np.ndarray, sizes: np.ndarray, flow: int) -> Leg:
    """A leg from sorted (nsec, k) charges and sizes, as produced by the kernels (which sort the
    sectors and keep charges in range, so the validation of :class:`Leg` is skipped)."""
    leg = object.__new__(Leg)
    for name, value in (("charges", tuple(map(tuple, charges.tolist()))), ("sizes", tuple(sizes.tolist())),
                        ("flow", int(flow))):
        object.__setattr__(leg, name, value)
    return leg


def mixed_radix(nsec: list[int]) -> np.ndarray:
    """Multipliers r_i = prod_{j > i} nsec_j that turn sector keys into increasing integer codes."""
    radix = [1] * len(nsec)
    for i in range(len(nsec) - 2, -1, -1):
        radix[i] = radix[i + 1] * nsec[i + 1]
    return np.array(radix, dtype=np.int64)


@lru_cache(maxsize=4096)
def fuse(legs: tuple[Leg, ...], flow: int = 1) -> FusionMap:
    """Fuse ``legs`` into one leg of flow ``flow`` (sectors sorted by charge).

    The fused sector of combined charge c = sum_i f_i q_i carries charge ``flow * c`` so that the
    conservation rule is unchanged. Inside a sector, combinations are laid out in lexicographic
    order of their sector indices.
    """
    if not legs:
        raise ValueError("fuse needs at least one leg")
    if charge_bound(legs) >= _BIAS:
        raise ValueError(f"fused charges must be smaller than {_BIAS} in magnitude")
    combos, codes, sector, offset, charges, sizes = fuse_sectors(*pack_legs(legs), flow, _SHIFT, _BIAS)
    if combos.shape[0] == 0:  # every combination is empty: a single empty sector
        return FusionMap(legs, Leg(((0,) * legs[0].nq,), (0,), flow), combos, codes, sector, offset)
    return FusionMap(legs, leg_of_arrays(charges, sizes, flow), combos, codes, sector, offset)


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


__all__ = ["Leg", "FusionMap", "fuse", "pack_legs", "charge_bound", "mixed_radix", "leg_of_arrays", "leg_from_states",
           "reachable_charges", "reachable_totals"]
