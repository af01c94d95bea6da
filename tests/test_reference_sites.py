"""Checks of the general-site exact-diagonalisation reference (tests/reference_sites.py)."""

from __future__ import annotations

from itertools import product

import numpy as np
import pytest
import scipy.sparse as sp

from reference_ed import ground_state, xxz_sector
from reference_ed import schmidt_by_sector as bit_schmidt_by_sector
from reference_sites import (
    boson,
    bosons,
    hubbard,
    operator_product,
    schmidt_by_sector,
    sector_ground_state,
    site_operator,
    spin1,
    spin_half,
    spin_half_graph,
    spin_one,
    spinful_fermion,
    two_boson_species,
    two_species,
)


def comm(a, b):
    return a @ b - b @ a


def anti(a, b):
    return a @ b + b @ a


def chain_level(L, k, t=1.0):
    """Open tight-binding level -2 t cos(pi k/(L+1)), k = 1..L (exact, standard)."""
    return -2.0 * t * np.cos(np.pi * k / (L + 1))


# ---------------------------------------------------------------- local algebra


@pytest.mark.parametrize("site, s", [(spin_one(), 1.0), (spin_half(), 0.5)], ids=["spin1", "spin_half"])
def test_spin_algebra(site, s):
    # exact, elementary: [S+, S-] = 2 Sz, [Sz, S+] = S+, S^2 = Sz^2 + (S+S- + S-S+)/2 = s(s+1)
    Sz, Sp, Sm = site.ops["s_z"], site.ops["s_plus"], site.ops["s_minus"]
    assert np.allclose(comm(Sp, Sm), 2 * Sz, atol=1e-14)
    assert np.allclose(comm(Sz, Sp), Sp, atol=1e-14)
    S2 = Sz @ Sz + 0.5 * (Sp @ Sm + Sm @ Sp)
    assert np.allclose(S2, s * (s + 1) * np.eye(site.dim), atol=1e-14)


def test_boson_algebra():
    # exact, elementary: [b, b+] = 1 on n < nmax (the cutoff breaks it only on n = nmax), n = b+ b
    nmax = 4
    site = boson(nmax)
    b, bd = site.ops["b"], site.ops["b_dag"]
    assert np.allclose(comm(b, bd)[:nmax, :nmax], np.eye(nmax), atol=1e-14)
    assert np.allclose(bd @ b, site.ops["n"], atol=1e-14)


def test_two_species_algebra():
    # exact, elementary: a and b are independent modes, [a, a+] = [b, b+] = 1 below the cutoff
    nmax = 3
    site = two_boson_species(nmax)
    a, ad, b, bd = (site.ops[k] for k in ("a", "a_dag", "b", "b_dag"))
    na, nb = np.diag(site.ops["n_a"]), np.diag(site.ops["n_b"])
    below_a = np.ix_(na < nmax, na < nmax)
    below_b = np.ix_(nb < nmax, nb < nmax)
    assert np.allclose(comm(a, ad)[below_a], np.eye(int(np.sum(na < nmax))), atol=1e-14)
    assert np.allclose(comm(b, bd)[below_b], np.eye(int(np.sum(nb < nmax))), atol=1e-14)
    for x, y in [(a, b), (a, bd), (ad, b), (ad, bd)]:
        assert np.allclose(comm(x, y), 0, atol=1e-14)
    assert np.allclose(ad @ a, site.ops["n_a"], atol=1e-14)
    assert np.allclose(bd @ b, site.ops["n_b"], atol=1e-14)


def test_fermion_anticommutators_with_strings():
    # exact, elementary (canonical anticommutation): {c_is, c+_js'} = delta_ij delta_ss', {c_is, c_js'} = 0,
    # c+_is c_is = n_is, on L = 3 with Jordan-Wigner strings
    site, L = spinful_fermion(), 3
    modes = [(j, s) for j in range(L) for s in ("up", "dn")]
    c = {m: site_operator(site, L, m[0], f"c_{m[1]}").toarray() for m in modes}
    cd = {m: site_operator(site, L, m[0], f"c_{m[1]}_dag").toarray() for m in modes}
    one = np.eye(site.dim**L)
    for m1, m2 in product(modes, modes):
        assert np.allclose(anti(c[m1], cd[m2]), one * (m1 == m2), atol=1e-14)
        assert np.allclose(anti(c[m1], c[m2]), 0, atol=1e-14)
    for j, s in modes:
        assert np.allclose(cd[j, s] @ c[j, s], site_operator(site, L, j, f"n_{s}").toarray(), atol=1e-14)


# Charge changed by each operator, by hand from the basis definitions (exact, elementary).
EXPECTED_CHANGE = [
    (spin_one(), {"id": (0,), "s_z": (0,), "s_plus": (1,), "s_minus": (-1,)}),
    (spin_half(), {"id": (0,), "s_z": (0,), "s_plus": (1,), "s_minus": (-1,)}),
    (boson(3), {"id": (0,), "n": (0,), "b": (-1,), "b_dag": (1,)}),
    (two_boson_species(2), {"id": (0, 0), "n_a": (0, 0), "n_b": (0, 0), "a": (-1, -1), "a_dag": (1, 1),
                            "b": (1, -1), "b_dag": (-1, 1)}),
    (spinful_fermion(), {"id": (0, 0), "n_up": (0, 0), "n_dn": (0, 0), "parity": (0, 0),
                         "c_up": (-1, -0.5), "c_up_dag": (1, 0.5), "c_dn": (-1, 0.5), "c_dn_dag": (1, -0.5)}),
]


@pytest.mark.parametrize("site, expected", EXPECTED_CHANGE, ids=lambda x: getattr(x, "name", ""))
def test_operator_charges_definite(site, expected):
    # exact, elementary: every non-zero element <out|op|in> changes the charge by the same amount
    assert set(site.ops) == set(expected)
    for name, op in site.ops.items():
        out, inn = np.nonzero(op)
        assert out.size > 0
        change = site.charges[out] - site.charges[inn]
        assert np.allclose(change, np.asarray(expected[name], dtype=float), atol=1e-14), name


SMALL_CHAINS = [
    ("hubbard", lambda: hubbard(3, t=1.0, U=2.0, mu=0.3, mu_stag=0.2, dimer=0.1)),
    ("bosons", lambda: bosons(3, 3, t=0.8, U=1.5, mu=0.4)),
    ("spin1", lambda: spin1(3, J=1.0, Delta=0.7, D=0.4, h=0.2)),
    ("two_species", lambda: two_species(3, 2, t=0.9, U=1.0, V=0.6, mu=0.1)),
    ("spin_half_graph", lambda: spin_half_graph(5, [(0, 1, 1.0, 0.5), (0, 2, 0.3, 0.7), (4, 1, 0.2, -1.0)],
                                                [0.1, -0.2, 0.3, 0.0, 0.5])),
]


@pytest.mark.parametrize("build", [b for _, b in SMALL_CHAINS], ids=[n for n, _ in SMALL_CHAINS])
def test_hamiltonians_hermitian_and_charge_conserving(build):
    # exact, elementary: H is real symmetric and only connects product states of equal total charge
    H, charges = build()
    assert abs(H - H.T).max() < 1e-14
    rows, cols = H.nonzero()
    assert rows.size > 0
    assert np.allclose(charges[rows], charges[cols], atol=1e-12)


# ---------------------------------------------------------------- Hubbard


@pytest.mark.parametrize("L, N, Sz", [(4, 2, 0.0), (4, 3, 0.5), (5, 4, 0.0), (5, 3, -0.5), (5, 5, 0.5)])
def test_hubbard_free_fermions(L, N, Sz):
    # exact, standard tight-binding result: at U = 0 the (N, Sz) ground state fills the lowest
    # N_up and N_dn levels -2 t cos(pi k/(L+1)), k = 1..L
    t, mu = 0.8, 0.3
    n_up, n_dn = int(round(N / 2 + Sz)), int(round(N / 2 - Sz))
    levels = chain_level(L, np.arange(1, L + 1), t)
    H, charges = hubbard(L, t=t, U=0.0, mu=mu)
    e0, vec, index = sector_ground_state(H, charges, (N, Sz))
    assert e0 == pytest.approx(levels[:n_up].sum() + levels[:n_dn].sum() - mu * N, abs=1e-12)
    assert np.linalg.norm(H[index][:, index] @ vec - e0 * vec) < 1e-10


def test_hubbard_free_fermions_dimerised_staggered():
    # exact, elementary: free fermions fill the lowest eigenvalues of the L x L hopping matrix
    # h_{j,j+1} = -t_j, h_jj = -(mu + mu_stag (-1)^j), t_j = t (1 + dimer (-1)^j)
    L, t, mu, mu_stag, dimer = 6, 1.1, 0.2, 0.45, 0.3
    j = np.arange(L)
    hmat = np.diag(-(mu + mu_stag * (-1.0) ** j)) + np.diag(-t * (1 + dimer * (-1.0) ** j[:-1]), 1)
    eps = np.linalg.eigvalsh(hmat + np.triu(hmat, 1).T)
    H, charges = hubbard(L, t=t, mu=mu, mu_stag=mu_stag, dimer=dimer)
    for n_up, n_dn in [(3, 3), (2, 3), (4, 1)]:
        e0, _, _ = sector_ground_state(H, charges, (n_up + n_dn, (n_up - n_dn) / 2))
        assert e0 == pytest.approx(eps[:n_up].sum() + eps[:n_dn].sum(), abs=1e-11)


@pytest.mark.parametrize("U", [0.0, 1.0, 4.0, 10.0])
@pytest.mark.parametrize("t", [1.0, 0.6])
def test_hubbard_two_site(U, t):
    # exact, elementary two-site Hubbard dimer: N = 2, Sz = 0, E0 = (U - sqrt(U^2 + 16 t^2))/2
    H, charges = hubbard(2, t=t, U=U, mu=0.25)
    e0, _, _ = sector_ground_state(H, charges, (2, 0))
    assert e0 == pytest.approx((U - np.sqrt(U**2 + 16 * t**2)) / 2 - 2 * 0.25, abs=1e-13)


def test_sector_ground_state_refuses_degeneracy_and_empty_sector():
    # exact, elementary: at t = 0 one up electron on two sites has two equal levels (-mu)
    H, charges = hubbard(2, t=0.0, U=1.0, mu=0.5)
    with pytest.raises(ValueError, match="degenerate"):
        sector_ground_state(H, charges, (1, 0.5))
    with pytest.raises(ValueError, match="no product state"):
        sector_ground_state(H, charges, (1, 1.5))


# ---------------------------------------------------------------- spin 1


@pytest.mark.parametrize("J", [1.0, 1.7])
def test_spin1_two_site_singlet(J):
    # exact, elementary: J S1.S2 = J/2 [S(S+1) - 2 s(s+1)]; S_tot = 0 gives -2 J (the Sz = 0 ground state)
    H, charges = spin1(2, J=J)
    e0, _, _ = sector_ground_state(H, charges, (0,))
    assert e0 == pytest.approx(-2 * J, abs=1e-13)


def test_spin1_two_site_anisotropic_by_hand():
    # hand derivation (exact, elementary), S+|0> = S+|-1> sqrt(2)-normalised:
    #   Sz = 2: |+1,+1>, E = J Delta + 2 D + 2 h;
    #   Sz = 1: {|+1,0>, |0,+1>}, diagonal D + h, off-diagonal J/2 * sqrt2 * sqrt2 = J -> D + h - J;
    #   Sz = 0: {|+1,-1>, |0,0>, |-1,+1>}, diagonal a = 2 D - J Delta, 0, a, off-diagonal J between
    #   |0,0> and each of the others -> ground a/2 - sqrt(a^2/4 + 2 J^2) (symmetric combination).
    J, Delta, D, h = 0.9, 0.6, 0.35, -0.2
    H, charges = spin1(2, J=J, Delta=Delta, D=D, h=h)
    a = 2 * D - J * Delta
    for target, expected in [((2,), J * Delta + 2 * D + 2 * h), ((1,), D + h - J),
                             ((0,), a / 2 - np.sqrt(a**2 / 4 + 2 * J**2))]:
        e0, _, _ = sector_ground_state(H, charges, target)
        assert e0 == pytest.approx(expected, abs=1e-13), target


# ---------------------------------------------------------------- bosons


@pytest.mark.parametrize("L, nmax, t", [(3, 2, 1.0), (3, 1, 0.7), (8, 3, 1.0)])
def test_bosons_single_particle(L, nmax, t):
    # exact, elementary: one boson on an open chain has the tight-binding level -2 t cos(pi/(L+1));
    # U does not act on one particle. L = 8, nmax = 3 is the largest space the helper must build.
    mu = 0.3
    H, charges = bosons(L, nmax, t=t, U=2.0, mu=mu)
    e0, _, _ = sector_ground_state(H, charges, (1,))
    assert e0 == pytest.approx(chain_level(L, 1, t) - mu, abs=1e-12)


@pytest.mark.parametrize("U", [0.0, 1.0, 5.0])
def test_bosons_two_site_two_particles(U):
    # hand derivation (exact, elementary): N = 2 on two sites, <1,1| b+_0 b_1 |0,2> = sqrt(2), so
    # (|2,0> + |0,2>)/sqrt2 (energy U) couples to |1,1> (energy 0) with -2 t: E0 = U/2 - sqrt(U^2/4 + 4 t^2)
    t, mu = 0.8, 0.1
    H, charges = bosons(2, 2, t=t, U=U, mu=mu)
    e0, _, _ = sector_ground_state(H, charges, (2,))
    assert e0 == pytest.approx(U / 2 - np.sqrt(U**2 / 4 + 4 * t**2) - 2 * mu, abs=1e-13)


# ---------------------------------------------------------------- two species


def test_two_species_diagonal_without_hopping():
    # exact, elementary: at t = 0 H is diagonal with E = sum_j [U/2 (n_a(n_a-1) + n_b(n_b-1)) + V n_a n_b
    # - mu (n_a + n_b)]; two states by hand, then every state from its digits s_j = 3 n_a + n_b.
    L, nmax, U, V, mu = 3, 2, 1.3, 0.7, 0.4
    H, charges = two_species(L, nmax, t=0.0, U=U, V=V, mu=mu)
    diag = H.diagonal()
    assert (H - sp.diags(diag)).count_nonzero() == 0
    # sites (n_a, n_b) = (2,1), (0,0), (1,1): digits 7, 0, 4, index 7*81 + 0*9 + 4 = 571,
    # E = U + 3 V - 5 mu, (Q, Ntot) = (1, 5)
    assert diag[571] == pytest.approx(U + 3 * V - 5 * mu, abs=1e-14)
    assert np.allclose(charges[571], [1, 5])
    # sites (0,2), (1,0), (0,0): digits 2, 3, 0, index 2*81 + 3*9 + 0 = 189, E = U - 3 mu, (Q, Ntot) = (-1, 3)
    assert diag[189] == pytest.approx(U - 3 * mu, abs=1e-14)
    assert np.allclose(charges[189], [-1, 3])
    for idx, digits in enumerate(product(range((nmax + 1) ** 2), repeat=L)):
        na, nb = np.divmod(np.array(digits), nmax + 1)
        e = np.sum(U / 2 * (na * (na - 1) + nb * (nb - 1)) + V * na * nb - mu * (na + nb))
        assert diag[idx] == pytest.approx(e, abs=1e-13)
        assert np.allclose(charges[idx], [np.sum(na - nb), np.sum(na + nb)])
    # exact, elementary: one a and one b on different sites all cost -2 mu (6 states): degenerate
    with pytest.raises(ValueError, match="degenerate"):
        sector_ground_state(H, charges, (0, 2))


@pytest.mark.parametrize("L, nmax, target", [(4, 1, (1, 1)), (4, 2, (-1, 1)), (6, 2, (1, 1))])
def test_two_species_single_particle(L, nmax, target):
    # exact, elementary: one particle of either species has the level -2 t cos(pi/(L+1)); U, V do not act.
    # L = 6, nmax = 2 (9^6 states) is the largest space the helper must build.
    t, mu = 0.9, 0.2
    H, charges = two_species(L, nmax, t=t, U=1.0, V=0.5, mu=mu)
    e0, _, _ = sector_ground_state(H, charges, target)
    assert e0 == pytest.approx(chain_level(L, 1, t) - mu, abs=1e-12)


@pytest.mark.parametrize("U, V", [(0.0, 0.0), (2.0, 0.5), (1.0, 3.0)])
def test_two_species_two_site_two_particles(U, V):
    # hand derivation (exact, elementary), two sites:
    #   two a bosons (Q, Ntot) = (2, 2): as the one-species dimer, E0 = U/2 - sqrt(U^2/4 + 4 t^2);
    #   one a and one b (0, 2): (|a0 b0> + |a1 b1>)/sqrt2 (energy V) couples to (|a0 b1> + |a1 b0>)/sqrt2
    #   (energy 0) with -2 t, antisymmetric combinations decouple at V and 0: E0 = V/2 - sqrt(V^2/4 + 4 t^2).
    t, mu = 0.7, 0.15
    H, charges = two_species(2, 2, t=t, U=U, V=V, mu=mu)
    e_aa, _, _ = sector_ground_state(H, charges, (2, 2))
    e_ab, _, _ = sector_ground_state(H, charges, (0, 2))
    assert e_aa == pytest.approx(U / 2 - np.sqrt(U**2 / 4 + 4 * t**2) - 2 * mu, abs=1e-13)
    assert e_ab == pytest.approx(V / 2 - np.sqrt(V**2 / 4 + 4 * t**2) - 2 * mu, abs=1e-13)


# ---------------------------------------------------------------- spin 1/2 on any graph


def xxz_pairs(L, J, Delta, dimer):
    return [(j, j + 1, J * (1 + dimer * (-1) ** j), J * (1 + dimer * (-1) ** j) * Delta) for j in range(L - 1)]


@pytest.mark.parametrize(
    "L, n_up, J, Delta, h, h_stag, dimer",
    [(8, 4, 1.0, 1.0, 0.0, 0.0, 0.0), (8, 3, 1.2, 0.6, 0.3, 0.2, 0.25), (14, 7, 1.0, 1.0, 0.0, 0.0, 0.0)],
    ids=["heisenberg", "xxz-fields-dimer", "L14-lanczos"],
)
def test_spin_half_graph_matches_bit_reference(L, n_up, J, Delta, h, h_stag, dimer):
    # tests/reference_ed.py (xxz_sector, bit-based, an independent code path): equal energies, and equal
    # Schmidt values per block charge Sz_A = N_A - cut/2 (basis order and phase do not change them).
    # L = 14 has a 3432-state sector, beyond the dense limit: this exercises the Lanczos branch.
    fields = h + h_stag * (-1.0) ** np.arange(L)
    H, charges = spin_half_graph(L, xxz_pairs(L, J, Delta, dimer), fields)
    e0, vec, index = sector_ground_state(H, charges, (n_up - L / 2,))
    Hb, basis = xxz_sector(L, n_up, J=J, Delta=Delta, h=h, h_stag=h_stag, dimer=dimer)
    eb, vb = ground_state(Hb)
    assert e0 == pytest.approx(eb, abs=1e-10)
    for cut in range(L + 1):
        mine = schmidt_by_sector(vec, index, L, spin_half().charges, cut)
        theirs = bit_schmidt_by_sector(vb, basis, L, cut, unit=1.0, offset_per_site=-0.5)
        assert [q[0] for q in mine] == pytest.approx(list(theirs), abs=1e-12)
        for (_, s), t in zip(mine.items(), theirs.values()):
            assert np.allclose(s, t, atol=1e-10)


@pytest.mark.parametrize("seed", [0, 1])
def test_spin_half_graph_one_magnon(seed):
    # exact, elementary (one flipped spin): from the fully polarised state, E_F = sum Jz/4 + sum f_j/2;
    # flipping spin i changes it by -sum_{pairs ni} Jz/2 - f_i, and Jxy/2 moves the flip along a pair.
    # The Sz = L/2 - 1 spectrum is that of the L x L matrix M; exercises any-range pairs and fields.
    rng = np.random.default_rng(seed)
    L = 7
    pairs = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5), (5, 6), (0, 2), (3, 5), (6, 1), (4, 0)]
    pairs = [(i, j, rng.normal(), rng.normal()) for i, j in pairs]
    fields = rng.normal(size=L)
    H, charges = spin_half_graph(L, pairs, fields)
    e_ferro = sum(jz for *_, jz in pairs) / 4 + fields.sum() / 2
    M = np.diag(e_ferro - fields)
    for i, j, jxy, jz in pairs:
        M[i, i] -= jz / 2
        M[j, j] -= jz / 2
        M[i, j] += jxy / 2
        M[j, i] += jxy / 2
    e_top, _, _ = sector_ground_state(H, charges, (L / 2,))
    assert e_top == pytest.approx(e_ferro, abs=1e-13)
    index = np.nonzero(np.isclose(charges[:, 0], L / 2 - 1))[0]
    spectrum = np.linalg.eigvalsh(H[index][:, index].toarray())
    assert np.allclose(spectrum, np.linalg.eigvalsh(M), atol=1e-12)
    e0, _, _ = sector_ground_state(H, charges, (L / 2 - 1,))
    assert e0 == pytest.approx(np.linalg.eigvalsh(M)[0], abs=1e-12)


# ---------------------------------------------------------------- Schmidt values


def test_schmidt_two_long_singlets():
    # exact, elementary: Heisenberg pairs (0,3) and (1,2) give two singlets, E = 2 * (-3/4); cut 2 splits
    # both, each contributing Schmidt values 1/sqrt2 with Sz = +-1/2 on the left: four values 1/2,
    # at Sz_A = -1 (one), 0 (two), +1 (one).
    H, charges = spin_half_graph(4, [(0, 3, 1.0, 1.0), (1, 2, 1.0, 1.0)])
    e0, vec, index = sector_ground_state(H, charges, (0,))
    assert e0 == pytest.approx(-1.5, abs=1e-13)
    sectors = schmidt_by_sector(vec, index, 4, spin_half().charges, 2)
    assert list(sectors) == [(-1.0,), (0.0,), (1.0,)]
    assert np.allclose(sectors[(-1.0,)], [0.5]) and np.allclose(sectors[(1.0,)], [0.5])
    assert np.allclose(sectors[(0.0,)], [0.5, 0.5], atol=1e-12)


def test_schmidt_product_of_halves():
    # exact, elementary: with no coupling across the cut the ground state is a product, one Schmidt value 1.
    # Spins: singlets on (0,1) and (2,3). Hubbard, dimer = 1: t_0 = t_2 = 2 t, t_1 = 0; each half is a
    # two-site dimer at half filling, E = 2 (U - sqrt(U^2 + 16 (2t)^2))/2 (lower than a 1 + 3 split).
    # Left charges with no weight (here Sz_A = +-1) are listed with zero Schmidt values.
    H, charges = spin_half_graph(4, [(0, 1, 1.0, 1.0), (2, 3, 1.0, 1.0)])
    _, vec, index = sector_ground_state(H, charges, (0,))
    sectors = schmidt_by_sector(vec, index, 4, spin_half().charges, 2)
    assert list(sectors) == [(-1.0,), (0.0,), (1.0,)]
    assert np.allclose(sectors[(0.0,)][0], 1.0, atol=1e-12)
    assert np.allclose(np.concatenate([sectors[(-1.0,)], sectors[(0.0,)][1:], sectors[(1.0,)]]), 0, atol=1e-12)
    t, U = 0.5, 2.0
    H, charges = hubbard(4, t=t, U=U, dimer=1.0)
    e0, vec, index = sector_ground_state(H, charges, (4, 0))
    assert e0 == pytest.approx(U - np.sqrt(U**2 + 64 * t**2), abs=1e-12)
    sectors = schmidt_by_sector(vec, index, 4, spinful_fermion().charges, 2)
    assert sectors[(2.0, 0.0)][0] == pytest.approx(1.0, abs=1e-12)
    rest = np.concatenate([s[1:] if q == (2.0, 0.0) else s for q, s in sectors.items()])
    assert np.allclose(rest, 0, atol=1e-12)


SCHMIDT_CASES = [
    ("hubbard", 4, spinful_fermion(), lambda: hubbard(4, t=1.0, U=2.0, mu_stag=0.3), (3, 0.5)),
    ("spin1", 4, spin_one(), lambda: spin1(4, J=1.0, Delta=0.8, D=0.3), (0,)),
    ("bosons", 4, boson(3), lambda: bosons(4, 3, t=1.0, U=2.0), (3,)),
    ("two_species", 3, two_boson_species(2), lambda: two_species(3, 2, t=1.0, U=1.0, V=0.5), (0, 2)),
]


@pytest.mark.parametrize("L, site, build, target", [c[1:] for c in SCHMIDT_CASES], ids=[c[0] for c in SCHMIDT_CASES])
def test_schmidt_normalised_and_matches_dense_svd(L, site, build, target):
    # exact, elementary: sum of s^2 over all sectors is the norm 1; the union of sector Schmidt values
    # is the SVD spectrum of the full vector reshaped (d^cut, d^(L-cut)) (block-diagonal matrix).
    H, charges = build()
    _, vec, index = sector_ground_state(H, charges, target)
    full = np.zeros(site.dim**L)
    full[index] = vec
    for cut in range(L + 1):
        sectors = schmidt_by_sector(vec, index, L, site.charges, cut)
        allvals = np.sort(np.concatenate(list(sectors.values())))[::-1]
        assert np.sum(allvals**2) == pytest.approx(1.0, abs=1e-12)
        for s in sectors.values():
            assert np.all(np.diff(s) <= 0)
        dense = np.linalg.svd(full.reshape(site.dim**cut, -1), compute_uv=False)
        n = max(allvals.size, dense.size)
        assert np.allclose(np.pad(allvals, (0, n - allvals.size)), np.pad(dense, (0, n - dense.size)), atol=1e-12)


def test_operator_product_order():
    # exact, elementary: operator_product multiplies in the order written, S-_0 S+_0 != S+_0 S-_0 on spin 1/2
    site = spin_half()
    up_down = operator_product(site, 2, [(0, "s_plus"), (0, "s_minus")]).toarray()
    assert np.allclose(up_down, np.kron(np.diag([1.0, 0.0]), np.eye(2)), atol=1e-14)
