"""Test helpers shipped with the package: the block-tensor invariant checker and dense comparison.

:func:`check_invariants` verifies the canonical form that :class:`mps.blocks.tensor.BlockTensor` promises
(sorted sector keys, exactly the allowed non-empty blocks, block shapes equal to the sector sizes,
a flat data array that the block offsets tile, the conservation rule sum_i f_i q_i = Q for every
block). :func:`assert_matches_dense` adds a comparison with a dense array whose allowed entries are
found independently, state by state. Both raise ``AssertionError`` with a message naming what is
wrong, so they work inside and outside pytest.

The hypothesis strategies at the end (:func:`leg_strategy`, :func:`tensor_strategy`) import
hypothesis only when called: the package does not depend on it.
"""

from __future__ import annotations

from typing import NoReturn

import numpy as np

from mps.blocks.charges import Leg
from mps.blocks.tensor import BlockTensor


def _fail(t: BlockTensor, message: str) -> NoReturn:
    raise AssertionError(f"{message} [{t!r}]")


def allowed_mask(legs, charge) -> np.ndarray:
    """Boolean dense array: True where sum_i f_i q_i(index_i) equals ``charge``, state by state."""
    legs = tuple(legs)
    k = len(charge)
    total = np.zeros(tuple(leg.dim for leg in legs) + (k,), dtype=np.int64)
    for i, leg in enumerate(legs):
        shape = [1] * len(legs) + [k]
        shape[i] = leg.dim
        total = total + leg.flow * leg.state_charges().reshape(shape)
    return np.all(total == np.asarray(charge, dtype=np.int64), axis=-1)


def _allowed_keys(legs, charge) -> list[tuple[int, ...]]:
    """Every allowed, non-empty sector combination, in lexicographic order.

    All sector combinations of the leading legs are enumerated; the conservation rule then fixes
    the sector of the last leg, q_last = f_last (Q - sum_{i<last} f_i q_i), looked up by charge.
    """
    head, last = legs[:-1], legs[-1]
    grids = np.indices(tuple(leg.nsec for leg in head)).reshape(len(head), -1).T if head \
        else np.zeros((1, 0), dtype=np.int64)
    total = np.zeros((grids.shape[0], len(charge)), dtype=np.int64)
    for i, leg in enumerate(head):
        total += leg.flow * leg.charge_array[grids[:, i]]
    need = last.flow * (np.asarray(charge, dtype=np.int64)[None, :] - total)
    sector_of = {q: i for i, q in enumerate(last.charges)}
    keys = []
    for combo, q in zip(grids.tolist(), need.tolist()):
        s = sector_of.get(tuple(q))
        key = tuple(combo) + (s,)
        if s is not None and all(leg.sizes[c] for leg, c in zip(legs, key)):
            keys.append(key)
    return keys


def check_invariants(t: BlockTensor) -> None:
    """Raise AssertionError unless ``t`` is in the canonical block-sparse form.

    Checks: legs are :class:`Leg` with one common number of charges k, the total charge has length
    k; the layout belongs to these legs and charge; sector keys are strictly increasing; the stored
    keys are exactly the allowed non-empty sector combinations (conservation sum_i f_i q_i = Q holds
    for each, nothing allowed is missing); every block shape equals its sector sizes; the offsets
    start at 0 and tile the one-dimensional data array; the key index agrees with the key order.
    """
    if not t.legs or not all(isinstance(leg, Leg) for leg in t.legs):
        _fail(t, "a block tensor needs a non-empty tuple of Leg objects")
    k = t.legs[0].nq
    if any(leg.nq != k for leg in t.legs):
        _fail(t, f"legs carry different numbers of charges: {[leg.nq for leg in t.legs]}")
    if len(t.charge) != k:
        _fail(t, f"total charge {t.charge} does not have {k} components")
    lay = t.layout
    if lay.legs != t.legs or lay.charge != t.charge:
        _fail(t, "layout was built for other legs or another total charge")
    keys = list(lay.keys)
    for a, b in zip(keys, keys[1:]):
        if not a < b:
            _fail(t, f"block keys are not strictly increasing: {a} then {b}")
    q = np.asarray(t.charge, dtype=np.int64)
    for key in keys:
        if len(key) != t.ndim or any(not 0 <= c < leg.nsec for c, leg in zip(key, t.legs)):
            _fail(t, f"block key {key} does not index the sectors of the legs")
        total = sum(leg.flow * leg.charge_array[c] for c, leg in zip(key, t.legs))
        if not np.array_equal(total, q):
            _fail(t, f"block {key} has combined charge {tuple(int(c) for c in total)}, "
                     f"breaking conservation (total charge {t.charge})")
    expected = _allowed_keys(t.legs, t.charge)
    if keys != expected:
        missing = sorted(set(expected) - set(keys))
        extra = sorted(set(keys) - set(expected))
        _fail(t, f"stored blocks differ from the allowed non-empty blocks: missing {missing[:5]}, "
                 f"not allowed or empty {extra[:5]}")
    if len(lay.shapes) != len(keys):
        _fail(t, f"{len(keys)} keys but {len(lay.shapes)} block shapes")
    for key, shape in zip(keys, lay.shapes):
        want = tuple(leg.sizes[c] for c, leg in zip(key, t.legs))
        if tuple(shape) != want:
            _fail(t, f"block {key} has shape {tuple(shape)}, the sector sizes are {want}")
    offsets = np.asarray(lay.offsets)
    sizes = [int(np.prod(s, dtype=np.int64)) for s in lay.shapes]
    if offsets.shape != (len(keys) + 1,) or offsets[0] != 0 or \
            not np.array_equal(np.diff(offsets), np.asarray(sizes, dtype=np.int64).reshape(-1)):
        _fail(t, f"block offsets {offsets.tolist()} do not tile blocks of sizes {sizes}")
    if t.data.ndim != 1 or t.data.shape[0] != int(offsets[-1]):
        _fail(t, f"flat data has shape {t.data.shape}, the blocks need ({int(offsets[-1])},)")
    if dict(lay.index) != {key: i for i, key in enumerate(keys)}:
        _fail(t, "the key index does not match the key order")


def assert_matches_dense(t: BlockTensor, dense, atol: float = 1e-12) -> None:
    """Raise AssertionError unless ``t`` is canonical and equals ``dense`` entry by entry.

    ``dense`` must vanish (to ``atol``) wherever the conservation rule forbids an entry, and every
    stored block must equal the slice of ``dense`` given by its sectors' dense offsets.
    """
    check_invariants(t)
    dense = np.asarray(dense)
    if dense.shape != t.shape:
        _fail(t, f"dense shape {dense.shape} differs from the tensor shape {t.shape}")
    mask = allowed_mask(t.legs, t.charge)
    outside = np.abs(np.where(mask, 0, dense))
    if outside.size and outside.max() > atol:
        where = tuple(int(i) for i in np.unravel_index(int(np.argmax(outside)), dense.shape))
        _fail(t, f"dense entry {where} = {dense[where]!r} is non-zero where conservation forbids it")
    for key, view in t.blocks():
        sl = tuple(slice(int(leg.offsets[c]), int(leg.offsets[c + 1])) for c, leg in zip(key, t.legs))
        dev = np.abs(view - dense[sl])
        if dev.size and dev.max() > atol:
            _fail(t, f"block {key} differs from the dense array by {dev.max():.3e} > {atol:.1e}")


# --------------------------------------------------------------------------- hypothesis strategies

def charge_pool_strategy(k: int, max_size: int = 6):
    """Hypothesis strategy for a small pool of distinct charge vectors on a lattice.

    The pool is {o + a u + b v} for small integers a, b and random generators u, v in [-1, 1]^k, as
    for physical charge vectors such as (N, 2 S^z). Legs whose sectors come from one such pool meet
    the conservation rule often, so random tensors have several allowed blocks even for k = 3.
    """
    from hypothesis import strategies as st

    small = st.tuples(*[st.integers(-1, 1)] * k)

    @st.composite
    def build(draw):
        origin, v = np.array(draw(small)), np.array(draw(small))
        u = np.array(draw(small.filter(any)))
        na, nb = draw(st.integers(2, 4)), draw(st.integers(1, 2))
        pool = {tuple(int(c) for c in origin + i * u + j * v) for i in range(na) for j in range(nb)}
        pool = sorted(pool)[:max_size]
        return pool

    return build()


def leg_strategy(k: int, flow: int | None = None, max_sectors: int = 5, max_size: int = 3,
                 charge_range: int = 2, pool=None):
    """Hypothesis strategy for a :class:`Leg` with k charges.

    1..max_sectors distinct sectors with charges in [-charge_range, charge_range]^k (or taken from
    ``pool``, a list of charge vectors), block sizes 0..max_size (empty sectors included), either
    flow unless ``flow`` is given.
    """
    from hypothesis import strategies as st

    charge = st.tuples(*[st.integers(-charge_range, charge_range)] * k)
    flows = st.sampled_from([1, -1]) if flow is None else st.just(flow)
    size = st.sampled_from([c for c in (1, 2, 3, 0, 1, 2, 3) if c <= max_size])

    @st.composite
    def build(draw):
        most = max_sectors if pool is None else min(max_sectors, len(pool))
        n = min(most, draw(st.sampled_from([3, 2, 4, 5, 1])))  # mostly several sectors
        if pool is None:
            qs = draw(st.lists(charge, min_size=n, max_size=n, unique=True))
        else:
            qs = draw(st.permutations(sorted(pool)))[:n]
        sizes = draw(st.lists(size, min_size=len(qs), max_size=len(qs)))
        if not any(sizes):  # a leg of dimension zero: allowed, but keep it rare
            sizes[0] = draw(st.sampled_from([1, 2, 3, 1, 0]))
        return Leg.make(qs, sizes, draw(flows))

    return build()


def total_charge_strategy(legs):
    """Hypothesis strategy for a total charge: usually one met by a non-empty sector combination
    of ``legs`` (so blocks exist), sometimes such a charge shifted by -1, 0 or +1 per component
    (few or no allowed blocks)."""
    from hypothesis import strategies as st

    legs = tuple(legs)
    k = legs[0].nq
    choices = [[i for i, n in enumerate(leg.sizes) if n > 0] or list(range(leg.nsec)) for leg in legs]
    met = st.tuples(*[st.sampled_from(c) for c in choices]).map(
        lambda combo: tuple(int(c) for c in sum(leg.flow * leg.charge_array[i]
                                                for leg, i in zip(legs, combo))))
    shift = st.tuples(*[st.integers(-1, 1)] * k)
    nearby = st.tuples(met, shift).map(lambda qs: tuple(a + b for a, b in zip(*qs)))
    return st.one_of(met, met, met, nearby)


def tensor_strategy(k: int | None = None, min_legs: int = 1, max_legs: int = 5, dtypes=None,
                    max_dense: int = 20000):
    """Hypothesis strategy for a random :class:`BlockTensor` (k = 1..3 charges, both flows,
    real or complex) built from :func:`leg_strategy` over one charge pool and
    :func:`total_charge_strategy`; the dense form has at most ``max_dense`` entries so that dense
    references stay cheap."""
    from hypothesis import assume
    from hypothesis import strategies as st

    dtypes = dtypes or (np.float64, np.complex128)

    @st.composite
    def build(draw):
        kk = draw(st.integers(1, 3)) if k is None else k
        pool = draw(charge_pool_strategy(kk))
        nlegs = draw(st.integers(min_legs, max_legs))
        legs = tuple(draw(st.lists(leg_strategy(kk, pool=pool), min_size=nlegs, max_size=nlegs)))
        assume(int(np.prod([leg.dim for leg in legs], dtype=np.int64)) <= max_dense)
        charge = draw(total_charge_strategy(legs))
        dtype = draw(st.sampled_from(dtypes))
        seed = draw(st.integers(0, 2**32 - 1))
        return BlockTensor.random(legs, charge, rng=seed, dtype=dtype)

    return build()


__all__ = ["allowed_mask", "check_invariants", "assert_matches_dense", "charge_pool_strategy",
           "leg_strategy", "total_charge_strategy", "tensor_strategy"]
