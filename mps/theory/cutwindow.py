"""Block spectra of a Slater determinant from a window around the cut, with an error bound.

Why: the full-block method (Peschel, J. Phys. A 36, L205 (2003)) diagonalises the l x l block
correlation matrix C_A for every cut, O(L^4) over all cuts of a chain. For a pure Gaussian state
the correlation matrix C = (<c+_i c_j>) is a projector, C^2 = C, so its diagonal block satisfies

    C_A (1 - C_A) = C_AB C_BA,                     (A = sites 0..l-1, B = sites l..L-1)

(from the AA block of C^2 = C; Peschel 2003 uses the same projector structure, from memory). The
modes of the block with 0 < nu_k < 1 are therefore the left singular vectors of the off-diagonal
block C_AB, with singular values s_k^2 = nu_k (1 - nu_k); every other block mode is exactly
empty (nu = 0) or exactly filled (nu = 1). In a gapped chain C_ij decays exponentially in
|i - j|, so those modes live near the cut: the rows W = [l - w, l) and columns [l, l + w) of
C_AB hold them up to the neglected entries.

Algorithm for one cut (cost O(w^3) instead of O(l^3)):

1. M = C[W, l:l+w] = U diag(s) V^dagger (SVD); keep the modes with s_k^2 > ``negligible``.
2. Rayleigh-Ritz: K = U^dagger C_WW U (C on the rows of the window). C_A commutes with
   C_A (1 - C_A), so in exact arithmetic K is diagonal between singular vectors of different s;
   its diagonal K_kk is then nu_k, and it tells nu from 1 - nu (K_kk < 1/2 or > 1/2). Singular
   values closer than ``CLUSTER`` (1e-12) form a cluster whose block of K is diagonalised: this
   resolves a pair nu, 1 - nu with equal s. (A cluster of two distinct s on opposite sides is
   resolved to within that spacing.)
3. For K-values e < 0.1 or > 0.9 the occupation is taken from s instead: the small root of
   nu (1 - nu) = s^2, r = 2 s^2 / (1 + sqrt(1 - 4 s^2)), gives nu = r or 1 - r. A tiny nu
   obtained this way has an absolute error ~ 2 s eps (relative precision), whereas eigvalsh of
   the block gives every nu only to an absolute ~eps (~1e-16): small occupations from the window
   are MORE accurate than those of the full block (the near-1 ones are stored as 1 - r, i.e. to
   an absolute eps, as any double next to 1). Between 0.1 and 0.9 the K-value (accurate to
   ~eps) is used, since there dnu/ds = 2 s / |1 - 2 nu| grows.
4. The number of modes exactly equal to 1 is k1 = round(Tr C_A - sum_k nu_k) (trace over the
   whole block, cheap). If Tr C_A - sum nu is not within 1e-6 of an integer (C is no projector,
   or the window missed a mode) the window answer is refused (None) and callers fall back to
   the full block.

Dropped modes: a mode with nu (1 - nu) <= ``negligible`` (default 1e-17) is set to exactly 0 or
1. A level weight of 1e-17 is below double precision next to 1 (1 - 1e-17 == 1.0), so no level
that double precision can tell from its neighbours is lost: p(q) changes by at most ~1e-17 per
dropped mode, S_1 by ~nu log(1/nu) ~ 4e-16 per mode; but ``counts`` (the number of non-zero
levels per sector) counts the levels of the kept modes only, and Renyi orders n < 1 (which
weigh a level as nu^n) are the only ones on which dropped modes could act above eps
(~ sqrt(1e-17) = 3e-9 for n = 1/2 in total S_n). Full-block occupations carry absolute errors
~eps, so they contain spurious modes of that size anyway.

Choice of the window (:func:`choose_window`): with the decay profile c_d = max_i |C_{i,i+d}|,
w is the smallest width such that every |C_ij| with |i - j| > w is <= ``tol``. Every entry of
C_AB that the window neglects has |i - j| > w, and at distance d a cut has at most
min(d, L - d) entries of C_AB, so the neglected part E of any cut obeys

    ||E||_2 <= ||E||_F <= B(w) = sqrt(sum_{d > w} min(d, L - d) c_d^2),

and by Weyl's inequality for singular values every s_k of the window differs from the s_k
of the full C_AB by at most B(w) (e.g. Horn and Johnson, Matrix Analysis, Cambridge 1985, from
memory); to first order |delta nu_k| <= 2 s_k B / |1 - 2 nu_k| (step 3). The K-values of step 2
are Rayleigh quotients of the window's singular vectors, whose angle to the exact ones is at
most B over the spacing of the s_k (Wedin's theorem, from memory), and enter quadratically.
B includes the rounding noise of C far from the diagonal (~1e-16 per entry), so it grows with
L (measured 4e-14 at L = 300 and 5e-13 at L = 4000 for t = 1, mu_stag = 0.5, w = 125) although
the real differences stay smaller: windowed and full-block occupations agree to 4e-14 on every
cut of the L = 300 test chains, which is the size of the full block's own eigvalsh error. A
40-digit mpmath evaluation of one block (L = 60, staggered; done once, not a test) put the
windowed nu = 2.4e-15 at a relative error of 3e-10 and the eigvalsh one at 4e-2.
When no width meets ``tol`` (critical chains, C_ij ~ 1/|i - j|) there is no window, and callers
use the full block.

Cost: O(w^3) per cut (an SVD of w x w; 2.3 ms at w = 125 on one core), O(L^2) once for the
window; :func:`windowed_spectra` also recognises windows that repeat (periodic chains away from
their ends) and computes them once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# largest neglected |C_ij| (common practice: a few eps of an O(1) entry)
WINDOW_TOL = 1e-15
# nu (1 - nu) below which a block mode is taken as exactly 0 or 1 (see the module docstring)
NEGLIGIBLE = 1e-17
# K-values outside [REFINE, 1 - REFINE] are replaced by the root from the singular value (step 3)
REFINE = 0.1
# singular values closer than this form one cluster of K (step 2)
CLUSTER = 1e-12
# largest distance of Tr C_A - sum nu from an integer before the window answer is refused
INTEGER_CHECK = 1e-6
# windows whose difference has a Frobenius norm below this are repeats (windowed_spectra); of the
# order of the window bound B of a chain of thousands of sites
REPEAT_TOL = 1e-13
# repeats are looked for among the previous MAX_PERIOD cuts (periods up to 8 sites)
MAX_PERIOD = 8


@dataclass(frozen=True)
class CutWindow:
    """Width of the window around every cut and its error bound.

    Attributes
    ----------
    width : w; the rows [cut - w, cut) and columns [cut, cut + w) of C_AB are used.
    tol : largest neglected |C_ij| allowed (every |C_ij| with |i - j| > w is <= tol).
    bound : B(w) = sqrt(sum_{d > w} min(d, L - d) c_d^2) >= ||neglected part||_F of any cut,
        hence >= the error of every singular value s_k (Weyl).
    """

    width: int
    tol: float
    bound: float


def decay_profile(C: np.ndarray) -> np.ndarray:
    """c_d = max_i |C_{i, i+d}| for d = 0..L-1 (C Hermitian, so the upper diagonals suffice)."""
    C = np.asarray(C)
    return np.array([np.max(np.abs(np.diagonal(C, d))) for d in range(C.shape[0])])


def window_bound(profile: np.ndarray, width: int) -> float:
    """B(w) = sqrt(sum_{d > w} min(d, L - d) c_d^2), a Frobenius bound on the neglected part."""
    L = profile.size
    d = np.arange(width + 1, L)
    return float(np.sqrt(np.sum(np.minimum(d, L - d) * profile[width + 1 :] ** 2)))


def choose_window(C: np.ndarray, tol: float = WINDOW_TOL) -> CutWindow | None:
    """Smallest w with max_{|i-j| > w} |C_ij| <= tol, or None when there is none below L - 1.

    None means that C does not decay within the chain (critical chains, or a correlation length
    comparable with L): the window would be as large as the blocks, so callers use full blocks.
    Cost O(L^2), once per correlation matrix.
    """
    profile = decay_profile(C)
    L = profile.size
    if L < 2:
        return None
    beyond = np.maximum.accumulate(profile[::-1])[::-1]      # beyond[d] = max_{d' >= d} c_d'
    ok = np.nonzero(beyond[1:] <= tol)[0]                    # ok[k]: every c_d with d > k is small
    if ok.size == 0:
        return None
    width = max(int(ok[0]), 1)
    return CutWindow(width=width, tol=tol, bound=window_bound(profile, width))


def windowed_occupations(
    C: np.ndarray,
    cut: int,
    width: int,
    trace: float | None = None,
    negligible: float = NEGLIGIBLE,
) -> np.ndarray | None:
    """Block occupations nu_k (ascending, exact 0 and 1 included) of sites 0..cut-1 from the window.

    Parameters
    ----------
    C : (L, L) correlation matrix of a Slater determinant (a projector).
    cut : number of sites in the block, 0..L.
    width : window width w (e.g. :attr:`CutWindow.width`).
    trace : Tr C_A = sum_{i < cut} C_ii, if already known (e.g. from a cumulative sum).
    negligible : modes with nu (1 - nu) <= negligible are taken as exactly 0 or 1.

    Returns None when the integer check of the module docstring fails (step 4).
    """
    C = np.asarray(C)
    L = C.shape[0]
    if not 0 <= cut <= L:
        raise ValueError(f"cut must be in 0..{L}, got {cut}")
    if width < 1:
        raise ValueError(f"window width must be positive, got {width}")
    if trace is None:
        trace = float(np.sum(np.real(np.diagonal(C)[:cut])))
    return _with_trivial_modes(_window_modes(C, cut, width, negligible), cut, trace)


def windowed_spectra(
    C: np.ndarray,
    cuts,
    width: int,
    negligible: float = NEGLIGIBLE,
    repeat_tol: float = REPEAT_TOL,
    max_period: int = MAX_PERIOD,
) -> list[np.ndarray | None]:
    """:func:`windowed_occupations` for many cuts, reusing the spectra of repeated windows.

    The non-trivial modes of a cut depend on C only through the rows [cut - w, cut) and columns
    [cut - w, cut + w). For a cut whose window lies inside the chain, the windows of the cuts
    cut - p (p = 1..``max_period``) are candidates: if the window of the cut whose spectrum was
    actually computed for one of them (its source; never a chain of reuses, so differences cannot
    accumulate) differs from this one by at most ``repeat_tol`` in Frobenius norm, its modes are
    reused; the trivial modes still come from this cut's own trace (step 4). By Weyl's
    inequality the reused s_k then differ from the recomputed ones by at most ``repeat_tol``
    (and the K-values by about as much, to first order). Periodic chains away from their ends
    repeat their windows up to the rounding of C (measured: Frobenius differences 3e-14 between
    bulk windows of an L = 4000 staggered chain, w = 125); anything else is computed. None marks a
    cut whose integer check failed.
    """
    C = np.asarray(C)
    L = C.shape[0]
    diag = np.real(np.diagonal(C))
    traces = np.concatenate([[0.0], np.cumsum(diag)])
    source: dict[int, int] = {}                     # interior cut -> cut whose modes it uses
    modes: dict[int, np.ndarray] = {}               # computed cut -> its non-trivial modes
    out: list[np.ndarray | None] = []
    for cut in cuts:
        if not 0 <= cut <= L:
            raise ValueError(f"cut must be in 0..{L}, got {cut}")
        interior = width <= cut <= L - width
        nu = None
        if interior:
            here, rows = slice(cut - width, cut + width), slice(cut - width, cut)
            tried = set()
            for p in range(1, max_period + 1):
                s = source.get(cut - p)
                if s is None or s in tried:
                    continue
                tried.add(s)
                there = slice(s - width, s + width)
                # the diagonal first: a cheap necessary condition that turns most non-repeats away
                if (np.max(np.abs(diag[rows] - diag[s - width : s])) <= repeat_tol
                        and np.linalg.norm(C[rows, here] - C[s - width : s, there]) <= repeat_tol):
                    nu = _with_trivial_modes(modes[s], cut, float(traces[cut]))
                    if nu is not None:
                        source[cut] = s
                        break
        if nu is None:
            inner = _window_modes(C, cut, width, negligible)
            nu = _with_trivial_modes(inner, cut, float(traces[cut]))
            if interior:
                source[cut], modes[cut] = cut, inner
        out.append(nu)
    return out


def _window_modes(C: np.ndarray, cut: int, width: int, negligible: float) -> np.ndarray:
    """The non-trivial occupations of the block from its window (steps 1-3), ascending."""
    L = C.shape[0]
    lo, hi = max(0, cut - width), min(L, cut + width)
    block = C[lo:cut, cut:hi]
    if not block.size:
        return np.zeros(0)
    U, s, _ = np.linalg.svd(block, full_matrices=False)
    keep = s**2 > negligible
    U, s = U[:, keep], s[keep]
    if not s.size:
        return np.zeros(0)
    return np.sort(_ritz_occupations(U.conj().T @ C[lo:cut, lo:cut] @ U, s))


def _with_trivial_modes(inner: np.ndarray, cut: int, trace: float) -> np.ndarray | None:
    """All cut occupations: the inner ones, k1 = round(Tr C_A - sum inner) ones, zeros (step 4)."""
    ones = trace - float(np.sum(inner))
    k1 = int(round(ones))
    zeros = cut - inner.size - k1
    if abs(ones - k1) > INTEGER_CHECK or k1 < 0 or zeros < 0:
        return None
    return np.concatenate([np.zeros(zeros), inner, np.ones(k1)])


def _ritz_occupations(K: np.ndarray, s: np.ndarray) -> np.ndarray:
    """Occupations from K = U^dagger C_WW U and the kept singular values s (descending), steps 2-3."""
    s2 = np.minimum(s**2, 0.25)
    small = 2.0 * s2 / (1.0 + np.sqrt(1.0 - 4.0 * s2))    # small root of nu (1 - nu) = s^2
    e = np.real(np.diagonal(K)).copy()                    # singletons: K_kk
    low = e < 0.5
    starts = np.nonzero(s[:-1] - s[1:] > CLUSTER)[0] + 1
    for a, b in zip(np.concatenate([[0], starts]), np.concatenate([starts, [s.size]])):
        if b - a == 1:
            continue
        # a cluster: diagonalise its block; nu grows with s^2 below 1/2 and falls above, so the
        # ascending low values take ascending roots and the high ones descending roots
        block = K[a:b, a:b]
        e[a:b] = np.linalg.eigvalsh((block + block.conj().T) / 2)
        low[a:b] = e[a:b] < 0.5
        n_low, x = int(low[a:b].sum()), small[a:b][::-1].copy()
        small[a:b] = np.concatenate([x[:n_low], x[n_low:][::-1]])
    refined = np.where(low, small, 1.0 - small)
    return np.clip(np.where((e < REFINE) | (e > 1.0 - REFINE), refined, e), 0.0, 1.0)
