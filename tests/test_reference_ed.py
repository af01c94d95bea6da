"""Checks of the exact-diagonalisation reference itself (tests/reference_ed.py)."""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pytest
from scipy.special import comb

from reference_ed import (
    block_charge_correlations,
    fermion_sector,
    ground_state,
    occupations,
    quadratic_fermion_sector,
    resolved_from_schmidt,
    schmidt_by_sector,
    sector_basis,
    xxz_sector,
)


def test_sector_basis_size_and_charge():
    # combinatorics: C(L, n) states with n set bits
    basis = sector_basis(8, 3)
    assert basis.size == comb(8, 3, exact=True)
    assert np.all(occupations(basis, 8).sum(axis=1) == 3)
    assert np.all(np.diff(basis) > 0)


@pytest.mark.parametrize("J", [1.0, 2.5])
def test_two_site_singlet_and_triplet(J):
    # Two spins 1/2: J S1.S2 = (J/2)(S(S+1) - 3/2): singlet -3J/4, triplet +J/4 (textbook, exact)
    H, _ = xxz_sector(2, 1, J=J, Delta=1.0)
    assert np.allclose(np.linalg.eigvalsh(H.toarray()), [-0.75 * J, 0.25 * J], atol=1e-14)
    H, _ = xxz_sector(2, 2, J=J, Delta=1.0)
    assert np.allclose(H.toarray(), [[0.25 * J]], atol=1e-14)


def test_three_site_heisenberg():
    # Open 3-site chain, H = S2.(S1 + S3) = (S^2 - S2^2 - S13^2)/2 (hand derivation):
    # S13 = 1, S = 1/2 -> -1; S13 = 0, S = 1/2 -> 0; S = 3/2 -> 1/2 in the S^z = -1/2 sector.
    H, _ = xxz_sector(3, 1)
    assert np.allclose(np.linalg.eigvalsh(H.toarray()), [-1.0, 0.0, 0.5], atol=1e-14)
    e0, _ = ground_state(H)
    assert e0 == pytest.approx(-1.0, abs=1e-14)


def test_four_site_heisenberg():
    # Open 4-site chain, total-spin-0 subspace spanned by |S12=0,S34=0> and |S12=1,S34=1;S=0>:
    # H = [[-3/2, sqrt3/4], [sqrt3/4, 0]] (hand derivation, recoupling from memory), so
    # E0 = -3/4 - sqrt(3)/2 = -(3 + 2 sqrt 3)/4.
    H, _ = xxz_sector(4, 2)
    e0, vec = ground_state(H)
    assert e0 == pytest.approx(-(3 + 2 * np.sqrt(3)) / 4, abs=1e-13)
    assert np.linalg.norm(vec) == pytest.approx(1.0, abs=1e-14)


@pytest.mark.parametrize("L", [5, 8, 10])
@pytest.mark.parametrize("J", [1.0, 0.7])
def test_xx_chain_is_free_fermions(L, J):
    # DESIGN.md section 5 (exact, standard): XX chain with open ends has single-particle energies
    # J cos(pi k/(L+1)); the lowest state with n_up fermions fills the n_up lowest ones.
    eps = np.sort(J * np.cos(np.pi * np.arange(1, L + 1) / (L + 1)))
    for n_up in range(L + 1):
        H, _ = xxz_sector(L, n_up, J=J, Delta=0.0)
        e0 = np.linalg.eigvalsh(H.toarray())[0]
        assert e0 == pytest.approx(eps[:n_up].sum(), abs=1e-12)


def test_xx_chain_ground_state_fills_negative_levels():
    # DESIGN.md section 5: the overall ground state fills the negative levels (here 5 of L = 10)
    L = 10
    eps = np.cos(np.pi * np.arange(1, L + 1) / (L + 1))
    energies = [ground_state(xxz_sector(L, n, Delta=0.0)[0])[0] for n in range(L + 1)]
    assert int(np.argmin(energies)) == int(np.sum(eps < 0))
    assert min(energies) == pytest.approx(eps[eps < 0].sum(), abs=1e-12)


@pytest.mark.parametrize(
    "case",
    [
        dict(L=8, n=4, J=1.0, h=0.0, h_stag=0.0, dimer=0.0),
        dict(L=9, n=3, J=1.3, h=0.4, h_stag=0.0, dimer=0.0),
        dict(L=8, n=5, J=1.0, h=-0.2, h_stag=0.6, dimer=0.35),
    ],
    ids=["uniform", "field", "dimer-staggered"],
)
def test_jordan_wigner_xx_equals_fermions(case):
    # DESIGN.md section 5 (Jordan-Wigner, S^z = n - 1/2): xxz at Delta = 0 is the fermion chain
    # with t = J/2 (hopping sign a gauge choice on an open chain), mu_j = -(h + h_stag (-1)^j),
    # up to the constant -sum_j (h + h_stag (-1)^j)/2. Spectra and sector Schmidt values agree.
    L, n, J = case["L"], case["n"], case["J"]
    h, hs, dimer = case["h"], case["h_stag"], case["dimer"]
    Hs, bs = xxz_sector(L, n, J=J, Delta=0.0, h=h, h_stag=hs, dimer=dimer)
    Hf, bf = fermion_sector(L, n, t=J / 2, mu=-h, mu_stag=-hs, dimer=dimer)
    assert np.array_equal(bs, bf)
    const = -0.5 * np.sum(h + hs * (-1.0) ** np.arange(L))
    es = np.linalg.eigvalsh(Hs.toarray())
    ef = np.linalg.eigvalsh(Hf.toarray()) + const
    assert np.allclose(es, ef, atol=1e-12)
    _, vs = ground_state(Hs)
    _, vf = ground_state(Hf)
    for cut in range(L + 1):
        a = schmidt_by_sector(vs, bs, L, cut)
        b = schmidt_by_sector(vf, bf, L, cut)
        assert a.keys() == b.keys()
        for q in a:
            assert np.allclose(a[q], b[q], atol=1e-10)


def test_jordan_wigner_xxz_with_boundary_potential():
    # DESIGN.md section 5: xxz = t-V fermions with t = J/2, V = J Delta, potential -J Delta on bulk
    # sites and -J Delta/2 on the two end sites, plus J Delta (L-1)/4 (from Sz = n - 1/2).
    L, n, J, Delta = 9, 4, 1.2, 0.7
    Hs, _ = xxz_sector(L, n, J=J, Delta=Delta)
    Hf, bf = fermion_sector(L, n, t=J / 2, V=J * Delta, mu=J * Delta)
    occ = occupations(bf, L)
    boundary = 0.5 * J * Delta * (occ[:, 0] + occ[:, -1])
    ef = np.linalg.eigvalsh(Hf.toarray() + np.diag(boundary)) + J * Delta * (L - 1) / 4
    assert np.allclose(np.linalg.eigvalsh(Hs.toarray()), ef, atol=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_long_range_hopping_signs(seed):
    # Exact (Slater determinants): the n-fermion spectrum of H = sum h_ij c+_i c_j is all sums of
    # n distinct single-particle energies; this exercises the Jordan-Wigner signs at every range.
    rng = np.random.default_rng(seed)
    L, n = 7, 3
    a = rng.normal(size=(L, L)) + 1j * rng.normal(size=(L, L))
    hmat = (a + a.conj().T) / 2
    H, _ = quadratic_fermion_sector(hmat, n)
    eps = np.linalg.eigvalsh(hmat)
    sums = np.sort([eps[list(c)].sum() for c in combinations(range(L), n)])
    assert np.allclose(np.linalg.eigvalsh(H.toarray()), sums, atol=1e-11)


def test_ground_state_refuses_degeneracy():
    # exact: with dimer = 1 the bonds are J_0 = 2, J_1 = 0, J_2 = 2, two decoupled XX pairs; one up
    # spin sits in either pair with energy -J_0/2 = -1, a twofold ground level.
    H, _ = xxz_sector(4, 1, Delta=0.0, dimer=1.0)
    with pytest.raises(ValueError, match="degenerate"):
        ground_state(H)


def test_lanczos_path_matches_dense():
    # exact diagonalisation with scipy.sparse: eigsh and dense eigh agree on the same chain
    H, _ = xxz_sector(12, 6, Delta=0.5)
    e_dense, v_dense = ground_state(H)
    e_sparse, v_sparse = ground_state(H, dense_limit=10)
    assert e_sparse == pytest.approx(e_dense, abs=1e-11)
    assert abs(np.vdot(v_dense, v_sparse)) == pytest.approx(1.0, abs=1e-10)


@pytest.mark.parametrize("cut", [0, 1, 3, 5, 9])
def test_schmidt_weights_sum_to_one(cut):
    # exact: sum of squared Schmidt values = norm of the state = 1, for the ground state and for a
    # random complex vector in the sector
    L = 9
    H, basis = xxz_sector(L, 4, Delta=0.8, h_stag=0.3)
    _, vec = ground_state(H)
    rng = np.random.default_rng(cut)
    rnd = rng.normal(size=basis.size) + 1j * rng.normal(size=basis.size)
    rnd /= np.linalg.norm(rnd)
    for v in (vec, rnd):
        sec = schmidt_by_sector(v, basis, L, cut, unit=1.0, offset_per_site=-0.5)
        total = sum(np.sum(s**2) for s in sec.values())
        assert total == pytest.approx(1.0, abs=1e-12)
        assert all(np.all(np.diff(s) <= 0) for s in sec.values())


def test_schmidt_sector_labels():
    # definition: S^z_A = n_up,A - cut/2 ranges over max(0, n-(L-cut)) .. min(cut, n), shifted
    L, n, cut = 8, 3, 5
    H, basis = xxz_sector(L, n, Delta=1.0)
    _, vec = ground_state(H)
    sec = schmidt_by_sector(vec, basis, L, cut, unit=1.0, offset_per_site=-0.5)
    expected = [k - cut / 2 for k in range(max(0, n - (L - cut)), min(cut, n) + 1)]
    assert list(sec) == expected


def test_resolved_from_schmidt_product_state():
    # exact: a product state has one Schmidt value 1, so p = 1 in one sector and all entropies 0
    L, n = 6, 3
    basis = sector_basis(L, n)
    vec = np.zeros(basis.size)
    vec[0] = 1.0
    res = resolved_from_schmidt(schmidt_by_sector(vec, basis, L, 3), [1.0, 2.0, np.inf], np.array([0.3]))
    assert np.allclose(res["entropy"], 0.0, atol=1e-14)
    q = res["charges"][np.argmax(res["probability"])]
    assert np.allclose(res["moments"], np.exp(0.3j * q), atol=1e-14)


def test_block_charge_correlations_sum_rule():
    # exact: the total charge is fixed in the sector, so every row of <n_i n_j>_c sums to zero
    L = 8
    H, basis = fermion_sector(L, 3, V=1.5, mu_stag=0.4)
    _, vec = ground_state(H)
    corr = block_charge_correlations(vec, basis, L)
    assert np.allclose(corr.sum(axis=1), 0.0, atol=1e-12)
    assert np.allclose(corr, corr.T, atol=1e-14)
