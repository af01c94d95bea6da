"""Matrix-product states with U(1)^k charge labels on every bond.

Site tensor j has legs (left bond, physical, right bond) with flows (+1, +1, -1) and charge 0, so
the charge of a right-bond sector equals the charge of its left-bond sector plus that of the
physical state: a bond sector's label *is* the integer charge of the block of sites to its left.
Bond 0 carries charge 0 and bond L the target total charge. The Schmidt values of every bond
are therefore grouped by the left block's charge without any extra work.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.decompose import lq, qr
from mps.blocks.tensor import BlockTensor


@dataclass
class BondSpectrum:
    """Schmidt values of one bond, per sector: ``values[i]`` belongs to charge ``charges[i]``."""

    charges: tuple[tuple[int, ...], ...]
    values: tuple[np.ndarray, ...]

    def as_dict(self) -> dict[tuple[int, ...], np.ndarray]:
        return dict(zip(self.charges, self.values))

    def entropy(self) -> float:
        """Von Neumann entropy -sum lambda log lambda of the normalised weights lambda = s^2."""
        w = np.concatenate(self.values) ** 2
        w = w[w > 0] / w.sum()
        return float(-np.dot(w, np.log(w)))


@dataclass
class ChainState:
    """An MPS on an open chain with its orthogonality centre and the latest Schmidt values.

    ``spectra[b]`` holds the Schmidt values of bond b (between sites b-1 and b, b = 1..L-1) when
    known, else None.
    """

    tensors: list[BlockTensor]
    center: int
    spectra: list[BondSpectrum | None] = field(default_factory=list)

    def __post_init__(self) -> None:
        if not self.spectra:
            self.spectra = [None] * (len(self.tensors) + 1)

    @property
    def sites(self) -> int:
        return len(self.tensors)

    @property
    def bond_dims(self) -> list[int]:
        return [t.legs[2].dim for t in self.tensors[:-1]]

    @property
    def total_charge(self) -> tuple[int, ...]:
        return self.tensors[-1].legs[2].charges[0]


def bond_charge_sets(site_charges: np.ndarray, sites: int, target: tuple[int, ...]) -> list[list[tuple]]:
    """Charges a left block of b sites can carry in a state of total charge ``target`` (b = 0..L).

    q is allowed on bond b when b sites can sum to q and the other L - b sites to target - q. The
    sums reachable by n sites are kept as boolean grids over their bounding boxes (one dynamic
    programme over the sites, as in :func:`mps.blocks.charges.reachable_totals`), so the cost is
    that of array operations on the boxes, not of Python loops over charge vectors.
    """
    local = np.asarray(site_charges, dtype=np.int64).reshape(len(site_charges), -1)
    lo = local.min(axis=0)
    shifted = local - lo
    span = shifted.max(axis=0)
    grids = [np.ones((1,) * local.shape[1], dtype=bool)]
    for _ in range(sites):
        grid = grids[-1]
        grown = np.zeros(tuple(np.add(grid.shape, span)), dtype=bool)
        for q in shifted:
            grown[tuple(slice(a, a + n) for a, n in zip(q, grid.shape))] |= grid
        grids.append(grown)
    target = np.asarray(tuple(target), dtype=np.int64)
    out = []
    for b in range(sites + 1):
        left = np.argwhere(grids[b])                      # shifted by b * lo
        right = target - (left + b * lo) - (sites - b) * lo   # shifted index into grids[L - b]
        shape = np.asarray(grids[sites - b].shape)
        inside = np.all((right >= 0) & (right < shape), axis=1)
        ok = np.zeros(len(left), dtype=bool)
        ok[inside] = grids[sites - b][tuple(right[inside].T)]
        if not ok.any():
            raise ValueError(f"total charge {tuple(int(t) for t in target)} cannot be reached on {sites} sites")
        out.append(sorted(tuple(int(c) for c in row) for row in left[ok] + b * lo))
    return out


def random_state(phys: Leg, sites: int, target, bond: int, rng: np.random.Generator) -> ChainState:
    """Random normalised MPS in the sector of total charge ``target``, right-canonical, centre 0.

    Each bond keeps (at most ``bond``) charge sectors nearest to the straight line from 0 to the
    target charge, one state per sector, so every charge path that the chain can take is open.
    """
    target = tuple(int(t) for t in np.atleast_1d(target))
    sets = bond_charge_sets(phys.charge_array, sites, target)
    legs = []
    for b, qs in enumerate(sets):
        ideal = np.asarray(target, dtype=float) * b / sites
        qs = sorted(qs, key=lambda q: (float(np.sum((np.asarray(q) - ideal) ** 2)), q))[:max(bond, 1)]
        legs.append(Leg.make(qs, [1] * len(qs), 1))
    tensors = [BlockTensor.random((legs[j], phys, legs[j + 1].dual()), None, rng=rng)
               for j in range(sites)]
    return canonicalize(ChainState(tensors, sites - 1), 0)


def product_state(phys: Leg, sites: int, target) -> ChainState:
    """A product state with total charge ``target``: each site takes the local charge that keeps the
    running charge closest to the straight line from 0 to the target (while the target stays
    reachable)."""
    target = tuple(int(t) for t in np.atleast_1d(target))
    sets = bond_charge_sets(phys.charge_array, sites, target)
    run = np.zeros(len(target), dtype=np.int64)
    legs = [Leg.make([run.copy()], [1], 1)]
    choice = []
    for j in range(sites):
        ideal = np.asarray(target, dtype=float) * (j + 1) / sites
        best = None
        for s, q in enumerate(phys.charges):
            nxt = tuple(int(c) for c in run + np.asarray(q))
            if nxt in sets[j + 1]:
                cost = float(np.sum((np.asarray(nxt) - ideal) ** 2))
                if best is None or cost < best[0]:
                    best = (cost, s, nxt)
        _, s, nxt = best
        choice.append(s)
        run = np.asarray(nxt)
        legs.append(Leg.make([nxt], [1], 1))
    tensors = []
    for j, s in enumerate(choice):
        t = BlockTensor((legs[j], phys, legs[j + 1].dual()))
        t.get((0, s, 0))[0, 0, 0] = 1.0
        tensors.append(t)
    return ChainState(tensors, 0)


def canonicalize(state: ChainState, center: int) -> ChainState:
    """Bring ``state`` to mixed canonical form with orthogonality centre ``center``, normalised."""
    ts = list(state.tensors)
    for j in range(0, center):
        q, r = qr(ts[j], (0, 1), (2,))
        ts[j] = q
        ts[j + 1] = contract(r, ts[j + 1], (1,), (0,))
    for j in range(len(ts) - 1, center, -1):
        l, q = lq(ts[j], (0,), (1, 2))
        ts[j] = q
        ts[j - 1] = contract(ts[j - 1], l, (2,), (0,))
    nrm = ts[center].norm()
    if nrm == 0:
        raise ValueError("the state has zero norm")
    ts[center] = ts[center] / nrm
    return ChainState(ts, center, [None] * (len(ts) + 1))


def overlap(a: ChainState, b: ChainState) -> complex:
    """<a|b> by contracting the transfer matrices from the left."""
    env = None
    for ta, tb in zip(a.tensors, b.tensors):
        if env is None:
            env = contract(ta.conj(), tb, (0, 1), (0, 1))
        else:
            env = contract(contract(env, ta.conj(), (0,), (0,)), tb, (0, 1), (0, 1))
    return complex(env.to_dense().reshape(-1)[0])


def to_dense_vector(state: ChainState) -> np.ndarray:
    """Full state vector (physical indices in the charge-sorted basis); for tests on small chains."""
    psi = state.tensors[0].to_dense()[0]
    for t in state.tensors[1:]:
        psi = np.tensordot(psi, t.to_dense(), axes=(psi.ndim - 1, 0))
    return psi[..., 0]
