"""Checks of the windowed block spectra (mps/theory/cutwindow.py) and of their use in
mps/theory/freefermions.py (block_spectra, resolve_all_cuts with window="auto").

References: the full-block correlation-matrix method of Peschel, J. Phys. A 36, L205 (2003)
(eigvalsh of every block); the projector identity C_A (1 - C_A) = C_AB C_BA of a Slater
determinant (exact, from C^2 = C); Weyl's inequality for singular values (Horn and Johnson,
Matrix Analysis, 1985, from memory); dense ``numpy.linalg.eigh`` as the reference library for
the correlation matrix.

What limits the comparison with the full block: eigvalsh gives every block occupation only to
an absolute ~1e-14 at these sizes (measured |nu_window - nu_full| <= 4e-14), and that error
enters S_1 through -nu log nu and S_n(q) of a sector through 1/p(q) (measured |Delta S_1| up to
6e-12, |Delta S_1(q)| p(q) up to 4e-12). A 40-digit mpmath evaluation of one block (L = 60,
staggered, done once while writing this module, not a test) put the windowed occupation
2.4e-15 at a relative error 3e-10 and the eigvalsh one at 4e-2. So p(q), the charged moments,
S_2, S_3, S_inf and the occupations are compared with the full block at 1e-12, and every field
(S_1, and S_n(q) of all sectors above the floor at 1e-12 + eps/p(q), its conditioning) with the
same projector method on the whole of C_AB (window = L), which isolates the error of the window.
"""

from __future__ import annotations

import numpy as np
import pytest

from mps.theory.cutwindow import (
    choose_window,
    decay_profile,
    window_bound,
    windowed_occupations,
    windowed_spectra,
)
from mps.theory.freefermions import (
    block_occupations,
    block_spectra,
    correlation_matrix,
    resolve_all_cuts,
    resolve_block,
    resolve_correlation_cuts,
)

RENYI = (1.0, 2.0, 3.0, np.inf)
ALPHAS = np.linspace(-np.pi, np.pi, 13)
L = 300


def hopping(L: int, t=1.0, mu_stag=0.0, dimer=0.0, period3=0.0) -> np.ndarray:
    """H = -sum t_j (c+_j c_j+1 + h.c.) - sum mu_j n_j with t_j = t(1 + dimer (-1)^j) and
    mu_j = mu_stag (-1)^j + period3 cos(2 pi j / 3) (fermions family, DESIGN.md section 3, plus
    a period-3 potential that makes filling 1/3 a band insulator)."""
    j = np.arange(L)
    h = np.diag(-(mu_stag * (-1.0) ** j + period3 * np.cos(2 * np.pi * j / 3)))
    b = np.arange(L - 1)
    h[b, b + 1] = h[b + 1, b] = -t * (1.0 + dimer * (-1.0) ** b)
    return h


def mirrored(L: int, mu_stag: float) -> np.ndarray:
    """Two decoupled staggered chains on the even and odd sites, the second with h -> -h.

    At half filling the second chain's block modes are 1 - nu of the first's (particle-hole
    conjugate, exact), so for even cuts every nu comes with a 1 - nu of equal singular value:
    this exercises the clusters of step 2 of the window algorithm. Not tridiagonal (dense eigh)."""
    h1 = hopping(L // 2, mu_stag=mu_stag)
    h = np.zeros((L, L))
    h[0::2, 0::2], h[1::2, 1::2] = h1, -h1
    return h


GAPPED = {
    "staggered": lambda: (hopping(L, mu_stag=0.5), L // 2),
    "dimerised": lambda: (hopping(L, dimer=0.4), L // 2),
    "period-3-filling-third": lambda: (hopping(L, period3=1.0), L // 3),
    "mirrored-pairs": lambda: (mirrored(L, 1.2), L // 2),
}


@pytest.fixture(scope="module", params=list(GAPPED))
def gapped(request):
    h, n = GAPPED[request.param]()
    C = correlation_matrix(h, n)
    cuts = list(range(L + 1))
    window, full, whole = (resolve_correlation_cuts(C, cuts, RENYI, ALPHAS, window=w) for w in ("auto", None, L))
    return dict(name=request.param, C=C, window=window, full=full, whole=whole)


def _compare(a, b, what: dict[str, bool], tol: float) -> None:
    """a, b: CutResolved lists over the same cuts; sectors missing on one side count as p = 0."""
    for x, y in zip(a, b):
        assert x.cut == y.cut
        px, py = dict(zip(x.charges.tolist(), x.probability)), dict(zip(y.charges.tolist(), y.probability))
        for q in set(px) | set(py):
            assert abs(px.get(q, 0.0) - py.get(q, 0.0)) <= tol, (x.cut, q)
        finite = np.isfinite(RENYI)
        # at n = inf the moment keeps only the largest level, whose parity jumps where a mode sits
        # at nu = 1/2 (a strong dimer bond across the cut): finite n only, as in exact_check
        assert np.allclose(x.moments[finite], y.moments[finite], atol=tol, rtol=0), x.cut
        for r, n in enumerate(RENYI):
            if what["totals"] or n != 1.0:
                assert abs(x.entropy[r] - y.entropy[r]) <= tol, (x.cut, n)
        if what["sectors"]:
            # S_n(q) is conditioned as 1/p(q): occupations that differ by rounding move it by
            # ~eps/p(q) (as in test_freefermions), which matters only for the rarest sectors
            sy = {q: y.sector_entropy[:, i] for i, q in enumerate(y.charges.tolist())}
            for i, q in enumerate(x.charges.tolist()):
                p = x.probability[i]
                if p >= x.floor:
                    assert np.allclose(x.sector_entropy[:, i], sy[q], atol=tol + 1e-16 / p, rtol=0), (x.cut, q)


def test_window_is_used_on_gapped_chains(gapped):
    # the checks below would be vacuous if "auto" fell back to full blocks
    chosen = choose_window(gapped["C"])
    assert chosen is not None and chosen.width < L // 2
    _, used = block_spectra(gapped["C"], [L // 2])
    assert used == chosen


def test_window_spectra_match_full_blocks(gapped):
    # full-block method (Peschel, J. Phys. A 36, L205 (2003)): every cut, occupations to 1e-12
    C = gapped["C"]
    spectra, _ = block_spectra(C, range(L + 1))
    for cut, nu in enumerate(spectra):
        assert nu.shape == (cut,) and np.all(np.diff(nu) >= 0)
        assert np.allclose(nu, block_occupations(C, cut), atol=1e-12, rtol=0), cut


def test_window_records_match_full_blocks(gapped):
    # full-block method (Peschel 2003): p(q), finite-n charged moments and S_2, S_3, S_inf at
    # 1e-12 for every cut; S_1 and S_n(q) are limited by the full block's own occupations (see
    # the module docstring) and are checked in the next test
    _compare(gapped["window"], gapped["full"], dict(totals=False, sectors=False), tol=1e-12)


def test_window_records_match_whole_off_diagonal_block(gapped):
    # projector identity C_A(1 - C_A) = C_AB C_BA (exact) on the whole C_AB: every field at 1e-12,
    # S_n(q) at 1e-12 + eps/p(q)
    _compare(gapped["window"], gapped["whole"], dict(totals=True, sectors=True), tol=1e-12)


def test_window_singular_values_obey_weyl_bound(gapped):
    # Weyl's inequality for singular values (Horn and Johnson 1985, from memory): the window's
    # s_k differ from those of the whole C_AB by at most ||neglected part||_2 <= B(w); plus the
    # rounding of two SVDs (~1e-15)
    C = gapped["C"]
    chosen = choose_window(C)
    assert chosen.bound == pytest.approx(window_bound(decay_profile(C), chosen.width))
    w = chosen.width
    for cut in range(1, L, 7):
        whole = np.linalg.svd(C[:cut, cut:], compute_uv=False)
        part = np.linalg.svd(C[max(0, cut - w) : cut, cut : cut + w], compute_uv=False)
        k = part.size
        assert np.all(np.abs(whole[:k] - part) <= chosen.bound + 1e-15), cut
        assert np.all(whole[k:] <= chosen.bound + 1e-15), cut


def test_critical_chain_falls_back_to_full_blocks():
    # uniform hopping is critical (C_ij ~ 1/|i - j|, Peschel 2003): no window, and the auto
    # records are those of the full blocks, bit for bit
    h, n = hopping(120), 60
    C = correlation_matrix(h, n)
    assert choose_window(C) is None
    auto = resolve_all_cuts(h, n, range(121), RENYI, ALPHAS)
    full = resolve_all_cuts(h, n, range(121), RENYI, ALPHAS, window=None)
    for a, b in zip(auto, full):
        for field in ("charges", "probability", "counts", "entropy", "sector_entropy", "moments"):
            assert np.array_equal(getattr(a, field), getattr(b, field), equal_nan=True), (a.cut, field)


@pytest.mark.parametrize("seed", [0, 1])
def test_exact_zero_and_one_modes_only_shift_the_charge(seed):
    # exact identity (Peschel 2003): a mode with nu = 1 is occupied in every level with weight 1,
    # so it adds one particle (q -> q + unit, moments times e^{i alpha unit}); nu = 0 changes
    # nothing. Counts are binomial(m, .) of the m non-trivial modes either way.
    rng = np.random.default_rng(seed)
    inner = rng.uniform(0.01, 0.99, size=9)
    ones, zeros = 3, 4
    nu = np.sort(np.concatenate([inner, np.ones(ones), np.zeros(zeros)]))
    unit, offset = -1.0, 2.5
    renyi = (0.5, 1.0, 2.0, 3.0, np.inf)
    a = resolve_block(nu, nu.size, renyi, ALPHAS, unit=unit, offset=offset, floor=0.0)
    b = resolve_block(np.sort(inner), inner.size, renyi, ALPHAS, unit=unit, offset=offset, floor=0.0)
    assert np.allclose(a.charges, b.charges + unit * ones, atol=0)
    assert np.allclose(a.probability, b.probability, atol=1e-15, rtol=0)
    assert np.array_equal(a.counts, b.counts)
    assert np.allclose(a.entropy, b.entropy, atol=1e-14, rtol=0)
    assert np.allclose(a.sector_entropy, b.sector_entropy, atol=1e-13, rtol=0)
    assert np.allclose(a.moments, b.moments * np.exp(1j * ALPHAS * unit * ones), atol=1e-14, rtol=0)


def test_tridiagonal_correlation_matrix_matches_dense_eigh():
    # reference library: dense numpy.linalg.eigh of h, lowest n orbitals; C a projector of trace n
    h, n = hopping(L, mu_stag=0.3, dimer=0.2), 140
    _, U = np.linalg.eigh(h)
    ref = U[:, :n] @ U[:, :n].T
    C = correlation_matrix(h, n)
    assert np.allclose(C, ref, atol=1e-13, rtol=0)
    assert np.allclose(C @ C, C, atol=1e-13, rtol=0)
    assert np.trace(C) == pytest.approx(n, abs=1e-12)


def test_block_occupations_window_argument():
    # default unchanged (full block, Peschel 2003); an integer or "auto" window gives the same
    # occupations to 1e-12 on a gapped chain; anything else is refused
    C = correlation_matrix(hopping(120, mu_stag=0.6), 60)
    width = choose_window(C).width
    for cut in (1, 37, 60, 119):
        full = block_occupations(C, cut)
        assert np.array_equal(full, np.clip(np.linalg.eigvalsh(C[:cut, :cut]), 0.0, 1.0))
        for window in (width, "auto"):
            assert np.allclose(block_occupations(C, cut, window), full, atol=1e-12, rtol=0)
    with pytest.raises(ValueError, match="window"):
        block_occupations(C, 5, "wide")
    with pytest.raises(ValueError, match="width"):
        windowed_occupations(C, 5, 0)


def test_window_refuses_a_correlation_matrix_that_is_no_projector():
    # the integer check (Tr C_A - sum nu must be an integer for a projector) catches a mixed
    # state (C = P/2 is not a projector); block_occupations then falls back to the full block
    C = correlation_matrix(hopping(60, mu_stag=0.6), 30) / 2
    width = 20
    assert windowed_occupations(C, 30, width) is None
    assert np.array_equal(block_occupations(C, 30, width), block_occupations(C, 30))


def _count_computed(monkeypatch) -> list[int]:
    """Counts the windows that windowed_spectra really decomposes (the others are repeats)."""
    from mps.theory import cutwindow

    calls, original = [0], cutwindow._window_modes

    def counting(*args):
        calls[0] += 1
        return original(*args)

    monkeypatch.setattr(cutwindow, "_window_modes", counting)
    return calls


@pytest.mark.parametrize("case", ["periodic", "curved", "disordered"])
def test_repeated_windows_reuse_spectra(monkeypatch, case):
    # windowed_spectra reuses the modes of a window that repeats another to 1e-13 in Frobenius
    # norm (Weyl: s_k move by at most that much). Reference: each window decomposed on its own
    # (max_period=0) and the full block (Peschel 2003), occupations to 1e-12 on every cut.
    # "curved": a potential 1e-14 j^2 changes the windows slowly along the chain; the changes
    # must not accumulate (repeats are always compared with a window that was decomposed), so
    # only part of the windows are reused. A disordered chain has no repeats.
    n_sites = 500
    h = hopping(n_sites, mu_stag=1.5)
    if case == "curved":
        h -= np.diag(1e-14 * np.arange(n_sites) ** 2)
    elif case == "disordered":
        h += np.diag(np.random.default_rng(4).uniform(-0.3, 0.3, n_sites))
    C = correlation_matrix(h, n_sites // 2)
    width = choose_window(C).width
    cuts = list(range(n_sites + 1))
    calls = _count_computed(monkeypatch)
    reused = windowed_spectra(C, cuts, width)
    computed = calls[0]
    alone = windowed_spectra(C, cuts, width, max_period=0)
    assert calls[0] - computed == len(cuts)
    expected = {"periodic": computed < len(cuts) // 3, "curved": len(cuts) // 3 < computed < len(cuts),
                "disordered": computed == len(cuts)}
    assert expected[case], computed
    for cut, a, b in zip(cuts, reused, alone):
        assert np.allclose(a, b, atol=1e-12, rtol=0), cut
        assert np.allclose(a, block_occupations(C, cut), atol=1e-12, rtol=0), cut
