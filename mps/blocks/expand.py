"""Truncated SVD of a tensor whose bond is enlarged by directions of a second tensor: the
subspace expansion of Hubig, McCulloch, Schollwoeck and Wolf, PRB 91, 155115 (2015).

A single-site update cannot change the bond it leaves behind: the optimised site tensor M only
spans the old bond space. The expansion takes P = (environment x M x MPO), whose columns (or
rows) point to the states the Hamiltonian couples M to, and adds its strongest directions outside
M's kept span to the bond as empty states, which the next update can fill. Here M is truncated
by its own SVD, exactly as a two-site update truncates, and the new directions never compete
with M's states: the state changes only by that truncation. (Hubig et al. truncate the widened
matrix [M | alpha P] instead; in our tests that let the alpha P directions displace M's weakest
Schmidt states.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mps.blocks.charges import Leg, fuse
from mps.blocks.decompose import _fill, as_matrix, dense_svd, rank_kept
from mps.blocks.tensor import BlockTensor


@dataclass(frozen=True)
class Expansion:
    """``isometry``: [U_kept, U_new] (rows + bond) when the columns side is widened, its mirror
    (bond + columns) for the rows side. ``rest``: S V^dagger of the kept states (bond + M's
    columns; zero on the new states), or its mirror U S, which multiplies into the neighbour.
    ``values``: kept singular values of M per bond sector (the bond's charge order; empty for a
    sector that holds only new states); ``discarded``: dropped weight fraction of M."""

    isometry: BlockTensor
    rest: BlockTensor
    values: tuple[np.ndarray, ...]
    discarded: float


def widened_svd(t: BlockTensor, extra: BlockTensor, nshared: int, widen: str, max_bond: int | None,
                discard: float = 0.0, min_value: float = 0.0) -> Expansion:
    """Truncated SVD of ``t`` with its bond enlarged by directions of ``extra``, which shares
    ``t``'s total charge and its first (``widen="columns"``) or last (``widen="rows"``)
    ``nshared`` legs.

    ``widen="columns"``: t is a matrix with rows the shared legs, and new bond states come from
    the columns of ``extra``; ``"rows"``: t's columns are the shared legs and new states come from
    the rows of ``extra``. t's truncation ranks all sectors together
    (:func:`mps.blocks.decompose.rank_kept`); at most :func:`grow` new states are added, within
    ``max_bond``.
    """
    if widen not in ("columns", "rows"):
        raise ValueError(f"widen must be 'columns' or 'rows', got {widen!r}")
    if t.charge != extra.charge:
        raise ValueError("the tensor and its widening need the same total charge")
    by_rows = widen == "columns"
    shared_t = tuple(range(nshared)) if by_rows else tuple(range(t.ndim - nshared, t.ndim))
    shared_e = tuple(range(nshared)) if by_rows else tuple(range(extra.ndim - nshared, extra.ndim))
    if tuple(t.legs[i] for i in shared_t) != tuple(extra.legs[i] for i in shared_e):
        raise ValueError("the tensor and its widening must share the same legs")
    own_t = tuple(i for i in range(t.ndim) if i not in shared_t)
    own_e = tuple(i for i in range(extra.ndim) if i not in shared_e)
    if by_rows:
        mt, me = as_matrix(t, shared_t, own_t), as_matrix(extra, shared_e, own_e)
        part_t = {rs: m for (rs, _), m in zip(mt.sectors, mt.mats)}
        part_e = {rs: m for (rs, _), m in zip(me.sectors, me.mats)}
        shared, key_charge = mt.rows, lambda s: mt.rows.fused.charges[s]
    else:
        mt, me = as_matrix(t, own_t, shared_t), as_matrix(extra, own_e, shared_e)
        part_t = {cs: (rs, m) for (rs, cs), m in zip(mt.sectors, mt.mats)}
        part_e = {cs: m for (_, cs), m in zip(me.sectors, me.mats)}
        shared = mt.cols
        q = np.asarray(t.charge)
        key_charge = lambda s: tuple(int(c) for c in q - np.asarray(mt.cols.fused.charges[s]))  # noqa: E731
    # one matrix per sector of the shared legs, ordered by the charge of the new bond
    keys = sorted(set(part_t) | set(part_e), key=key_charge)
    own, more = [], []
    for s in keys:
        n = shared.fused.sizes[s]
        mine = part_t.get(s) if by_rows else (part_t[s][1] if s in part_t else None)
        mine = np.zeros((n, 0) if by_rows else (0, n), dtype=t.dtype) if mine is None else mine
        other = part_e.get(s)
        other = np.zeros((n, 0) if by_rows else (0, n), dtype=extra.dtype) if other is None else other
        # both as (shared x own) so that one code path serves both sides
        own.append(mine if by_rows else mine.conj().T)
        more.append(other if by_rows else other.conj().T)
    us, ss, vs = zip(*[dense_svd(m) for m in own]) if own else ((), (), ())
    kept, total, dropped = rank_kept(list(ss), max_bond, discard, min_value)
    added = _new_directions(us, kept, more, (max_bond or 2**62) - sum(kept), grow(sum(kept)))
    used = [i for i in range(len(keys)) if kept[i] + added[i].shape[1] > 0]
    sizes = [kept[i] + added[i].shape[1] for i in used]
    bond = Leg(tuple(key_charge(keys[i]) for i in used), tuple(sizes), -1)
    dtype = np.result_type(t.dtype, extra.dtype)
    basis = [np.hstack([us[i][:, :kept[i]], added[i]]) for i in used]       # (shared x bond)
    weights = [np.vstack([ss[i][:kept[i], None] * vs[i][:kept[i]],          # (bond x own)
                          np.zeros((added[i].shape[1], vs[i].shape[1]), dtype=vs[i].dtype)]) for i in used]
    if by_rows:
        iso = BlockTensor(tuple(t.legs[i] for i in shared_t) + (bond,), None, dtype=dtype)
        _fill(iso, range(nshared), (nshared,), shared, fuse((bond,), 1), [keys[i] for i in used], basis)
        rest = BlockTensor((bond.dual(),) + tuple(t.legs[i] for i in own_t), t.charge, dtype=dtype)
        _fill(rest, (0,), range(1, len(own_t) + 1), fuse((bond.dual(),), 1), mt.cols, list(range(len(used))),
              weights)
    else:
        iso = BlockTensor((bond.dual(),) + tuple(t.legs[i] for i in shared_t), t.charge, dtype=dtype)
        _fill(iso, (0,), range(1, nshared + 1), fuse((bond.dual(),), 1), shared, list(range(len(used))),
              [b.conj().T for b in basis])
        rest = BlockTensor(tuple(t.legs[i] for i in own_t) + (bond,), None, dtype=dtype)
        mine = [k for k, i in enumerate(used) if keys[i] in part_t]
        _fill(rest, range(len(own_t)), (len(own_t),), mt.rows, fuse((bond,), 1),
              [part_t[keys[used[k]]][0] for k in mine], [weights[k].conj().T for k in mine])
    values = tuple(ss[i][:kept[i]].copy() for i in used)
    return Expansion(iso, rest, values, dropped / total)


def grow(kept: int) -> int:
    """How many new directions one update may add to a bond of ``kept`` states: as many again
    plus four (our choice: a bond can double at every step, so a few sweeps reach any cap, and
    the next truncation trims the states the optimisation leaves empty; with a quarter more per
    step a two-species boson chain had not reached its exact energy after the test's sweeps)."""
    return kept + 4


def _new_directions(us, kept, more, room: int, most: int, rel: float = 1e-10) -> list[np.ndarray]:
    """Per sector, the orthonormal directions to add: the strongest left singular vectors of the
    widening after projecting out the kept states, at most ``min(room, most)`` over all sectors,
    only those with singular value above ``rel`` times the strongest."""
    cands = []
    for u, k, m in zip(us, kept, more):
        if m.shape[1] == 0 or m.shape[0] == k:
            cands.append((np.zeros((m.shape[0], 0), dtype=m.dtype), np.zeros(0)))
            continue
        q = u[:, :k]
        rest = m - q @ (q.conj().T @ m)
        ue, se, _ = dense_svd(rest)
        cands.append((ue, se))
    top = np.concatenate([se for _, se in cands]) if cands else np.zeros(0)
    limit = max(0, min(room, most))
    if limit == 0 or top.size == 0 or top.max() <= 0:
        return [ue[:, :0] for ue, _ in cands]
    floor = max(rel * top.max(), np.sort(top)[::-1][min(limit, top.size) - 1])
    picked = []
    budget = limit
    for ue, se in cands:
        n = min(int(np.count_nonzero(se >= floor)), budget)
        picked.append(ue[:, :n])
        budget -= n
    return picked
