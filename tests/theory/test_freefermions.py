"""Checks of the exact lattice free-fermion engine (mps/theory/freefermions.py).

References: exact diagonalisation with scipy.sparse (tests/reference_ed.py, no project code);
brute-force enumeration of the product spectrum of Peschel, J. Phys. A 36, L205 (2003);
the product formula of Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019).
"""

from __future__ import annotations

from itertools import product

import numpy as np
import pytest

from mps.analysis.resolved import CutResolved
from mps.theory.freefermions import (
    block_occupations,
    charge_correlations,
    correlation_matrix,
    resolve_all_cuts,
    resolve_block,
)

from reference_ed import (
    block_charge_correlations,
    fermion_sector,
    ground_state,
    quadratic_fermion_sector,
    resolved_from_schmidt,
    schmidt_by_sector,
    xxz_sector,
)

RENYI = (0.5, 1.0, 2.0, 3.0, np.inf)
# n < 1 amplifies levels near zero (d lambda^n ~ eps^n), so it is not compared with ED
RENYI_ED = (1.0, 2.0, 3.0, np.inf)
ALPHAS = np.linspace(-np.pi, np.pi, 13)
WELL_CONDITIONED = 1e-4  # p(q) above which sector entropies are compared at 1e-9 (see below)


def fermion_hopping(L: int, t=1.0, mu=0.0, mu_stag=0.0, dimer=0.0) -> np.ndarray:
    """Single-particle matrix of the fermions family (DESIGN.md section 3), H = sum h_ij c+_i c_j."""
    j = np.arange(L - 1)
    tb = t * (1.0 + dimer * (-1.0) ** j)
    h = np.diag(-(mu + mu_stag * (-1.0) ** np.arange(L))).astype(float)
    h[j, j + 1] = h[j + 1, j] = -tb
    return h


def _fermion_case(L, n, **kw):
    H, basis = fermion_sector(L, n, **kw)
    return H, basis, fermion_hopping(L, **kw), n, 0.0, 0.0


def _xx_spin_case(L, n_up, J, h, h_stag, dimer):
    # Jordan-Wigner (DESIGN.md section 5): hopping +J_j/2 (gauge choice), potential (h + h_stag (-1)^j) n_j,
    # and S^z_A = N_A - cut/2 (unit 1, offset -1/2 per site); energy constant -sum_j field_j / 2
    H, basis = xxz_sector(L, n_up, J=J, Delta=0.0, h=h, h_stag=h_stag, dimer=dimer)
    j = np.arange(L - 1)
    field = h + h_stag * (-1.0) ** np.arange(L)
    hsp = np.diag(field)
    hsp[j, j + 1] = hsp[j + 1, j] = J * (1.0 + dimer * (-1.0) ** j) / 2
    return H, basis, hsp, n_up, -0.5, -0.5 * field.sum()


def _long_range_case(L, n, seed):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(L, L)) + 1j * rng.normal(size=(L, L))
    hsp = (a + a.conj().T) / 2
    H, basis = quadratic_fermion_sector(hsp, n)
    return H, basis, hsp, n, 0.0, 0.0


CHAINS = {
    "uniform": lambda: _fermion_case(12, 6),
    "uniform-odd": lambda: _fermion_case(11, 4),
    "dimerised": lambda: _fermion_case(12, 6, dimer=0.4),
    "staggered": lambda: _fermion_case(12, 5, mu=0.1, mu_stag=0.6),
    "xx-spins-field": lambda: _xx_spin_case(10, 4, 1.0, 0.2, 0.3, 0.2),
    "long-range-complex": lambda: _long_range_case(9, 4, seed=3),
}


@pytest.fixture(scope="module", params=list(CHAINS))
def chain(request):
    H, basis, hsp, n, offset, const = CHAINS[request.param]()
    energy, vec = ground_state(H, dense_limit=300)
    return dict(basis=basis, hsp=hsp, n=n, offset=offset, const=const, energy=energy, vec=vec, L=hsp.shape[0])


def _by_charge(charges, values, q):
    idx = np.nonzero(np.isclose(charges, q, atol=1e-12))[0]
    return values[..., idx[0]] if idx.size else None


def test_engine_matches_exact_diagonalisation(chain):
    # exact diagonalisation with scipy.sparse: every cut, every sector.
    # p(q) to 1e-10 (sectors absent on one side count as p = 0); moments to 1e-10; total S_n to
    # 1e-9; S_n(q) to 1e-9 where p(q) >= 1e-4. Below that the engine's block occupations carry
    # absolute errors ~eps (eigvalsh of C_A), which enter the levels linearly, so S_n(q) is
    # conditioned as ~eps log(1/eps)/p(q) (measured: |error| * p <= 8e-15 here); there the
    # check is |error| <= 1e-9 + 1e-13/p(q). The ED side is better conditioned (~eps/sqrt(p)).
    L = chain["L"]
    results = resolve_all_cuts(
        chain["hsp"], chain["n"], range(L + 1), RENYI_ED, ALPHAS, unit=1.0, offset_per_site=chain["offset"]
    )
    for cut, res in enumerate(results):
        assert isinstance(res, CutResolved) and res.cut == cut
        sectors = schmidt_by_sector(chain["vec"], chain["basis"], L, cut, 1.0, chain["offset"])
        ref = resolved_from_schmidt(sectors, list(RENYI_ED), ALPHAS)
        for q in np.union1d(res.charges, ref["charges"]):
            p_eng = _by_charge(res.charges, res.probability, q)
            p_ref = _by_charge(ref["charges"], ref["probability"], q)
            assert (p_eng or 0.0) == pytest.approx(p_ref or 0.0, abs=1e-10), (cut, q)
            if p_ref is None or p_eng is None or p_eng < res.floor:
                continue
            s_eng = _by_charge(res.charges, res.sector_entropy, q)
            s_ref = _by_charge(ref["charges"], ref["sector_entropy"], q)
            tol = 1e-9 if p_ref >= WELL_CONDITIONED else 1e-9 + 1e-13 / p_ref
            assert np.allclose(s_eng, s_ref, atol=tol, rtol=0), (cut, q, s_eng - s_ref)
        assert np.allclose(res.entropy, ref["entropy"], atol=1e-9, rtol=0), cut
        finite = np.isfinite(RENYI_ED)
        assert np.allclose(res.moments[finite], ref["moments"][finite], atol=1e-10, rtol=0), cut


def test_correlation_matrix_is_the_ground_state(chain):
    # exact diagonalisation with scipy.sparse: <H> = sum_ij h_ij C_ij equals the ED ground energy;
    # a Slater determinant's C is a projector of trace n (Peschel 2003)
    C = correlation_matrix(chain["hsp"], chain["n"])
    energy = np.real(np.sum(chain["hsp"] * C)) + chain["const"]
    assert energy == pytest.approx(chain["energy"], abs=1e-11)
    assert np.allclose(C @ C, C, atol=1e-12)
    assert np.real(np.trace(C)) == pytest.approx(chain["n"], abs=1e-12)


def test_charge_correlations_match_exact_diagonalisation(chain):
    # exact diagonalisation with scipy.sparse; Wick's theorem for the engine
    C = correlation_matrix(chain["hsp"], chain["n"])
    ref = block_charge_correlations(chain["vec"], chain["basis"], chain["L"])
    corr = charge_correlations(C)
    assert np.allclose(corr, ref, atol=1e-12)
    assert np.allclose(corr.sum(axis=1), 0.0, atol=1e-12)  # fixed total N (exact)


def _enumerate(nu: np.ndarray, renyi, alphas, offset):
    """Every many-body level prod_k (nu_k or 1 - nu_k) with its N_A (Peschel 2003), by brute force."""
    levels, charges = [], []
    for occ in product((0, 1), repeat=nu.size):
        occ = np.array(occ, dtype=bool)
        levels.append(np.prod(np.where(occ, nu, 1 - nu)))
        charges.append(occ.sum())
    lam, nq = np.array(levels), np.array(charges)
    out = {}
    for N in np.unique(nq[lam > 0]):
        x = lam[(nq == N) & (lam > 0)]
        p = x.sum()
        y = x / p
        ent = [-np.sum(y * np.log(y)) if n == 1 else -np.log(y.max()) if np.isinf(n)
               else np.log(np.sum(y**n)) / (1 - n) for n in renyi]
        out[N + offset] = (p, x.size, np.array(ent))
    moments = np.array([[np.sum(lam**n * np.exp(1j * a * (nq + offset))) / np.sum(lam**n)
                         for a in alphas] for n in renyi if np.isfinite(n)])
    return out, moments


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_resolve_block_matches_enumeration(seed):
    # brute-force enumeration of the product spectrum (Peschel 2003), including modes exactly
    # at 0 and 1: p, counts (number of non-zero levels), S_n(q), charged moments
    rng = np.random.default_rng(seed)
    nu = np.concatenate([rng.uniform(size=7), [0.0, 1.0, 1.0]])
    rng.shuffle(nu)
    offset = -0.5 * nu.size
    res = resolve_block(nu, nu.size, RENYI, ALPHAS, offset=offset, floor=0.0)
    ref, moments = _enumerate(nu, RENYI, ALPHAS, offset)
    assert np.allclose(res.charges, sorted(ref))
    for i, q in enumerate(res.charges):
        p, count, ent = ref[q]
        assert res.probability[i] == pytest.approx(p, rel=1e-12)
        assert res.counts[i] == count
        assert np.allclose(res.sector_entropy[:, i], ent, atol=1e-12, rtol=0)
    assert np.allclose(res.moments[np.isfinite(RENYI)], moments, atol=1e-12)


def _direct_entropy(nu: np.ndarray, n: float) -> float:
    """sum_k log(nu^n + (1-nu)^n)/(1-n) and its limits (Peschel 2003), written out independently."""
    nu = nu[(nu > 0) & (nu < 1)]
    if n == 1:
        return float(-np.sum(nu * np.log(nu) + (1 - nu) * np.log(1 - nu)))
    if np.isinf(n):
        return float(-np.sum(np.log(np.maximum(nu, 1 - nu))))
    return float(np.sum(np.log(nu**n + (1 - nu) ** n)) / (1 - n))


def _check_sum_rules(res: CutResolved, nu: np.ndarray, tol: float) -> None:
    # exact sum rules (DESIGN.md section 5; Lukin et al., Science 2019): sum p = 1,
    # S_1 = S_number + S_config; Tr rho^n = sum_q p^n e^{(1-n) S_n(q)}; total S_n by the direct
    # formula; N_A is a sum of independent Bernoulli(nu_k) (Peschel 2003), so its mean and
    # variance are sum nu and sum nu (1 - nu)
    assert res.probability.sum() == pytest.approx(1.0, abs=tol)
    s1 = res.entropy[res.renyi.index(1.0)]
    assert res.number_entropy + res.config_entropy == pytest.approx(s1, abs=1e-10)
    for r, n in enumerate(res.renyi):
        assert res.entropy[r] == pytest.approx(_direct_entropy(nu, n), abs=1e-10)
        if np.isfinite(n) and n != 1:
            ok = ~np.isnan(res.sector_entropy[r])
            tr = np.sum(res.probability[ok] ** n * np.exp((1 - n) * res.sector_entropy[r, ok]))
            assert np.log(tr) / (1 - n) == pytest.approx(res.entropy[r], abs=1e-10)
    assert res.cumulant(1) == pytest.approx(nu.sum(), abs=1e-9)  # fermion charge, offset 0
    assert res.cumulant(2) == pytest.approx(np.sum(nu * (1 - nu)), abs=1e-9)


@pytest.mark.parametrize("name", ["uniform", "dimerised", "staggered"])
def test_sum_rules_every_cut(name):
    _, _, hsp, n, _, _ = CHAINS[name]()
    C = correlation_matrix(hsp, n)
    for cut in range(hsp.shape[0] + 1):
        nu = block_occupations(C, cut)
        _check_sum_rules(resolve_block(nu, cut, RENYI, ALPHAS, floor=0.0), nu, tol=1e-12)


def test_von_neumann_limit_is_continuous():
    # continuity in n (exact dual-number limit vs n = 1 +- 1e-6): the symmetric mean differs from
    # S_1 by O(delta^2) plus rounding ~eps/delta; each side differs by |dS/dn| delta
    delta = 1e-6
    _, _, hsp, n, _, _ = CHAINS["dimerised"]()
    C = correlation_matrix(hsp, n)
    for cut in (3, 6, 9):
        nu = block_occupations(C, cut)
        res = resolve_block(nu, cut, (1 - delta, 1.0, 1 + delta), ALPHAS)
        lo, mid, hi = res.sector_entropy
        ok = res.probability > 1e-6
        assert np.allclose((lo[ok] + hi[ok]) / 2, mid[ok], atol=1e-8, rtol=0)
        assert np.allclose(lo[ok], mid[ok], atol=1e-5, rtol=0)
        assert (res.entropy[0] + res.entropy[2]) / 2 == pytest.approx(res.entropy[1], abs=1e-8)


def _open_chain_occupations(L: int, n: int, cut: int) -> np.ndarray:
    """Block occupations of the open uniform chain from its sine orbitals
    phi_k(j) = sqrt(2/(L+1)) sin(pi k j/(L+1)) (exact, standard; DESIGN.md section 5)."""
    j, k = np.arange(1, cut + 1), np.arange(1, n + 1)
    phi = np.sqrt(2.0 / (L + 1)) * np.sin(np.pi * np.outer(j, k) / (L + 1))
    return block_occupations(phi @ phi.T, cut)


def test_sine_orbitals_match_correlation_matrix():
    # exact: the uniform chain's orbitals are sines; checks the construction used below
    L, n = 40, 20
    C = correlation_matrix(fermion_hopping(L), n)
    for cut in (7, 20, 33):
        assert np.allclose(_open_chain_occupations(L, n, cut), block_occupations(C, cut), atol=1e-12)


def test_large_block_is_finite_and_normalised():
    # block of 2000 sites of a half-filled open chain of 4000 (sine orbitals, exact); sum rules as
    # above (sum p = 1 to 1e-12), all reported values finite
    L, cut = 4000, 2000
    nu = _open_chain_occupations(L, L // 2, cut)
    res = resolve_block(nu, cut, RENYI, ALPHAS)  # default floor 1e-12
    keep = res.probability >= res.floor
    assert np.all(np.isfinite(res.entropy)) and np.all(np.isfinite(res.probability))
    assert np.all(np.isfinite(res.sector_entropy[:, keep])) and np.all(np.isnan(res.sector_entropy[:, ~keep]))
    assert np.all(np.isfinite(res.moments)) and np.all(np.abs(res.moments) <= 1 + 1e-12)
    assert np.allclose(res.moments[:, ALPHAS.size // 2], 1.0, atol=1e-12)  # alpha = 0
    assert np.all(res.sector_entropy[:, keep] >= -1e-12)
    _check_sum_rules(resolve_block(nu, cut, RENYI, ALPHAS, floor=0.0), nu, tol=1e-12)


@pytest.mark.slow
def test_large_block_through_correlation_matrix():
    # same block through the general path (dense eigh of a 4000 x 4000 hopping matrix)
    L, cut = 4000, 2000
    nu = block_occupations(correlation_matrix(fermion_hopping(L), L // 2), cut)
    assert np.allclose(nu, _open_chain_occupations(L, L // 2, cut), atol=1e-10)
    _check_sum_rules(resolve_block(nu, cut, RENYI, ALPHAS, floor=0.0), nu, tol=1e-12)


def test_spin_offset_shifts_charges_and_phases():
    # definition q = unit N_A + offset: charges shift, moments pick up e^{i alpha offset}
    nu = np.array([0.1, 0.45, 0.8, 0.97])
    a = resolve_block(nu, 4, RENYI, ALPHAS)
    b = resolve_block(nu, 4, RENYI, ALPHAS, offset=-2.0)
    assert np.allclose(b.charges, a.charges - 2.0)
    assert np.allclose(b.moments, a.moments * np.exp(-2j * ALPHAS), atol=1e-14)
    assert np.array_equal(a.sector_entropy, b.sector_entropy)


def test_degenerate_fermi_level_refused():
    # exact: two decoupled identical dimers (dimer = 1 cuts the middle bond) have a twofold level,
    # so one particle has no unique ground state
    with pytest.raises(ValueError, match="degenerate"):
        correlation_matrix(fermion_hopping(4, dimer=1.0), 1)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(nu=np.array([0.2, 1.2]), cut=2, renyi=(1.0,)), "lie in"),
        (dict(nu=np.array([0.2, 0.3]), cut=3, renyi=(1.0,)), "expected 3"),
        (dict(nu=np.array([0.2, 0.3]), cut=2, renyi=(0.0,)), "positive"),
    ],
    ids=["out-of-range", "wrong-length", "renyi-zero"],
)
def test_resolve_block_refuses_bad_input(kwargs, message):
    with pytest.raises(ValueError, match=message):
        resolve_block(alphas=ALPHAS, **kwargs)


def test_correlation_matrix_refuses_bad_input():
    with pytest.raises(ValueError, match="Hermitian"):
        correlation_matrix(np.array([[0.0, 1.0], [0.0, 0.0]]), 1)
    with pytest.raises(ValueError, match="n_particles"):
        correlation_matrix(fermion_hopping(3), 4)
