"""Fusing and splitting legs (mps.blocks.reshape) and einsum-style networks (mps.blocks.network) against numpy."""

from __future__ import annotations

import string

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import FusionMap, Leg
from mps.blocks.network import contract_network
from mps.blocks.reshape import fuse_legs, split_leg
from mps.blocks.tensor import BlockTensor
from mps.blocks.testing import (
    assert_matches_dense,
    charge_pool_strategy,
    check_invariants,
    leg_strategy,
    tensor_strategy,
)

FAST = settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow])
TOL = 1e-12


@st.composite
def fuse_cases(draw):
    t = draw(tensor_strategy(min_legs=1, max_legs=5, max_dense=3000))
    start = draw(st.integers(0, t.ndim - 1))
    stop = draw(st.integers(start + 1, t.ndim))
    return t, start, stop, draw(st.sampled_from([1, -1]))


def fused_positions(fmap: FusionMap) -> np.ndarray:
    """Fused dense index of every dense multi-index of the original legs, computed state by state."""
    legs = fmap.legs
    pos = np.full(tuple(leg.dim for leg in legs), -1, dtype=np.int64)
    for idx in np.ndindex(*pos.shape):
        sectors = [int(np.searchsorted(leg.offsets, i, side="right") - 1) for leg, i in zip(legs, idx)]
        local = [i - int(leg.offsets[s]) for leg, i, s in zip(legs, idx, sectors)]
        s, off, shape = fmap.entries[tuple(sectors)]
        pos[idx] = int(fmap.fused.offsets[s]) + off + int(np.ravel_multi_index(local, shape))
    return pos


@FAST
@given(case=fuse_cases())
def test_fuse_then_split_is_the_identity(case):
    t, start, stop, flow = case
    fused, fmap = fuse_legs(t, start, stop, flow)
    check_invariants(fused)
    assert fused.legs == t.legs[:start] + (fmap.fused,) + t.legs[stop:] and fused.charge == t.charge
    back = split_leg(fused, start, fmap)
    assert back.legs == t.legs and back.charge == t.charge
    assert_matches_dense(back, t.to_dense(), atol=0)
    assert abs(fused.norm() - t.norm()) <= TOL * max(1.0, t.norm())


@FAST
@given(case=fuse_cases())
def test_fused_dense_form_is_the_dense_array_reshaped_and_permuted_by_the_fusion_map(case):
    t, start, stop, flow = case
    fused, fmap = fuse_legs(t, start, stop, flow)
    pos = fused_positions(fmap).ravel()
    assert sorted(pos.tolist()) == list(range(fmap.fused.dim))  # a permutation of the fused index
    dense = t.to_dense()
    head, tail = dense.shape[:start], dense.shape[stop:]
    expected = np.zeros(fused.shape, dtype=dense.dtype)
    expected[(slice(None),) * start + (pos,)] = dense.reshape(head + (pos.size,) + tail)
    assert_matches_dense(fused, expected, atol=0)


@FAST
@given(t=tensor_strategy(max_dense=3000), data=st.data())
def test_fusing_one_leg_with_its_own_flow_changes_nothing(t, data):
    i = data.draw(st.integers(0, t.ndim - 1))
    assume(t.legs[i].dim > 0 and all(t.legs[i].sizes))
    fused, _ = fuse_legs(t, i, i + 1, t.legs[i].flow)
    assert fused.legs == t.legs
    np.testing.assert_array_equal(fused.data, t.data)


def test_fuse_and_split_refuse_bad_arguments():
    leg = Leg.make([0, 1], [1, 2], 1)
    t = BlockTensor.random((leg, leg, leg.dual()), (1,), rng=0)
    for start, stop in [(1, 1), (-1, 2), (2, 4)]:
        with pytest.raises(ValueError, match="cannot fuse"):
            fuse_legs(t, start, stop)
    fused, fmap = fuse_legs(t, 0, 2)
    with pytest.raises(ValueError, match="not the fused leg"):
        split_leg(fused, 1, fmap)


# --- networks -----------------------------------------------------------------------------------

@st.composite
def networks(draw, ntensors, connected=True):
    """A random network of ``ntensors`` block tensors and its einsum string.

    A random spanning tree (unless ``connected`` is false) plus up to two (three) extra bonds links
    the tensors, each bond a leg on one end and its dual on the other; up to three free indices;
    every tensor's legs shuffled; total charges usually met by one common choice of sectors so
    that the result is non-zero.
    """
    k = draw(st.sampled_from([1, 2, 3]))
    pool = draw(charge_pool_strategy(k))
    leg = leg_strategy(k, pool=pool)
    ends = [(i, draw(st.integers(0, i - 1))) for i in range(1, ntensors)] if connected else []
    for _ in range(draw(st.integers(0, 2 if connected else 3)) if ntensors > 1 else 0):
        i, j = draw(st.permutations(range(ntensors)))[:2]
        ends.append((i, j))
    nfree = draw(st.integers(0, 3))
    letters = iter(string.ascii_letters)
    slots: list[list[tuple[str, Leg, int]]] = [[] for _ in range(ntensors)]
    free = []
    for i, j in ends:
        x, c = draw(leg), next(letters)
        sector = draw(st.sampled_from([s for s, n in enumerate(x.sizes) if n] or [0]))
        slots[i].append((c, x, sector))
        slots[j].append((c, x.dual(), sector))
    for _ in range(nfree):
        x, c = draw(leg), next(letters)
        sector = draw(st.sampled_from([s for s, n in enumerate(x.sizes) if n] or [0]))
        slots[draw(st.integers(0, ntensors - 1))].append((c, x, sector))
        free.append(c)
    terms, tensors = [], []
    consistent = draw(st.integers(0, 3)) > 0
    for slot in slots:
        assume(1 <= len(slot) <= 5)
        slot = [slot[p] for p in draw(st.permutations(range(len(slot))))]
        legs = tuple(x for _, x, _ in slot)
        assume(int(np.prod([x.dim for x in legs])) <= 1500)
        if consistent:
            charge = tuple(int(c) for c in sum(x.flow * x.charge_array[s] for _, x, s in slot))
        else:
            charge = tuple(draw(st.tuples(*[st.integers(-1, 1)] * k)))
        dtype = draw(st.sampled_from([np.float64, np.complex128]))
        tensors.append(BlockTensor.random(legs, charge, rng=draw(st.integers(0, 2**32 - 1)), dtype=dtype))
        terms.append("".join(c for c, _, _ in slot))
    output = "".join(draw(st.permutations(free)))
    return ",".join(terms) + "->" + output, tensors


def check_network(expr, tensors, connected=True):
    """contract_network == np.einsum. The result carries the summed charge; in a disconnected
    network a closed part of non-zero charge is an exact zero whose charge is not kept."""
    result = contract_network(expr, *tensors)
    expected = np.einsum(expr, *[t.to_dense() for t in tensors], optimize="greedy")
    if isinstance(result, BlockTensor):
        if connected or result.norm() > 0:
            assert result.charge == tuple(int(c) for c in sum(np.asarray(t.charge) for t in tensors))
        assert_matches_dense(result, expected, atol=TOL)
    else:
        assert expr.endswith("->") and abs(result - expected) <= TOL


@FAST
@given(net=networks(3))
def test_three_tensor_networks_match_einsum(net):
    check_network(*net)


@FAST
@given(net=networks(4))
def test_four_tensor_networks_match_einsum(net):
    check_network(*net)


@FAST
@given(net=st.sampled_from([3, 4]).flatmap(lambda n: networks(n, connected=False)))
def test_disconnected_networks_match_einsum(net):
    """Parts that close to a scalar multiply the rest (outer products between parts)."""
    check_network(*net, connected=False)


@FAST
@given(net=st.sampled_from([1, 2]).flatmap(networks))
def test_one_and_two_tensor_networks_match_einsum(net):
    check_network(*net)


def test_network_of_an_mps_overlap_matches_einsum():
    """<psi|psi> of a three-site state: a closed network contracted to a scalar."""
    spin = Leg.make([-1, 1], [1, 1], 1)
    bond = Leg.make([-1, 0, 1], [1, 2, 1], 1)
    edge = Leg.make([0], [1], 1)
    a = BlockTensor.random((edge, spin, bond.dual()), (0,), rng=1, dtype=np.complex128)
    b = BlockTensor.random((bond, spin, bond.dual()), (0,), rng=2, dtype=np.complex128)
    c = BlockTensor.random((bond, spin, Leg.make([1], [1], -1)), (0,), rng=3, dtype=np.complex128)
    expr = "aib,bjc,ckd,AiB,BjC,CkD->aAdD"
    tensors = (a, b, c, a.conj(), b.conj(), c.conj())
    check_network(expr, tensors)


def test_network_refuses_bad_expressions():
    leg = Leg.make([0, 1], [1, 2], 1)
    x = BlockTensor.random((leg, leg.dual()), (0,), rng=0)
    with pytest.raises(ValueError, match="names 2 tensors"):
        contract_network("ab,bc->ac", x)
    with pytest.raises(ValueError, match="does not fit"):
        contract_network("abc,bc->a", x, x)
