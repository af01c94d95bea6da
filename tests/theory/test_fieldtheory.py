"""Checks of the field-theory forms and fits (mps/theory/fieldtheory.py).

Synthetic data are generated from the forms themselves (Calabrese and Cardy, J. Stat. Mech. (2004)
P06002, with the open-chain parity term of Calabrese, Campostrini, Essler and Nienhuis, PRL 104,
095701 (2010)); the lattice checks use the exact free-fermion engine (Peschel, J. Phys. A 36, L205
(2003)) on long open chains, whose c = 1 and K = 1 are exact for free fermions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import trapezoid
from scipy.special import xlogy

from models import get_family
from mps.theory.fieldtheory import (
    charge_variance_open,
    chord_length,
    default_window,
    equipartition,
    fit_central_charge,
    fit_charged_moment,
    fit_luttinger,
    gaussian_distance,
    gaussian_probability,
    log_charged_moment,
    luttinger_bethe_ansatz,
    renyi_entropy_open,
    resolved_entropy_leading,
    resolved_shift,
)
from mps.theory.freefermions import block_occupations, correlation_matrix, resolve_block


# ----------------------------------------------------------------------------- forms
def test_chord_length_limits():
    # Calabrese and Cardy (2004): l_eff -> 2l for l << L, 2L/pi at mid-chain, symmetric in l <-> L - l
    L = 1000
    assert chord_length(1, L) == pytest.approx(2.0, rel=1e-5)
    assert chord_length(L // 2, L) == pytest.approx(2 * L / np.pi, rel=1e-12)
    assert chord_length(300, L) == pytest.approx(chord_length(700, L), rel=1e-12)


@pytest.mark.parametrize("delta, K", [(0.0, 1.0), (0.5, 0.75), (1.0, 0.5)])
def test_bethe_ansatz_luttinger(delta, K):
    # Luther and Peschel, PRB 12, 3908 (1975): K = pi/(2(pi - arccos Delta)); values from the formula
    assert luttinger_bethe_ansatz(delta) == pytest.approx(K, rel=1e-14)


@pytest.mark.parametrize("delta", [-1.0, 1.5, -3.0])
def test_bethe_ansatz_refuses_gapped_delta(delta):
    # the formula holds on the critical line -1 < Delta <= 1 only (Luther and Peschel 1975)
    with pytest.raises(ValueError, match="Delta"):
        luttinger_bethe_ansatz(delta)


def test_resolved_shift_limits():
    # S_n(q) = S_n - 1/2 log(2 pi sigma^2) + log(n)/(2(1-n)) (Goldstein and Sela, PRL 120, 200602
    # (2018)): the shift tends to -1/2 as n -> 1 and to 0 as n -> inf
    for eps in (1e-3, 1e-5):
        assert resolved_shift(1.0 + eps) == pytest.approx(-0.5, abs=eps)
        assert resolved_shift(1.0 - eps) == pytest.approx(-0.5, abs=eps)
    assert resolved_shift(1.0) == -0.5
    assert resolved_shift(math.inf) == 0.0
    assert abs(resolved_shift(1e12)) < 1e-10
    assert resolved_shift(2.0) == pytest.approx(-0.5 * math.log(2.0), rel=1e-14)


def test_leading_resolved_entropy_from_gaussian_moments():
    # Goldstein and Sela (2018): the Fourier transform of Z_n(alpha) = Z_n(0) exp(-alpha^2 sigma^2/(2n))
    # gives a q-independent S_n(q); the transform is done numerically over the whole alpha line
    sigma2 = 0.9
    a = np.linspace(-30.0, 30.0, 60001)

    def z(n, Sn, q):   # Z_n(q) with log Z_n(0) = (1 - n) S_n
        w = np.exp(log_charged_moment(a, sigma2, n) - 1j * a * q)
        return float(np.real(trapezoid(w, a))) / (2 * np.pi) * np.exp((1 - n) * Sn)

    for n, Sn in ((2.0, 1.3), (3.0, 1.2), (0.5, 2.1)):
        for q in (0.0, 0.7, 1.5):
            numeric = math.log(z(n, Sn, q) / z(1.0, 0.0, q) ** n) / (1 - n)
            assert numeric == pytest.approx(resolved_entropy_leading(Sn, sigma2, n), abs=1e-9)


def test_charged_moment_matches_luttinger_form():
    # Goldstein and Sela (2018): log Z_n(alpha)/Z_n(0) = -(K/n)(alpha/2pi)^2 log l_eff per entangling
    # point, with sigma^2 = (K/(2 pi^2)) log l_eff (DESIGN.md section 5)
    K, n, L, l = 0.75, 2.0, 200, 70
    a = np.linspace(-np.pi, np.pi, 11)
    var = charge_variance_open(l, L, K)
    expect = -(K / n) * (a / (2 * np.pi)) ** 2 * np.log(chord_length(l, L))
    assert np.allclose(log_charged_moment(a, var, n), expect, atol=1e-14)
    assert np.all(log_charged_moment(a, var, math.inf) == 0.0)


def test_gaussian_probability_normalised_on_lattice():
    # Poisson summation (exact identity): a Gaussian of variance sigma^2 on a unit lattice sums to
    # 1 + 2 sum_k exp(-2 pi^2 sigma^2 k^2) cos(2 pi k shift), within 2.01 exp(-2 pi^2 sigma^2) of 1 here
    q = np.arange(-40, 41) + 0.5
    for var in (0.5, 1.0, 3.0):
        bound = 2.01 * np.exp(-2 * np.pi**2 * var)
        assert gaussian_probability(q, 0.3, var).sum() == pytest.approx(1.0, abs=bound)


# ----------------------------------------------------------------------------- fits on synthetic data
@pytest.mark.parametrize("n, K_given",
                         [(1.0, True), (1.0, False), (2.0, False), (3.0, True), (math.inf, True)])
def test_fit_central_charge_recovers_parameters(n, K_given):
    # synthetic S_n(l) from the Calabrese-Cardy form with the parity term of Calabrese, Campostrini,
    # Essler and Nienhuis (2010); the fit must return the generating c, const and amplitude
    L, c, const, amp, K = 160, 1.3, 0.41, -0.37, 0.8
    cuts = np.arange(1, L)
    S = renyi_entropy_open(cuts, L, c, n, const, amp, K)
    fit = fit_central_charge(cuts, S, L, n, K=K if K_given else None)
    assert fit.value == pytest.approx(c, rel=1e-6)
    assert fit.const == pytest.approx(const, abs=1e-6)
    assert fit.alternating == pytest.approx(amp, rel=1e-5)
    assert fit.exponent == pytest.approx(0.0 if math.isinf(n) else K / n, abs=1e-4)
    assert fit.exponent_fitted is not K_given
    assert fit.residual_rms < 1e-8
    assert fit.window == default_window(L) and fit.points == 7 * L // 8 - L // 8 + 1


def test_fit_luttinger_recovers_parameters_on_window():
    # synthetic sigma^2(l) = (K/(2 pi^2)) log l_eff + const + A (-1)^l l_eff^(-p) (DESIGN.md section 5);
    # cuts outside the window carry garbage that must not enter the fit
    L, K, const, amp, p = 96, 0.75, 0.11, -0.2, 0.6
    cuts = np.arange(1, L)
    var = charge_variance_open(cuts, L, K, const, amp, p)
    window = (20, 70)
    var[(cuts < window[0]) | (cuts > window[1])] += 5.0
    fit = fit_luttinger(cuts, var, L, window)
    assert fit.value == pytest.approx(K, rel=1e-6)
    assert fit.const == pytest.approx(const, abs=1e-7)
    assert fit.exponent == pytest.approx(p, abs=1e-4)
    assert fit.window == window and fit.points == 51


def test_fit_refuses_a_window_without_data():
    with pytest.raises(ValueError, match="window"):
        fit_luttinger(np.arange(1, 20), np.ones(19), 20, window=(5, 7))


def test_equipartition_slope_and_spread():
    # S_n(q) = a + b (q - <q>)^2 exactly: the fitted slope is b and the spread is b times the
    # range of (q - <q>)^2 over the sectors above the threshold (definition)
    q = np.arange(-4, 5).astype(float)
    p = np.exp(-(q**2) / 2.0)
    p /= p.sum()
    a, b = 1.1, -0.03
    s = a + b * q**2
    fig = equipartition(q, p, s, threshold=1e-3)
    kept = p > 1e-3
    assert fig.sectors == kept.sum()
    assert fig.slope == pytest.approx(b, rel=1e-10) and fig.intercept == pytest.approx(a, rel=1e-12)
    assert fig.spread == pytest.approx(abs(b) * (q[kept] ** 2).max(), rel=1e-10)


def test_gaussian_distance():
    # a lattice Gaussian is at distance 0 from itself (definition)
    q = np.arange(-30, 31).astype(float)
    g = np.exp(-((q - 0.2) ** 2) / (2 * 2.0))
    g /= g.sum()
    d = gaussian_distance(q, g)
    assert d.max_abs < 1e-14 and d.total_variation < 1e-13
    assert d.variance == pytest.approx(2.0, rel=1e-12)
    # p(0) = p(1) = 1/2 has mean 1/2 and variance 1/4; its lattice Gaussian is w_k = exp(-2 (k - 1/2)^2)/Z
    # on every integer k, so the total variation is (1/2)(sum_{k=0,1} |1/2 - w_k| + sum_{other k} w_k)
    k = np.arange(-40, 42)
    w = np.exp(-2.0 * (k - 0.5) ** 2)
    w /= w.sum()
    inside = np.isin(k, (0, 1))
    tv = 0.5 * (np.abs(0.5 - w[inside]).sum() + w[~inside].sum())
    two = gaussian_distance(np.array([0.0, 1.0]), np.array([0.5, 0.5]))
    assert two.total_variation == pytest.approx(tv, rel=1e-12)
    assert two.max_abs == pytest.approx(np.abs(0.5 - w[inside]).max(), rel=1e-12)


def test_fit_charged_moment_gaussian():
    # Gaussian moments Z_n(alpha)/Z_n(0) = exp(i alpha mu - alpha^2 sigma^2/(2n)) (Goldstein and Sela
    # 2018): the fitted width is sigma^2/n exactly
    a = np.linspace(-np.pi, np.pi, 65)
    for n in (1.0, 2.0, 3.0):
        z = np.exp(1j * a * 3.5 + log_charged_moment(a, 0.42, n))
        fit = fit_charged_moment(a, z, n, alpha_max=1.0)
        assert fit.sigma_sq == pytest.approx(0.42 / n, rel=1e-12)
        assert fit.residual_rms < 1e-14 and fit.points == 20


# ----------------------------------------------------------------------------- exact lattice free fermions
def half_filled_correlations(L: int) -> np.ndarray:
    """C_ij = <c+_i c_j> of free fermions (hopping -1) on an open chain of even L at half filling.

    Exact, standard: the orbitals sqrt(2/(L+1)) sin(pi k j/(L+1)) with energies -2 cos(pi k/(L+1)),
    k = 1..N = L/2 filled, give C_ij = [D(i - j) - D(i + j)]/(L + 1) with the Dirichlet sum
    D(m) = sum_{k=1}^N cos(pi k m/(L+1)) = [sin((N + 1/2) t) - sin(t/2)]/(2 sin(t/2)), t = pi m/(L+1).
    O(L^2), so chains of thousands of sites cost nothing to set up.
    """
    N = L // 2
    j = np.arange(1, L + 1)

    def dirichlet(m):
        t = np.pi * m / (L + 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = (np.sin((N + 0.5) * t) - np.sin(t / 2)) / (2 * np.sin(t / 2))
        return np.where(m == 0, float(N), d)

    return (dirichlet(j[:, None] - j[None, :]) - dirichlet(j[:, None] + j[None, :])) / (L + 1)


def test_half_filled_correlations_match_engine():
    # the closed form above against the engine's diagonalisation of the fermions family (t = 1)
    L = 40
    h, _, _ = get_family("fermions").single_particle(L, {"t": 1.0})
    assert np.allclose(half_filled_correlations(L), correlation_matrix(h, L // 2), atol=1e-12)


def test_fits_on_exact_xx_chain():
    # exact free-fermion engine (Peschel 2003), XX chain of 400 sites: c = 1 and K = 1 are exact
    # (free Dirac fermion; Luther and Peschel 1975 at Delta = 0); fits on the window within 2 %
    L = 400
    C = half_filled_correlations(L)   # XX chain = free fermions; the hopping sign is a gauge choice
    lo, hi = default_window(L)
    cuts = np.arange(lo, hi + 1)
    nus = [block_occupations(C, l) for l in cuts]
    S1 = np.array([-np.sum(xlogy(nu, nu) + xlogy(1 - nu, 1 - nu)) for nu in nus])
    var = np.array([np.sum(nu * (1 - nu)) for nu in nus])   # Var N_A of a Gaussian state
    c_fit = fit_central_charge(cuts, S1, L)
    K_fit = fit_luttinger(cuts, var, L)
    assert c_fit.value == pytest.approx(1.0, rel=0.02)
    assert K_fit.value == pytest.approx(1.0, rel=0.02)
    # the parity term of S_1 decays with exponent K/n = 1 (Calabrese, Campostrini, Essler and
    # Nienhuis 2010; Fagotti and Calabrese, J. Stat. Mech. (2011) P01017 for the XX chain)
    assert c_fit.exponent == pytest.approx(1.0, rel=0.05)


@pytest.fixture(scope="module")
def half_filled_chain_2000():
    """Correlation matrix of free fermions (t = 1) on an open chain of 2000 sites at half filling."""
    return half_filled_correlations(2000)


@pytest.mark.parametrize("n, blocks", [
    # n = 1: below l ~ 100 the difference still grows (its O(1/log^2 l) part dominates), so the
    # asymptotic decrease is checked beyond; n = 2 and n = inf decrease from small blocks on
    (1.0, (128, 256, 512, 1000)),
    (2.0, (8, 32, 128, 512, 1000)),
    (math.inf, (8, 32, 128, 512, 1000)),
])
def test_leading_resolved_entropy_approached_on_exact_chain(half_filled_chain_2000, n, blocks):
    # Goldstein and Sela (2018); Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019):
    # S_n(<q>) - [S_n - 1/2 log(2 pi sigma^2) + log n/(2(1 - n))] -> 0 as the block grows, with sigma^2
    # the exact block variance; free fermions, open chain of 2000 sites at half filling, even blocks
    # (so that <q> = l/2 is a sector), exact engine (Peschel 2003)
    C = half_filled_chain_2000
    gaps = []
    for l in blocks:
        r = resolve_block(block_occupations(C, l), l, (n,), np.zeros(1))
        mean = r.cumulant(1)
        i = int(np.argmin(np.abs(r.charges - mean)))
        assert r.charges[i] == pytest.approx(mean, abs=1e-9)
        gaps.append(abs(r.sector_entropy[0, i] - resolved_entropy_leading(r.entropy[0], r.cumulant(2), n)))
    assert all(b < a for a, b in zip(gaps, gaps[1:])), gaps
