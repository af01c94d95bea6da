"""Checks of the exact lattice complex-scalar engine (mps/theory/scalar.py, mps/theory/scalar_sectors.py).

References: exact diagonalisation with scipy.sparse of the truncated two-species chain
(tests/reference_sites.py, no project code); mpmath at 50 digits (reference library) for the
symplectic eigenvalues of the harmonic chain (Peschel and Eisler, J. Phys. A 42, 504003 (2009),
from memory); brute-force enumeration of the product spectrum prod_k (1 - x_k)^2 x_k^{n+ + n-}
(same source); the bosonic entropy formula of Casini and Huerta, J. Phys. A 42, 504007 (2009), from
memory; exact identities (sum rules, Fourier series, Chernoff/Doob bounds).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.special import xlogy

from mps.analysis.resolved import CutResolved
from mps.theory.scalar import (
    block_weights,
    charge_correlations,
    choose_window,
    correlations,
    decay_length,
    ground_energy,
    mass_matrix,
    resolve_all_cuts,
    resolve_block,
    window_error,
)
from mps.theory.scalar_sectors import tail_bound, truncated_distribution, window_for

from reference_ed import resolved_from_schmidt
from reference_sites import (
    operator_product,
    product_charges,
    schmidt_by_sector,
    sector_ground_state,
    site_operator,
    two_boson_species,
)

RENYI = (1.0, 2.0, 3.0, np.inf)
RENYI_WIDE = (0.5, 1.0, 2.0, 3.0, 10.0, np.inf)
RENYI_ENUM = (1.0, 2.0, 3.0, 10.0, np.inf)
ALPHAS = np.linspace(-np.pi, np.pi, 13)


# ----------------------------------------------------------------------------- exact diagonalisation
def scalar_chain_ed(masses, nmax: int):
    """(site, H) of the chain in the local a/b modes of omega0_j = sqrt(m_j^2 + 2), cut at nmax.

    phi_j = (a_j + b_j^+)/sqrt(2 omega0_j), pi_j = i sqrt(omega0_j/2)(a_j^+ - b_j): on-site
    omega0_j (n_a + n_b + 1); each bond -(1/(2 sqrt(omega0_j omega0_{j+1}))) [a_j^+ a_{j+1} + b_j^+ b_{j+1}
    + a_j^+ b_{j+1}^+ + a_{j+1}^+ b_j^+ + h.c.] (DESIGN.md section 3; the Dirichlet bonds only add to
    omega0). Written in the projected form P H P, so the ED energy is variational.
    """
    site = two_boson_species(nmax)
    L = len(masses)
    om = np.sqrt(np.asarray(masses, dtype=float) ** 2 + 2.0)
    H = sp.csr_matrix((site.dim**L, site.dim**L))
    onsite = site.ops["n_a"] + site.ops["n_b"] + site.ops["id"]
    for j in range(L):
        H = H + om[j] * site_operator(site, L, j, onsite)
    for j in range(L - 1):
        g = 1.0 / (2.0 * np.sqrt(om[j] * om[j + 1]))
        for factors in ([(j, "a_dag"), (j + 1, "a")], [(j, "b_dag"), (j + 1, "b")],
                        [(j, "a_dag"), (j + 1, "b_dag")], [(j + 1, "a_dag"), (j, "b_dag")]):
            T = operator_product(site, L, factors)
            H = H - g * (T + T.T)  # real matrices: h.c. is the transpose
    return site, sp.csr_matrix(H)


ED_CASES = {
    # name: (masses, nmax); L = 3 resolves one mode per cut, L = 4 two modes at the middle cut
    "uniform-m1": ([1.0, 1.0, 1.0], 6),
    "staggered": ([2.0, 1.0, 2.0, 1.0], 4),
}


@pytest.fixture(scope="module", params=list(ED_CASES))
def ed(request):
    masses, nmax = ED_CASES[request.param]
    site, H = scalar_chain_ed(masses, nmax)
    L = len(masses)
    charge = site.charges[:, :1]  # Q = n_a - n_b (the total occupation is not conserved)
    lowest = float(spla.eigsh(H, k=1, which="SA", tol=0.0)[0][0])
    energy, vec, index = sector_ground_state(H, product_charges(charge, L), [0.0])
    digits = (index[:, None] // site.dim ** np.arange(L - 1, -1, -1)[None, :]) % site.dim
    n_a, _ = np.divmod(digits, nmax + 1)
    top = max(float(np.sum(vec[n_a[:, j] == nmax] ** 2)) for j in range(L))
    return dict(masses=masses, nmax=nmax, site=site, L=L, charge=charge, lowest=lowest, energy=energy,
                vec=vec, index=index, top=top, dim=H.shape[0])


def test_ground_energy_matches_exact_diagonalisation(ed):
    # exact diagonalisation with scipy.sparse (reference library). The lowest level over all Q lies
    # in Q = 0 (charge-neutral ground state) and equals sum_k omega_k up to the cutoff error, which
    # is measured here as the ground-state weight w_top of the top occupation nmax (measured ratio
    # |E_ED - E| / w_top 0.79 and 0.58; the check allows 5 w_top).
    V = mass_matrix(ed["masses"])
    assert ed["lowest"] == pytest.approx(ed["energy"], abs=1e-11)
    assert ed["top"] < 1e-8
    assert ed["energy"] - ground_energy(V) == pytest.approx(0.0, abs=5 * ed["top"] + 1e-12)
    assert ed["energy"] >= ground_energy(V) - 1e-12  # P H P is variational


def test_resolved_entanglement_matches_exact_diagonalisation(ed):
    # exact diagonalisation with scipy.sparse (reference library): Schmidt values per sector of the
    # Q = 0 ground state, every cut. Tolerances from the cutoff error w_top (weight of the top
    # occupation, measured in the fixture); largest measured ratios over both chains: |dp| 0.94 w,
    # |dmoments| 1.34 w, p(q) |dS_n(q)| 0.32 w, |dS_n| 0.33 w log(1/w) (a missing weight w changes an
    # entropy by about -w log w). Checks: 5 w for p and moments, (3 w + 1e-15)/p(q) for S_n(q) where
    # p(q) >= 1e-10 (the 1e-15 is the ED round-off of the Schmidt values), 2 w log(1/w) + 1e-12 for S_n.
    w = ed["top"]
    V = mass_matrix(ed["masses"])
    X, P = correlations(V)
    for cut in range(ed["L"] + 1):
        res = resolve_block(block_weights(X, P, cut), cut, RENYI, ALPHAS)
        sectors = schmidt_by_sector(ed["vec"], ed["index"], ed["L"], ed["charge"], cut)
        ref = resolved_from_schmidt({key[0]: s for key, s in sectors.items()}, list(RENYI), ALPHAS)
        assert np.allclose(ref["probability"], ref["probability"][::-1], atol=5 * w + 1e-14)  # p(q) = p(-q)
        for q in np.union1d(res.charges, ref["charges"]):
            mine, theirs = np.nonzero(res.charges == q)[0], np.nonzero(ref["charges"] == q)[0]
            p_eng = res.probability[mine[0]] if mine.size else 0.0
            p_ref = ref["probability"][theirs[0]] if theirs.size else 0.0
            assert p_eng == pytest.approx(p_ref, abs=5 * w + 1e-13), (cut, q)
            if mine.size and theirs.size and p_ref >= 1e-10 and p_eng >= res.floor:
                diff = res.sector_entropy[:, mine[0]] - ref["sector_entropy"][:, theirs[0]]
                assert np.all(np.abs(diff) <= (3 * w + 1e-15) / p_ref + 1e-12), (cut, q, diff)
        assert np.allclose(res.entropy, ref["entropy"], atol=2 * w * np.log(1 / w) + 1e-12, rtol=0)
        finite = np.isfinite(RENYI)
        assert np.allclose(res.moments[finite], ref["moments"][finite], atol=5 * w + 1e-13, rtol=0)


def test_charge_correlations_match_exact_diagonalisation(ed):
    # exact diagonalisation with scipy.sparse: <q_i q_j> with q = n_a - n_b on the ED ground state
    # (<q_i> = 0 in it). Cutoff error ~0.32 nmax^2 w_top measured (the charge weighs the top
    # occupation with nmax^2); the check allows nmax^2 w_top. Rows sum to zero (Q = 0, exact).
    site, L = ed["site"], ed["L"]
    full = np.zeros(ed["dim"])
    full[ed["index"]] = ed["vec"]
    q = site.ops["n_a"] - site.ops["n_b"]
    ops = [site_operator(site, L, j, q) for j in range(L)]
    ref = np.array([[full @ (ops[i] @ (ops[j] @ full)) for j in range(L)] for i in range(L)])
    corr = charge_correlations(*correlations(mass_matrix(ed["masses"])))
    assert np.allclose(corr, ref, atol=ed["nmax"] ** 2 * ed["top"] + 1e-12, rtol=0)
    assert np.allclose(corr.sum(axis=1), 0.0, atol=1e-13)


# ----------------------------------------------------------------------------- mode weights
def _weights_high_precision(masses, cut: int) -> np.ndarray:
    """x_k = (sigma - 1/2)/(sigma + 1/2), sigma^2 = eig(X_A P_A), in mpmath at 50 digits (reference
    library; Peschel and Eisler 2009, from memory): no cancellation matters at that precision."""
    mpmath = pytest.importorskip("mpmath")
    with mpmath.workdps(50):
        L = len(masses)
        V = mpmath.matrix(L, L)
        for j, m in enumerate(masses):
            V[j, j] = mpmath.mpf(m) ** 2 + 2
            if j + 1 < L:
                V[j, j + 1] = V[j + 1, j] = -1
        E, Q = mpmath.eigsy(V)
        X = Q * mpmath.diag([1 / (2 * mpmath.sqrt(e)) for e in E]) * Q.T
        P = Q * mpmath.diag([mpmath.sqrt(e) / 2 for e in E]) * Q.T
        R = mpmath.cholesky(X[0:cut, 0:cut])
        s2, _ = mpmath.eigsy(R.T * P[0:cut, 0:cut] * R)
        half = mpmath.mpf(1) / 2
        x = [(mpmath.sqrt(v) - half) / (mpmath.sqrt(v) + half) for v in s2]
        return np.array(sorted((float(v) for v in x), reverse=True))


@pytest.mark.parametrize("masses", [np.ones(14), 1.0 + 0.5 * (-1.0) ** np.arange(14), np.full(14, 0.1)],
                         ids=["m1", "staggered", "m0.1"])
def test_weights_match_high_precision(masses):
    # mpmath at 50 digits (reference library): weights accurate to 5e-17 + 5e-15 x in absolute
    # terms, down to the smallest ones (the formula sigma - 1/2 from sigma in double precision
    # errs by ~3e-16..1e-15 absolute here); weights below MIN_WEIGHT = 1e-30 are left out
    X, P = correlations(mass_matrix(masses))
    for cut in (3, 7, 10):
        ref = _weights_high_precision(masses, cut)
        x = block_weights(X, P, cut)
        assert np.all(ref[x.size:] < 1e-26)
        assert np.all(np.abs(x - ref[: x.size]) <= 5e-17 + 5e-15 * ref[: x.size]), cut
        assert x.size >= np.sum(ref > 1e-26)


def test_cross_block_identity():
    # derived in mps.theory.scalar's docstring from X P = 1/4: P_A X_AB P_B X_BA = (P_A X_A)(P_A X_A - 1/4)
    # and X_A P_A - 1/4 = -X_AB P_BA (the identity the weights rest on), checked numerically
    X, P = correlations(mass_matrix(0.4 + 0.3 * np.cos(np.arange(30))))
    for cut in (1, 9, 15, 29):
        A, B = slice(0, cut), slice(cut, 30)
        left = P[A, A] @ X[A, B] @ P[B, B] @ X[B, A]
        pa_xa = P[A, A] @ X[A, A]
        assert np.allclose(left, pa_xa @ (pa_xa - 0.25 * np.eye(cut)), atol=1e-14, rtol=0)
        assert np.allclose(X[A, A] @ P[A, A] - 0.25 * np.eye(cut), -X[A, B] @ P[B, A], atol=1e-14, rtol=0)


@pytest.mark.parametrize("m", [0.5, 30.0, 3000.0, 1e5])
def test_two_site_weight_is_exact(m):
    # exact, derived here: L = 2, cut 1. V has omega_+-^2 = m^2 + 2 +- 1, X_00 = (1/w+ + 1/w-)/4,
    # P_00 = (w+ + w-)/4, so sigma = (w+ + w-)/(4 sqrt(w+ w-)) and
    # x = [(sqrt w+ - sqrt w-)/(sqrt w+ + sqrt w-)]^2 with
    # sqrt w+ - sqrt w- = 2/((w+ + w-)(sqrt w+ + sqrt w-)) (cancellation-free), x ~ 1/(16 m^4).
    # Measured: relative error 2e-10 at m = 3000 (x = 7.7e-16) and 1e-6 at m = 1e5 (x = 6e-22; the
    # round-off of X_01 grows like eps m^2), where sigma - 1/2 in double precision gives 6.7e-16 and a
    # negative number; checked to 1e-9 x + 1e-26
    wp, wm = np.sqrt(m**2 + 3.0), np.sqrt(m**2 + 1.0)
    root = np.sqrt(wp) + np.sqrt(wm)
    exact = (2.0 / ((wp + wm) * root) / root) ** 2
    x = block_weights(*correlations(mass_matrix([m, m])), 1)
    assert x.size == 1 and abs(x[0] - exact) <= 1e-9 * exact + 1e-26


def test_windowed_weights_and_records_match_full_blocks():
    # exactness of the window (module docstring of mps.theory.scalar): L = 400, m = 0.5. Weights
    # and records agree to 1e-12, and every weight moves by less than the Weyl bound of window_error:
    # |dx| <= 8 max(s, s') delta, with s(x) = (1 + x) sqrt(x) / (2 (1 - x)^2) (mean value theorem)
    L = 400
    V = mass_matrix(np.full(L, 0.5))
    X, P = correlations(V)
    w = choose_window(X)
    assert 20 < w < 100
    cuts = [1, 5, 60, 61, 133, 200, 339, 399]
    for cut in cuts:
        full, win = block_weights(X, P, cut), block_weights(X, P, cut, window=w)
        n = max(full.size, win.size)
        a, b = np.pad(full, (0, n - full.size)), np.pad(win, (0, n - win.size))
        delta = window_error(X, P, cut, w)
        s = (1 + np.maximum(a, b)) * np.sqrt(np.maximum(a, b)) / (2 * (1 - np.maximum(a, b)) ** 2)  # s(x)
        assert np.all(np.abs(a - b) <= 8 * s * delta + 1e-30), cut
        assert np.max(np.abs(a - b)) < 1e-12
    auto = resolve_all_cuts(V, cuts, RENYI, ALPHAS)
    full = resolve_all_cuts(V, cuts, RENYI, ALPHAS, window=None)
    for r1, r2 in zip(auto, full):
        assert np.array_equal(r1.charges, r2.charges)
        assert np.allclose(r1.probability, r2.probability, atol=1e-12, rtol=0)
        assert np.allclose(r1.entropy, r2.entropy, atol=1e-12, rtol=0)
        assert np.allclose(r1.sector_entropy, r2.sector_entropy, atol=1e-12, rtol=0, equal_nan=True)
        assert np.allclose(r1.moments, r2.moments, atol=1e-12, rtol=0)


# ----------------------------------------------------------------------------- sector sums
def _enumerate(x: np.ndarray, cutoff: int):
    """Every level prod_k (1 - x_k)^2 x_k^{n+ + n-} with n+- <= cutoff and its Q_A = sum (n+ - n-),
    by brute force (Peschel and Eisler 2009, from memory); the omitted weight is ~x_1^{cutoff+1}.
    Returned sorted by charge."""
    occ = np.arange(cutoff + 1)
    lam, charge = np.ones(1), np.zeros(1, dtype=int)
    for xk in x:
        plus, minus = np.meshgrid(occ, occ, indexing="ij")
        mode = ((1 - xk) ** 2 * xk ** (plus + minus)).ravel()
        lam = np.outer(lam, mode).ravel()
        charge = (charge[:, None] + (plus - minus).ravel()[None, :]).ravel()
    order = np.argsort(charge, kind="stable")
    return lam[order], charge[order]


@pytest.mark.parametrize("x, cutoff", [(np.array([0.3, 0.08]), 30), (np.array([0.05, 0.01, 0.002]), 11),
                                      (np.array([0.2, 0.2]), 30)],
                         ids=["two-modes", "three-modes", "degenerate"])
def test_resolve_block_matches_enumeration(x, cutoff):
    # brute-force enumeration of the product spectrum; the enumeration misses ~x_1^{cutoff+1}
    # (<= 5e-15 here), so p(q) is compared to 1e-14 absolute and 1e-12 relative, S_n(q) to 1e-12
    # where p(q) >= 1e-9, total S_n and moments to 1e-13. Orders n < 1 would need a longer
    # enumeration (it misses x_1^{n (cutoff+1)}); they are checked by the sum rules below
    lam, charge = _enumerate(x, cutoff)
    qs, starts = np.unique(charge, return_index=True)
    groups = dict(zip(qs, np.split(lam, starts[1:])))
    res = resolve_block(x, 5, RENYI_ENUM, ALPHAS, floor=1e-12)
    assert isinstance(res, CutResolved) and np.all(np.isinf(res.counts))
    for i, q in enumerate(res.charges):
        sel = groups[int(q)]
        p = sel.sum()
        assert res.probability[i] == pytest.approx(p, rel=1e-12, abs=1e-14), q
        if p < 1e-9:
            continue
        y = sel / p
        ref = [-np.sum(y * np.log(y)) if n == 1 else -np.log(y.max()) if np.isinf(n)
               else np.log(np.sum(y**n)) / (1 - n) for n in RENYI_ENUM]
        assert np.allclose(res.sector_entropy[:, i], ref, atol=1e-12, rtol=0), q
    ref_total = [-np.sum(lam * np.log(lam)) if n == 1 else -np.log(lam.max()) if np.isinf(n)
                 else np.log(np.sum(lam**n)) / (1 - n) for n in RENYI_ENUM]
    assert np.allclose(res.entropy, ref_total, atol=1e-13, rtol=0)
    for r, n in enumerate(RENYI_ENUM[:-1]):
        per_sector = np.array([np.sum(groups[q] ** n) for q in qs])
        ref = np.exp(1j * np.outer(ALPHAS, qs)) @ per_sector / per_sector.sum()
        assert np.allclose(res.moments[r], ref, atol=1e-13, rtol=0)


def _chain_cases():
    out = []
    for masses in (np.full(60, 0.5), 0.6 + 0.4 * (-1.0) ** np.arange(60)):
        X, P = correlations(mass_matrix(masses))
        out += [(X, P, cut) for cut in (1, 7, 30, 59)]
    return out


def test_sum_rules():
    # exact identities: sum_q p(q) = 1 within tol; p(q) = p(-q) (charge conjugation of the neutral
    # ground state); S_1 = S_number + S_config (Lukin et al., Science 364, 256 (2019)); Tr rho^n =
    # sum_q p^n e^{(1-n) S_n(q)} and the moments (product formula) equal the Fourier series
    # sum_q F_n(q) e^{i alpha q} of the sector values (computed separately), both up to the stated
    # bound on the unreported sectors; the moments are real and even; Var Q_A =
    # sum_k 2 x_k/(1 - x_k)^2 (two geometric occupations per mode) =
    # sum_{i,j in A} <q_i q_j> (Wick); S_1 = sum_k 2[(s+1/2) log(s+1/2) - (s-1/2) log(s-1/2)]
    # (Casini and Huerta 2009, from memory)
    renyi = (0.5, 1.0, 2.0, 3.0, 10.0)
    for X, P, cut in _chain_cases():
        x = block_weights(X, P, cut)
        res = resolve_block(x, cut, renyi, ALPHAS, floor=0.0)
        assert 1.0 - 1e-14 <= res.probability.sum() <= 1.0 + 1e-14
        assert np.array_equal(res.charges, -res.charges[::-1])
        assert np.allclose(res.probability, res.probability[::-1], rtol=1e-14, atol=0)
        assert res.number_entropy + res.config_entropy == pytest.approx(res.entropy[1], abs=1e-13)
        for r, n in enumerate(renyi):
            # F_n(q) = Z_n(q)/Z_n from the sector values; the sectors beyond the record's range
            # |q| <= Q hold at most tail_bound(x^n, Q + 1) of it (n < 1 has the heavier tail)
            f = res.probability**n * np.exp((1 - n) * (res.sector_entropy[r] - res.entropy[r]))
            missing = tail_bound(x**n, res.charges.max() + 1) + 1e-13
            assert -1e-13 <= 1.0 - f.sum() <= missing, n
            fourier = np.exp(1j * np.outer(ALPHAS, res.charges)) @ f
            assert np.all(np.abs(res.moments[r] - fourier) <= missing), n
        assert np.all(res.moments.imag == 0)
        assert np.allclose(res.moments, res.moments[:, ::-1], rtol=0, atol=1e-15)
        assert res.cumulant(1) == pytest.approx(0.0, abs=1e-14)
        assert res.cumulant(2) == pytest.approx(np.sum(2 * x / (1 - x) ** 2), rel=1e-12)
        corr = charge_correlations(X, P)[:cut, :cut].sum()
        assert res.cumulant(2) == pytest.approx(corr, rel=1e-10, abs=1e-13)
        up, down = 1 / (1 - x), x / (1 - x)  # sigma +- 1/2 for sigma = (1 + x)/(2 (1 - x))
        s1 = np.sum(2 * (xlogy(up, up) - xlogy(down, down)))
        assert res.entropy[1] == pytest.approx(s1, rel=1e-12)


def test_truncation_bound_holds():
    # Doob maximal inequality + Chernoff (module docstring of scalar_sectors): a deliberately small
    # window loses less weight than tail_bound, in total and per sector; reference: a window of 400
    x = np.array([0.6, 0.3, 0.1, 0.02])
    for n in (1.0, 2.0, 0.5):
        ref = np.exp(truncated_distribution(x, n, 400).log_f)
        for W in (2, 5, 9, 15):
            small = truncated_distribution(x, n, W)
            lost_total = 1.0 - (2 * np.exp(small.log_f).sum() - np.exp(small.log_f[0]))
            assert small.lost == pytest.approx(tail_bound(x**n, W + 1))
            assert 0.0 <= lost_total <= small.lost
            assert np.all(ref[: W + 1] - np.exp(small.log_f) <= small.lost)
            assert np.all(ref[: W + 1] - np.exp(small.log_f) >= -1e-15)  # lower bounds
        # the weight outside |q| <= Q is below tail_bound(Q + 1), and window_for inverts it
        for target in (1e-3, 1e-8, 1e-14):
            Q = window_for(x**n, target)
            outside = 1.0 - (2 * ref[: Q + 1].sum() - ref[0])
            assert outside <= tail_bound(x**n, Q + 1) <= target
            assert tail_bound(x**n, Q) > target


def test_unreported_weight_below_tol():
    # the record's range: 1 - sum_q p(q) <= tol for a loose tol (exact identity for the reference)
    x = np.array([0.7, 0.2])
    for tol in (1e-4, 1e-8):
        res = resolve_block(x, 2, RENYI, ALPHAS, tol=tol)
        full = resolve_block(x, 2, RENYI, ALPHAS, tol=1e-15)
        missing = 1.0 - res.probability.sum()
        assert 0.0 <= missing <= tol
        inside = np.abs(full.charges) <= res.charges.max()
        assert missing == pytest.approx(1.0 - np.sum(full.probability[inside]), abs=1e-15)


# ----------------------------------------------------------------------------- large chains
@pytest.mark.parametrize("L, m", [(2000, 0.05), (500, 1e-3)], ids=["xi20", "nearly-massless"])
def test_large_blocks_are_finite_and_normalised(L, m):
    # stability: central cut, Renyi up to 10 and inf; exact identities as in test_sum_rules
    V = mass_matrix(np.full(L, m))
    res = resolve_all_cuts(V, [L // 2], RENYI_WIDE, ALPHAS)[0]
    keep = res.probability >= res.floor
    assert 1.0 - 1e-14 <= res.probability.sum() <= 1.0 + 1e-13
    assert np.all(np.isfinite(res.entropy)) and np.all(np.diff(res.entropy) < 0)  # S_n decreases in n
    assert np.all(np.isfinite(res.sector_entropy[:, keep])) and np.all(np.isnan(res.sector_entropy[:, ~keep]))
    assert np.all(res.sector_entropy[:, keep] > 0)
    assert np.all(np.abs(res.moments) <= 1 + 1e-14) and np.allclose(res.moments[:, ALPHAS.size // 2], 1.0)
    assert res.number_entropy + res.config_entropy == pytest.approx(res.entropy[1], abs=1e-11)
    assert res.cumulant(2) > 0.3


def test_decay_length():
    # 2 sinh(1/(2 xi)) = m (derived in decay_length's docstring); checked against the decay of
    # X_ij = (V^{-1/2})_ij/2 in a long chain, X(r) ~ r^{-1/2} e^{-r/xi} (branch point of 1/omega),
    # over r = 20..22, to 2e-3 (the r^{-1/2} form has O(1/r^2) corrections); period-2 masses by the
    # transfer matrix
    for masses in (np.full(800, 0.5), 0.6 + 0.3 * (-1.0) ** np.arange(800)):
        V = mass_matrix(masses)
        xi = decay_length(V)
        if np.all(masses == masses[0]):
            assert 2 * np.sinh(1 / (2 * xi)) == pytest.approx(masses[0], rel=1e-14)
        X, _ = correlations(V)
        c, r = 400, 20
        slope = (np.log(X[c, c + r + 2]) - np.log(X[c, c + r]) + 0.5 * np.log((r + 2) / r)) / 2
        assert -1 / slope == pytest.approx(xi, rel=2e-3)
    with pytest.raises(ValueError, match="massless"):
        decay_length(mass_matrix(np.zeros(10)))
    with pytest.raises(ValueError, match="periodic"):
        decay_length(mass_matrix([0.1, 0.2, 0.3, 0.4, 0.5]))


def test_ground_energy_of_uniform_chain():
    # exact, standard: uniform Dirichlet chain modes sin(pi k j/(L+1)),
    # omega_k^2 = m^2 + 4 sin^2(pi k/(2(L+1)))
    L, m = 50, 0.7
    k = np.arange(1, L + 1)
    assert ground_energy(mass_matrix(np.full(L, m))) == pytest.approx(
        np.sum(np.sqrt(m**2 + 4 * np.sin(np.pi * k / (2 * (L + 1))) ** 2)), rel=1e-14)
    X, P = correlations(mass_matrix(np.full(L, m)))
    assert np.allclose(X @ P, 0.25 * np.eye(L), atol=1e-14)  # pure state


def test_refuses_bad_input():
    with pytest.raises(ValueError, match="in \\[0, 1\\)"):
        resolve_block(np.array([0.2, 1.0]), 2, RENYI, ALPHAS)
    with pytest.raises(ValueError, match="at most"):
        resolve_block(np.array([0.2, 0.1]), 1, RENYI, ALPHAS)
    with pytest.raises(ValueError, match="positive"):
        resolve_block(np.array([0.2]), 1, (0.0,), ALPHAS)
    with pytest.raises(ValueError, match="positive definite"):
        correlations(np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(ValueError, match="window"):
        resolve_all_cuts(mass_matrix(np.ones(4)), [2], RENYI, ALPHAS, window="big")


def test_empty_blocks_are_pure():
    # exact: cuts 0 and L hold the whole pure state or nothing: one sector q = 0, all entropies 0
    for res in resolve_all_cuts(mass_matrix(np.ones(6)), [0, 6], RENYI, ALPHAS):
        assert np.array_equal(res.charges, [0.0]) and res.probability[0] == 1.0
        assert np.allclose(res.entropy, 0.0) and np.allclose(res.sector_entropy, 0.0)
        assert np.allclose(res.moments, 1.0)


def test_all_cuts_of_a_long_chain():
    # every cut of L = 400, m = 0.5 through the batched windows. Exact: the pure state gives
    # S(l) = S(L - l); far from the ends (xi = 2.0) the chain is translation invariant up to
    # e^{-2 * 60/xi}, so the bulk entropies agree to rounding
    L = 400
    records = resolve_all_cuts(mass_matrix(np.full(L, 0.5)), range(L + 1), (1.0, 2.0), ALPHAS)
    s1 = np.array([r.entropy[0] for r in records])
    assert np.ptp(s1[60:341]) < 1e-12
    assert np.allclose(s1, s1[::-1], atol=1e-12, rtol=0)
    assert s1[0] == 0.0 and np.all(s1[1:-1] > 0)
