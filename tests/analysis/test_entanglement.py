"""Charge-resolved entanglement from Schmidt values (mps.analysis.entanglement) against dense references."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, settings
from hypothesis import strategies as st

from mps.analysis.entanglement import (
    JointResolved,
    default_alphas,
    entanglement_spectrum,
    renyi_entropy,
    resolve_chain,
    resolve_cut,
    resolve_cut_joint,
)

RENYI = (0.5, 0.7, 1.0, 1.3, 2.0, 3.0, np.inf)
TOL = 1e-12
DEGENERACY_TOL = 1e-12  # the same n = inf degeneracy rule as resolve_cut's default


# --- random sector spectra ----------------------------------------------------------------------

@st.composite
def spectra(draw, k=None):
    """Random {integer charge vector: Schmidt values} with zeros and empty sectors, k = 1 or 2."""
    k = draw(st.sampled_from([1, 2])) if k is None else k
    keys = draw(st.lists(st.tuples(*[st.integers(-4, 4)] * k), min_size=1, max_size=6,
                         unique=True))
    value = st.one_of(st.just(0.0), st.floats(1e-3, 1.0))
    spec = {key: np.array(draw(st.lists(value, max_size=5)), dtype=float) for key in keys}
    if not any(np.any(v > 0) for v in spec.values()):
        spec[keys[0]] = np.append(spec[keys[0]], 0.5)
    scale = draw(st.sampled_from([1e-3, 1.0, 7.0]))  # the input need not be normalised
    spec = {key: scale * v for key, v in spec.items()}
    units = tuple(draw(st.sampled_from([0.5, 1.0])) for _ in range(k))
    offsets = tuple(draw(st.sampled_from([0.0, 0.5, -1.5])) for _ in range(k))
    return spec, units, offsets


# --- dense reference: the definitions evaluated on the full diagonal rho_A ----------------------

def dense_rho(spec, units, offsets, label):
    """rho_A = diag(s^2)/sum s^2 over all levels, the block charge operator(s), level labels."""
    keys = [key for key, v in spec.items() for _ in v]
    s = np.concatenate([v for v in spec.values()])
    rho = np.diag(s**2 / np.sum(s**2))
    q = np.array([[u * x + o for x, u, o in zip(key, units, offsets)] for key in keys])
    q = q.reshape(len(keys), len(units))
    return rho, q, [label(key) for key in keys]


def dense_power(rho, n):
    """rho^n of a diagonal density matrix, zero eigenvalues kept at zero; n = inf gives the
    normalised projector on the top level(s) (the n -> inf limit of rho^n / Tr rho^n)."""
    d = np.diag(rho)
    if np.isinf(n):
        return np.diag((d >= (1 - DEGENERACY_TOL) * d.max()).astype(float))
    out = np.zeros_like(d)
    out[d > 0] = d[d > 0] ** n
    return np.diag(out)


def dense_entropy(rho, n):
    """S_n of a density matrix from its eigenvalues, with 0 log 0 = 0."""
    ev = np.linalg.eigvalsh(rho)
    ev = ev[ev > 0]
    if n == 1:
        return float(-np.sum(ev * np.log(ev)))
    if np.isinf(n):
        return float(-np.log(ev.max()))
    return float(np.log(np.sum(ev**n)) / (1 - n))


def dense_resolved(spec, units, offsets, label, renyi, fluxes, floor, component=None):
    """p(q), counts, S_n, S_n(q) and Tr[rho^n e^{i flux.Q}]/Tr[rho^n], all from dense matrices;
    Q is charge ``component`` or, if None, the whole charge vector (flux vectors then)."""
    rho, q, labels = dense_rho(spec, units, offsets, label)
    if component is not None:
        q = q[:, [component]]
    sectors = sorted({label(key) for key in spec})
    prob, counts = [], []
    sector_s = np.full((len(renyi), len(sectors)), np.nan)
    for j, sec in enumerate(sectors):
        proj = np.diag([1.0 if lab == sec else 0.0 for lab in labels])
        block = proj @ rho @ proj
        p = float(np.trace(block))
        prob.append(p)
        counts.append(int(np.count_nonzero(np.diag(block) > 0)))
        if p > 0 and p >= floor:
            for i, n in enumerate(renyi):
                sector_s[i, j] = dense_entropy(block / p, n)
    moments = np.zeros((len(renyi), len(fluxes)), complex)
    for i, n in enumerate(renyi):
        rn = dense_power(rho, n)
        for a, flux in enumerate(fluxes):
            phase = scipy.linalg.expm(1j * np.diag(q @ np.atleast_1d(flux)))
            moments[i, a] = np.trace(rn @ phase) / np.trace(rn)
    total = np.array([dense_entropy(rho, n) for n in renyi])
    return sectors, np.array(prob), np.array(counts), total, sector_s, moments


# --- against the dense reference ----------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(data=spectra(), component=st.integers(0, 1), floor=st.sampled_from([0.0, 1e-3]))
def test_resolve_cut_matches_dense_reference(data, component, floor):
    # Reference: direct dense evaluation of the definitions (Goldstein and Sela, PRL 120,
    # 200602, 2018; Xavier, Alcaraz and Sierra, PRB 98, 041106, 2018) on rho_A built in this file.
    spec, units, offsets = data
    c = component % len(units)
    alphas = default_alphas(9)
    rec = resolve_cut(spec, 3, RENYI, alphas, units, offsets, component=c, floor=floor)
    sectors, p, counts, total, sector_s, moments = dense_resolved(
        spec, units, offsets, lambda key: key[c], RENYI, alphas, floor, component=c)
    np.testing.assert_allclose(rec.charges, [units[c] * x + offsets[c] for x in sectors],
                               rtol=0, atol=0)
    np.testing.assert_allclose(rec.probability, p, rtol=0, atol=TOL)
    np.testing.assert_array_equal(rec.counts, counts)
    np.testing.assert_allclose(rec.entropy, total, rtol=0, atol=TOL)
    np.testing.assert_allclose(rec.sector_entropy, sector_s, rtol=0, atol=TOL)  # NaN == NaN
    np.testing.assert_allclose(rec.moments, moments, rtol=0, atol=TOL)
    assert rec.cut == 3 and rec.renyi == tuple(float(n) for n in RENYI) and rec.floor == floor


@settings(max_examples=40, deadline=None)
@given(data=spectra(k=2), fluxes=st.lists(st.tuples(st.floats(-np.pi, np.pi),
                                                    st.floats(-np.pi, np.pi)),
                                          min_size=1, max_size=4))
def test_resolve_cut_joint_matches_dense_reference(data, fluxes):
    # Reference: direct dense evaluation of the definitions with joint projectors (this file).
    spec, units, offsets = data
    f = np.array(fluxes)
    rec = resolve_cut_joint(spec, 2, RENYI, units, offsets, fluxes=f, floor=0.0)
    sectors, p, counts, total, sector_s, moments = dense_resolved(
        spec, units, offsets, lambda key: key, RENYI, f, 0.0)
    assert isinstance(rec, JointResolved) and rec.charges.shape == (len(sectors), 2)
    np.testing.assert_array_equal(
        rec.charges, [[u * x + o for x, u, o in zip(s, units, offsets)] for s in sectors])
    np.testing.assert_allclose(rec.probability, p, rtol=0, atol=TOL)
    np.testing.assert_array_equal(rec.counts, counts)
    np.testing.assert_allclose(rec.entropy, total, rtol=0, atol=TOL)
    np.testing.assert_allclose(rec.sector_entropy, sector_s, rtol=0, atol=TOL)
    np.testing.assert_allclose(rec.moments, moments, rtol=0, atol=TOL)
    # Exact sum rule on joint sectors (Wiseman and Vaccaro, PRL 91, 097902, 2003).
    assert math.isclose(rec.number_entropy + rec.config_entropy, rec.entropy[2], abs_tol=TOL)
    # Marginalising the joint p over charge 1 gives the p resolved by charge 0 (exact).
    one = resolve_cut(spec, 2, (1,), np.zeros(1), units, offsets, component=0, floor=0.0)
    marginal = [p[[k for k, s in enumerate(sectors) if units[0] * s[0] + offsets[0] == q]].sum()
                for q in one.charges]
    np.testing.assert_allclose(one.probability, marginal, rtol=0, atol=TOL)


@settings(max_examples=40, deadline=None)
@given(data=spectra(), levels=st.integers(1, 6))
def test_entanglement_spectrum_matches_dense_reference(data, levels):
    # Reference: eigenvalues of the dense rho_A projected on each sector (this file).
    spec, units, offsets = data
    rho, q, labels = dense_rho(spec, units, offsets, lambda key: key[0])
    expected = []
    for sec in sorted(set(labels)):
        ev = np.sort(np.diag(rho)[[lab == sec for lab in labels]])[::-1]
        ev = ev[ev > 0][:levels]
        expected += [(units[0] * sec + offsets[0], j, -np.log(x)) for j, x in enumerate(ev)]
    rows = entanglement_spectrum(spec, units, offsets, component=0, levels=levels)
    assert [(c, j) for c, j, _ in rows] == [(c, j) for c, j, _ in expected]
    np.testing.assert_allclose([v for *_, v in rows], [v for *_, v in expected], rtol=0,
                               atol=TOL)


# --- exact identities ---------------------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(data=spectra(), component=st.integers(0, 1))
def test_sum_rules(data, component):
    spec, units, offsets = data
    c = component % len(units)
    rec = resolve_cut(spec, 1, (1.0, 2.0), default_alphas(5), units, offsets, c, floor=0.0)
    # sum_q p(q) = 1 and S_1 = S_number + S_config, exact (Lukin et al., Science 364, 256, 2019;
    # Wiseman and Vaccaro, PRL 91, 097902, 2003).
    assert math.isclose(rec.probability.sum(), 1.0, abs_tol=TOL)
    assert math.isclose(rec.number_entropy + rec.config_entropy, rec.entropy[0], abs_tol=TOL)
    # Z_n(0)/Z_n(0) = 1 by definition.
    np.testing.assert_allclose(rec.moments[:, 2], 1.0, rtol=0, atol=TOL)


@settings(max_examples=60, deadline=None)
@given(data=spectra(), component=st.integers(0, 1), extra=st.integers(1, 4))
def test_moments_fourier_invert_to_sector_sums(data, component, extra):
    # Z_n(alpha)/Z_n(0) is the Fourier transform of P_n(q)/sum P_n (Goldstein and Sela, PRL 120,
    # 200602, 2018); on M > (charge range) equally spaced fluxes the discrete inverse transform
    # is exact. P_n(q) = p(q)^n e^{(1-n) S_n(q)} ties it to the record's own p and S_n(q).
    spec, units, offsets = data
    c = component % len(units)
    ints = [key[c] for key in spec]
    lo, m = min(ints), max(ints) - min(ints) + extra
    beta = -np.pi + 2 * np.pi * np.arange(m) / m
    u, o = units[c], offsets[c]
    renyi = (0.5, 1.0, 2.0, 3.0)
    rec = resolve_cut(spec, 1, renyi, beta / u, units, offsets, c, floor=0.0)
    qint = np.rint((rec.charges - o) / u).astype(int)
    for i, n in enumerate(renyi):
        grid = np.arange(lo, lo + m)
        dft = np.exp(-1j * np.outer(grid + o / u, beta)) @ rec.moments[i] / m
        np.testing.assert_allclose(dft.imag, 0.0, rtol=0, atol=TOL)
        recovered = dict(zip(grid, dft.real))
        ok = rec.probability > 0
        pn = np.zeros_like(rec.probability)
        pn[ok] = rec.probability[ok] ** n * np.exp((1 - n) * rec.sector_entropy[i, ok])
        pn /= pn.sum()
        np.testing.assert_allclose([recovered[x] for x in qint], pn, rtol=0, atol=TOL)
        others = [v for x, v in recovered.items() if x not in set(qint)]
        np.testing.assert_allclose(others, 0.0, rtol=0, atol=TOL)


@settings(max_examples=40, deadline=None)
@given(half=st.lists(st.lists(st.floats(1e-3, 1.0), max_size=4), min_size=1, max_size=4),
       centre=st.lists(st.floats(1e-3, 1.0), min_size=1, max_size=4),
       unit=st.sampled_from([0.5, 1.0]))
def test_mirror_symmetric_spectrum(half, centre, unit):
    # q -> -q symmetry of the spectrum makes p(q) and S_n(q) even and Z_n(alpha) real and even
    # (exact: the sum over q pairs e^{i alpha q} with e^{-i alpha q}).
    spec = {(0,): np.array(centre)}
    for j, vals in enumerate(half, start=1):
        spec[(j,)] = spec[(-j,)] = np.array(vals)
    alphas = default_alphas(17)
    rec = resolve_cut(spec, 1, RENYI, np.concatenate([alphas, -alphas]), (unit,), floor=0.0)
    np.testing.assert_array_equal(rec.charges, -rec.charges[::-1])
    np.testing.assert_array_equal(rec.probability, rec.probability[::-1])
    np.testing.assert_array_equal(rec.sector_entropy, rec.sector_entropy[:, ::-1])
    np.testing.assert_allclose(rec.moments.imag, 0.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(rec.moments[:, :17], rec.moments[:, 17:], rtol=0, atol=1e-15)


@settings(max_examples=60, deadline=None)
@given(data=spectra())
def test_renyi_near_one_and_monotonic(data):
    spec, units, offsets = data
    eps = 1e-7
    rec = resolve_cut(spec, 1, (1.0, 1.0 + eps, 1.0 - eps, 2.0, np.inf), np.zeros(1), units,
                      offsets, floor=0.0)
    s1, s_up, s_down, s2, s_inf = rec.entropy
    # Taylor expansion of log sum lambda^n about n = 1 (cumulant generating function of
    # X = log lambda under lambda, exact): S_{1+e} = S_1 - e k2/2 - e^2 k3/6 + O(e^3).
    lam = np.concatenate(list(spec.values())) ** 2
    lam = lam[lam > 0] / lam.sum()
    x = np.log(lam)
    k2 = np.dot(lam, (x - np.dot(lam, x)) ** 2)
    k3 = np.dot(lam, (x - np.dot(lam, x)) ** 3)
    for e, s in ((eps, s_up), (-eps, s_down)):
        assert abs(s - (s1 - e * k2 / 2 - e**2 * k3 / 6)) < TOL * 1e-1
    # Renyi entropies are non-increasing in n (Renyi, Proc. 4th Berkeley Symp., 1961; from
    # memory); 1e-14 absorbs round-off when the spectrum is flat and all three are equal.
    assert s_inf <= s2 + 1e-14 and s2 <= s1 + 1e-14
    ok = ~np.isnan(rec.sector_entropy[0])
    sec = rec.sector_entropy[:, ok]
    assert np.all(sec[4] <= sec[3] + 1e-14) and np.all(sec[3] <= sec[0] + 1e-14)
    assert np.all(np.abs(sec[1] - sec[0]) < 1e-5) and np.all(np.abs(sec[2] - sec[0]) < 1e-5)


def test_renyi_entropy_of_flat_distribution():
    # m equal weights: S_n = log m for every n (exact).
    for n in RENYI:
        assert math.isclose(renyi_entropy(np.full(7, -3.2), n), math.log(7), abs_tol=TOL)


def test_tiny_schmidt_values_do_not_underflow():
    # s = 1e-200 squares to 0 in floating point; the log-weights keep it. Two equal values in
    # two sectors: p = (1/2, 1/2), S_n = log 2 for every n (exact).
    spec = {(1,): np.array([1e-200]), (-1,): np.array([1e-200])}
    rec = resolve_cut(spec, 1, RENYI, default_alphas(5), (0.5,), floor=0.0)
    np.testing.assert_allclose(rec.probability, [0.5, 0.5], rtol=0, atol=TOL)
    np.testing.assert_allclose(rec.entropy, math.log(2), rtol=0, atol=TOL)
    np.testing.assert_allclose(rec.sector_entropy, 0.0, rtol=0, atol=TOL)
    # Z_n(alpha) = cos(alpha/2) for charges +-1/2 with equal weights (exact).
    np.testing.assert_allclose(rec.moments, np.cos(default_alphas(5) / 2)[None, :].repeat(7, 0),
                               rtol=0, atol=TOL)


def test_floor_blanks_small_sectors_and_empty_sectors_are_reported():
    spec = {(0,): np.array([1.0, 0.5]), (2,): np.array([1e-4]), (4,): np.array([]),
            (6,): np.array([0.0, 0.0])}
    rec = resolve_cut(spec, 5, (1.0, 2.0), default_alphas(3), (0.5,), (1.0,), floor=1e-6)
    np.testing.assert_array_equal(rec.charges, [1.0, 2.0, 3.0, 4.0])
    np.testing.assert_array_equal(rec.counts, [2, 1, 0, 0])
    assert rec.probability[1] < 1e-6 and np.all(rec.probability[2:] == 0)
    assert np.all(np.isnan(rec.sector_entropy[:, 1:]))
    assert not np.any(np.isnan(rec.sector_entropy[:, 0]))


def test_default_alphas():
    a = default_alphas(65)
    assert a.shape == (65,) and a[0] == -np.pi and a[-1] == np.pi
    np.testing.assert_allclose(np.diff(a), 2 * np.pi / 64, rtol=0, atol=1e-15)


def test_resolve_chain_applies_offsets_per_cut():
    spec = {(0,): np.array([0.8]), (1,): np.array([0.6])}
    recs = resolve_chain([spec, spec, spec], (1.0,), default_alphas(3), (1.0,),
                         offsets=(0.25,), offset_per_site=(-0.5,))
    assert [r.cut for r in recs] == [1, 2, 3]
    for r in recs:
        np.testing.assert_array_equal(r.charges, np.array([0.0, 1.0]) + 0.25 - 0.5 * r.cut)


# --- refusals -----------------------------------------------------------------------------------

GOOD = {(0,): np.array([0.8, 0.1]), (1,): np.array([0.5])}
BAD_INPUTS = {
    "renyi zero": (dict(renyi=(1.0, 0.0)), "Renyi index must be > 0"),
    "renyi negative": (dict(renyi=(-2.0,)), "Renyi index must be > 0"),
    "renyi nan": (dict(renyi=(np.nan,)), "Renyi index must be > 0"),
    "renyi empty": (dict(renyi=()), "at least one Renyi index"),
    "negative value": (dict(schmidt={(0,): np.array([0.5, -0.1])}), "must be >= 0"),
    "nan value": (dict(schmidt={(0,): np.array([np.nan])}), "must be finite"),
    "all zero": (dict(schmidt={(0,): np.zeros(3), (1,): np.array([])}),
                 "all Schmidt values are zero"),
    "no sectors": (dict(schmidt={}), "non-empty mapping"),
    "2-D values": (dict(schmidt={(0,): np.ones((2, 2))}), "1-D array"),
    "key length": (dict(schmidt={(0, 1): np.ones(2)}), "tuple of 1 integers"),
    "non-integer key": (dict(schmidt={(0.5,): np.ones(2)}), "tuple of 1 integers"),
    "component": (dict(component=1), "component must be in 0..0"),
    "units": (dict(units=(0.0,)), "units must be"),
    "offsets": (dict(offsets=(0.0, 1.0)), "offsets must hold 1"),
    "floor": (dict(floor=-1.0), "floor must be"),
    "alphas": (dict(alphas=np.array([np.inf])), "alphas must be"),
    "cut": (dict(cut=-1), "cut must be"),
}


@pytest.mark.parametrize("name", list(BAD_INPUTS))
def test_bad_input_is_refused(name):
    change, message = BAD_INPUTS[name]
    args = dict(schmidt=GOOD, cut=1, renyi=(1.0,), alphas=default_alphas(3), units=(0.5,))
    args.update(change)
    with pytest.raises(ValueError, match=message):
        resolve_cut(**args)


def test_bad_input_to_spectrum_and_joint_is_refused():
    with pytest.raises(ValueError, match="levels must be"):
        entanglement_spectrum(GOOD, (0.5,), levels=0)
    with pytest.raises(ValueError, match="fluxes must be"):
        resolve_cut_joint(GOOD, 1, (1.0,), (0.5,), fluxes=np.zeros((2, 2)))
    with pytest.raises(ValueError, match="points must be"):
        default_alphas(1)


# --- exact-diagonalisation ground state -----------------------------------------------------------

def test_xxz_ground_state_against_dense_ed_schmidt_values():
    # Reference: exact diagonalisation with scipy.sparse (tests/reference_ed.py), open xxz chain
    # L = 10, Delta = 0.7, h_stag = 0.3, dimer = 0.2, five up spins; S^z_A = N_A - cut/2.
    from reference_ed import ground_state, schmidt_by_sector, xxz_sector

    L = 10
    H, basis = xxz_sector(L, 5, J=1.0, Delta=0.7, h=0.0, h_stag=0.3, dimer=0.2)
    _, vec = ground_state(H)
    alphas = default_alphas(9)
    by_n = [{(round(q),): s for q, s in schmidt_by_sector(vec, basis, L, cut).items()}
            for cut in range(1, L)]
    records = resolve_chain(by_n, RENYI, alphas, (1.0,), offset_per_site=(-0.5,), floor=0.0)
    for cut, rec in zip(range(1, L), records):
        physical = schmidt_by_sector(vec, basis, L, cut, unit=1.0, offset_per_site=-0.5)
        dense = dense_resolved({(q,): s for q, s in physical.items()}, (1.0,), (0.0,),
                               lambda key: key[0], RENYI, alphas, 0.0, component=0)
        sectors, p, counts, total, sector_s, moments = dense
        np.testing.assert_array_equal(rec.charges, sectors)
        np.testing.assert_allclose(rec.probability, p, rtol=0, atol=TOL)
        np.testing.assert_array_equal(rec.counts, counts)
        np.testing.assert_allclose(rec.entropy, total, rtol=0, atol=TOL)
        np.testing.assert_allclose(rec.sector_entropy, sector_s, rtol=0, atol=TOL)
        np.testing.assert_allclose(rec.moments, moments, rtol=0, atol=TOL)
    # The same cut with the charge stored as the integer 2 S^z_A (unit 1/2), as a spin MPS does.
    cut = 5
    twice = {(round(2 * q),): s for q, s in
             schmidt_by_sector(vec, basis, L, cut, unit=1.0, offset_per_site=-0.5).items()}
    rec = resolve_cut(twice, cut, RENYI, alphas, (0.5,), floor=0.0)
    np.testing.assert_array_equal(rec.charges, records[cut - 1].charges)
    np.testing.assert_allclose(rec.sector_entropy, records[cut - 1].sector_entropy, rtol=0,
                               atol=TOL)
    np.testing.assert_allclose(rec.moments, records[cut - 1].moments, rtol=0, atol=TOL)
