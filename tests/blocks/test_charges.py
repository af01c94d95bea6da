"""U(1)^k charge labels (mps.blocks.charges): leg validation, dual, index, fusion, grouping states, reachability.

Every property is checked against a brute-force enumeration of basis states or sector combinations.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mps.blocks.charges import Leg, fuse, leg_from_states, reachable_charges, reachable_totals
from mps.blocks.testing import leg_strategy

FAST = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])

ks = st.sampled_from([1, 2, 3])


@st.composite
def leg_groups(draw, min_legs=1, max_legs=4):
    """A group of legs sharing one number of charges k."""
    k = draw(ks)
    return tuple(draw(st.lists(leg_strategy(k), min_size=min_legs, max_size=max_legs)))


# --- validation ---------------------------------------------------------------------------------

BAD_LEGS = {
    "unsorted": (((1,), (0,)), (1, 1), 1, "sorted"),
    "repeated": (((0,), (0,)), (1, 2), 1, "repeat"),
    "bad flow": (((0,),), (1,), 0, "flow"),
    "flow two": (((0,),), (1,), 2, "flow"),
    "negative size": (((0,), (1,)), (1, -1), -1, ">= 0"),
    "size count": (((0,), (1,)), (1,), 1, "one size per"),
    "no sector": ((), (), 1, "at least one"),
    "mixed k": (((0,), (0, 1)), (1, 1), 1, "same length"),
    "k too large": (((0, 0, 0, 0),), (1,), 1, "same length"),
    "unsorted k=2": (((0, 1), (0, 0)), (1, 1), -1, "sorted"),
    "charge too large": (((1 << 20,),), (1,), 1, "smaller than"),
}


@pytest.mark.parametrize("name", sorted(BAD_LEGS))
def test_leg_validation_refuses(name):
    charges, sizes, flow, message = BAD_LEGS[name]
    with pytest.raises(ValueError, match=message):
        Leg(charges, sizes, flow)


def test_leg_make_sorts_sectors_and_keeps_sizes_with_their_charges():
    leg = Leg.make([3, -1, 0], [2, 0, 1], -1)
    assert leg.charges == ((-1,), (0,), (3,))
    assert leg.sizes == (0, 1, 2)
    assert leg.flow == -1 and leg.dim == 3
    np.testing.assert_array_equal(leg.offsets, [0, 0, 1, 3])


# --- dual, index, state charges -----------------------------------------------------------------

@FAST
@given(leg=ks.flatmap(leg_strategy))
def test_dual_flips_flow_only_and_is_an_involution(leg):
    d = leg.dual()
    assert d.flow == -leg.flow and d.charges == leg.charges and d.sizes == leg.sizes
    assert d.dual() == leg
    assert d.is_dual_of(leg) and leg.is_dual_of(d)
    assert not leg.is_dual_of(leg)


@FAST
@given(leg=ks.flatmap(leg_strategy), probe=st.tuples(*[st.integers(-4, 4)] * 3))
def test_index_finds_every_sector_and_nothing_else(leg, probe):
    for i, q in enumerate(leg.charges):
        assert leg.index(q) == i
    q = probe[:leg.nq]
    assert leg.index(q) == (leg.charges.index(q) if q in leg.charges else -1)


@FAST
@given(leg=ks.flatmap(leg_strategy))
def test_state_charges_and_offsets_enumerate_the_dense_index(leg):
    states = leg.state_charges()
    assert states.shape == (leg.dim, leg.nq)
    brute = [q for q, n in zip(leg.charges, leg.sizes) for _ in range(n)]
    assert [tuple(row) for row in states.tolist()] == brute
    for s in range(leg.nsec):
        block = states[leg.offsets[s]:leg.offsets[s + 1]]
        assert all(tuple(row) == leg.charges[s] for row in block.tolist())


# --- fusion -------------------------------------------------------------------------------------

@FAST
@given(legs=leg_groups(), flow=st.sampled_from([1, -1]))
def test_fuse_sizes_add_up_and_every_nonempty_combination_appears_once(legs, flow):
    fmap = fuse(legs, flow)
    fused = fmap.fused
    assert fused.flow == flow and fused.nq == legs[0].nq
    assert fused.dim == int(np.prod([leg.dim for leg in legs]))
    brute = {combo for combo in itertools.product(*[range(leg.nsec) for leg in legs])
             if all(leg.sizes[c] for leg, c in zip(legs, combo))}
    assert set(fmap.entries) == brute
    listed = [combo for s in range(fused.nsec) for combo in fmap.combos_of(s)]
    assert sorted(listed) == sorted(brute) and len(listed) == len(set(listed))
    for s in range(fused.nsec):
        assert fused.sizes[s] == sum(int(np.prod(fmap.entries[c][2])) for c in fmap.combos_of(s))


@FAST
@given(legs=leg_groups(), flow=st.sampled_from([1, -1]))
def test_fuse_offsets_tile_each_sector_in_lexicographic_order(legs, flow):
    fmap = fuse(legs, flow)
    for s in range(fmap.fused.nsec):
        combos = fmap.combos_of(s)
        assert combos == sorted(combos)
        start = 0
        for combo in combos:
            sector, off, shape = fmap.entries[combo]
            assert sector == s and off == start
            assert shape == tuple(leg.sizes[c] for leg, c in zip(legs, combo))
            start += int(np.prod(shape))
        assert start == fmap.fused.sizes[s]


@FAST
@given(legs=leg_groups(), flow=st.sampled_from([1, -1]))
def test_fused_charges_obey_conservation(legs, flow):
    """Fused sector charge = flow * sum_i f_i q_i, so flow * (fused charge) reproduces the sum."""
    fmap = fuse(legs, flow)
    for combo, (s, _, _) in fmap.entries.items():
        combined = sum(leg.flow * np.asarray(leg.charges[c]) for leg, c in zip(legs, combo))
        np.testing.assert_array_equal(flow * np.asarray(fmap.fused.charges[s]), combined)
    # state by state: the fused dense index carries the combined charge of the original states
    if fmap.entries:
        states = fmap.fused.state_charges()
        for combo, (s, off, shape) in fmap.entries.items():
            combined = sum(leg.flow * np.asarray(leg.charges[c]) for leg, c in zip(legs, combo))
            start = fmap.fused.offsets[s] + off
            block = states[start:start + int(np.prod(shape))]
            assert np.all(flow * block == combined)


def test_fuse_of_only_empty_sectors_gives_one_empty_sector():
    legs = (Leg(((0,), (1,)), (0, 0), 1), Leg(((2,),), (3,), -1))
    fmap = fuse(legs, -1)
    assert fmap.entries == {} and fmap.fused.dim == 0 and fmap.fused.flow == -1


def test_fuse_refuses_no_legs():
    with pytest.raises(ValueError, match="at least one leg"):
        fuse((), 1)


# --- grouping basis states, reachable charges -----------------------------------------------------

@FAST
@given(k=ks, data=st.data(), flow=st.sampled_from([1, -1]))
def test_leg_from_states_is_a_stable_grouping_permutation(k, data, flow):
    n = data.draw(st.integers(1, 12))
    states = np.array(data.draw(st.lists(st.tuples(*[st.integers(-2, 2)] * k), min_size=n, max_size=n)))
    leg, perm = leg_from_states(states, flow)
    assert leg.flow == flow
    assert sorted(perm.tolist()) == list(range(n))
    np.testing.assert_array_equal(states[perm], leg.state_charges())
    assert set(leg.charges) == {tuple(row) for row in states.tolist()}
    for s in range(leg.nsec):  # inside one sector the original order is kept
        chunk = perm[leg.offsets[s]:leg.offsets[s + 1]]
        assert np.all(np.diff(chunk) > 0)


def test_leg_from_states_accepts_a_plain_charge_vector():
    leg, perm = leg_from_states(np.array([1, -1, 1, 0]), 1)
    assert leg.charges == ((-1,), (0,), (1,)) and leg.sizes == (1, 1, 2)
    assert perm.tolist() == [1, 3, 0, 2]


@FAST
@given(k=ks, data=st.data())
def test_reachable_charges_match_brute_force(k, data):
    local = data.draw(st.lists(st.tuples(*[st.integers(-2, 2)] * k), min_size=1, max_size=3, unique=True))
    sites = data.draw(st.integers(0, 4))
    brute = {tuple(int(c) for c in np.sum(np.array(choice, dtype=np.int64).reshape(sites, k), axis=0))
             for choice in itertools.product(local, repeat=sites)}
    assert reachable_charges(np.array(local), sites) == brute


@pytest.mark.parametrize(
    "local",
    [
        [[-1], [1]],
        [[0], [1]],
        [[0, 0], [1, 1], [1, -1], [2, 0]],  # spinful fermion site: (N, 2 S^z)
        [[-2], [0], [2]],
        [[0], [3]],
    ],
)
@pytest.mark.parametrize("sites", [1, 2, 5])
def test_reachable_totals_matches_enumeration(local, sites):
    # Source: exact -- brute-force enumeration of all product states.
    local = np.array(local)
    brute = {tuple(np.sum(c, axis=0)) for c in itertools.product(local, repeat=sites)}
    got = reachable_totals(local, sites)
    assert {tuple(r) for r in got} == brute and len(got) == len(brute)
