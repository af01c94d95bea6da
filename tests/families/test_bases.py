"""The catalogue of local bases: operator algebra, charges, adjoint names and parity, per basis."""

from __future__ import annotations

import numpy as np
import pytest

from models.bases import NMAX_LIMIT, basis_names, make_basis

SITES = {name: make_basis(name, 3 if name.startswith("boson") else None) for name in basis_names()}


def charge_change(space, mat):
    """The charge change q(out) - q(in) shared by every non-zero entry, or None if not definite."""
    out, inn = np.nonzero(np.abs(mat) > 1e-14)
    deltas = {tuple(space.charges[o] - space.charges[i]) for o, i in zip(out, inn)}
    return deltas.pop() if len(deltas) == 1 else (None if deltas else (0,) * space.nq)


@pytest.mark.parametrize("name", basis_names())
def test_every_operator_has_a_definite_charge_an_adjoint_and_a_parity(name):
    s = SITES[name]
    assert s.charges.shape == (s.dim, s.nq) and s.charges.dtype.kind == "i"
    assert len(s.charge_names) == len(s.charge_units) == s.nq
    assert set(s.adjoints) == set(s.ops)
    for op, mat in s.ops.items():
        assert mat.shape == (s.dim, s.dim)
        assert charge_change(s, mat) is not None, op
        np.testing.assert_allclose(s.ops[s.adjoints[op]], mat.conj().T, err_msg=op)
        if s.parity is not None:
            sign = -1 if op in s.fermionic else 1
            np.testing.assert_allclose(np.diag(s.parity) @ mat @ np.diag(s.parity), sign * mat, err_msg=op)
    assert (s.parity is None) == (not s.fermionic)


@pytest.mark.parametrize("name, spin", [("spin-half", 0.5), ("spin-one", 1.0)])
def test_spin_algebra(name, spin):
    # Source: angular-momentum algebra (exact, standard): [S+, S-] = 2 Sz, [Sz, S+] = S+,
    # S^2 = Sz^2 + (S+S- + S-S+)/2 = s(s+1).
    s = SITES[name]
    sp, sm, sz = s.ops["S^+"], s.ops["S^-"], s.ops["S^z"]
    np.testing.assert_allclose(sp @ sm - sm @ sp, 2 * sz, atol=1e-14)
    np.testing.assert_allclose(sz @ sp - sp @ sz, sp, atol=1e-14)
    np.testing.assert_allclose(sz @ sz + (sp @ sm + sm @ sp) / 2, spin * (spin + 1) * np.eye(s.dim), atol=1e-14)
    np.testing.assert_allclose(np.diag(sz), s.charges[:, 0] * s.charge_units[0])


def test_spinless_fermion_algebra():
    # Source: canonical anticommutation relations of one mode (exact, standard).
    s = SITES["spinless-fermion"]
    c, cd, n = s.ops["c"], s.ops["c^+"], s.ops["n"]
    np.testing.assert_allclose(c @ cd + cd @ c, np.eye(2))
    np.testing.assert_allclose(c @ c, 0)
    np.testing.assert_allclose(n, cd @ c)
    np.testing.assert_allclose(s.parity, np.diag(np.eye(2) - 2 * n))
    np.testing.assert_allclose(np.diag(n), s.charges[:, 0])


def test_spinful_fermion_algebra_and_charges():
    # Source: canonical anticommutation relations of two modes on one site (exact, standard):
    # {c_s, c+_s'} = delta_ss', {c_s, c_s'} = 0; n = n_up + n_dn; S^z = (n_up - n_dn)/2;
    # S^+ = c+_up c_dn.
    s = SITES["spinful-fermion"]
    c = {k: s.ops[f"c_{k}"] for k in ("up", "dn")}
    for a in c:
        for b in c:
            np.testing.assert_allclose(c[a] @ c[b].T + c[b].T @ c[a], np.eye(4) * (a == b), atol=1e-14)
            np.testing.assert_allclose(c[a] @ c[b] + c[b] @ c[a], 0, atol=1e-14)
    np.testing.assert_allclose(s.ops["n_up"], c["up"].T @ c["up"])
    np.testing.assert_allclose(s.ops["n"], s.ops["n_up"] + s.ops["n_dn"])
    np.testing.assert_allclose(s.ops["S^+"], c["up"].T @ c["dn"])
    np.testing.assert_allclose(np.diag(s.ops["n"]), s.charges[:, 0] * s.charge_units[0])
    np.testing.assert_allclose(np.diag(s.ops["S^z"]), s.charges[:, 1] * s.charge_units[1])
    np.testing.assert_allclose(s.parity, (-1.0) ** np.diag(s.ops["n"]))


@pytest.mark.parametrize("nmax", [1, 3, 6])
def test_boson_ladder_below_the_cutoff(nmax):
    # Source: harmonic-oscillator ladder algebra (exact, standard): [b, b+] = 1 on every state
    # below the cutoff; b+ b = n.
    s = make_basis("boson-mode", nmax)
    b, bd, n = s.ops["b"], s.ops["b^+"], s.ops["n"]
    comm = b @ bd - bd @ b
    np.testing.assert_allclose(np.diag(comm)[:-1], 1.0)
    np.testing.assert_allclose(bd @ b, n, atol=1e-14)
    np.testing.assert_allclose(np.diag(n), s.charges[:, 0])


def test_two_boson_species_commute_and_carry_q_and_n():
    # Source: independent oscillators commute (exact); Q = N_a - N_b, N = N_a + N_b.
    s = make_basis("boson-ab", 2)
    a, b = s.ops["a"], s.ops["b"]
    np.testing.assert_allclose(a @ b - b @ a, 0, atol=1e-14)
    np.testing.assert_allclose(a @ b.T - b.T @ a, 0, atol=1e-14)
    na, nb = np.diag(s.ops["n_a"]), np.diag(s.ops["n_b"])
    np.testing.assert_allclose(s.charges[:, 0], na - nb)
    np.testing.assert_allclose(s.charges[:, 1], na + nb)
    assert s.dim == 9 and s.charge_names == ("Q", "N")
    pair = s.ops["a^+"] @ s.ops["b^+"]   # creates a particle-antiparticle pair: Q kept, N + 2
    assert charge_change(s, pair) == (0, 2)


def test_keep_charges_drops_a_charge():
    s = make_basis("boson-ab", 2).keep_charges(("Q",))
    assert s.charge_names == ("Q",) and s.charges.shape == (9, 1) and s.charge_units == (1.0,)
    with pytest.raises(ValueError, match="among Q, N"):
        make_basis("boson-ab", 2).keep_charges(("Sz",))


def test_catalogue_refusals():
    with pytest.raises(KeyError, match="known: spin-half"):
        make_basis("electron")
    with pytest.raises(ValueError, match="needs an integer nmax"):
        make_basis("boson-mode")
    with pytest.raises(ValueError, match=f"1..{NMAX_LIMIT}"):
        make_basis("boson-mode", NMAX_LIMIT + 1)
    with pytest.raises(ValueError, match="takes no nmax"):
        make_basis("spin-one", 2)
