"""Charge-resolved entanglement of a Gaussian bosonic block from its mode weights (complex scalar).

Levels of the block (derivation). For the ground state of the lattice complex scalar each real
component phi_1, phi_2 (phi = (phi_1 + i phi_2)/sqrt 2) is a harmonic chain, and the reduced
state of a block is a product of thermal oscillators, one per symplectic eigenvalue sigma_k >= 1/2
of X_A P_A, each with occupation weight x_k = (sigma_k - 1/2)/(sigma_k + 1/2) (Peschel and
Eisler, J. Phys. A 42, 504003 (2009), from memory). The two components share the same modes
c_{k,1}, c_{k,2}, so d_{k,+-} = (c_{k,1} -+ i c_{k,2})/sqrt 2 are again thermal with weight x_k, and
the block charge Q_A = sum_{j in A} (phi_2 pi_1 - phi_1 pi_2)_j (= N_a - N_b) is invariant under the
common symplectic map, Q_A = sum_k (n_k+ - n_k-). Hence

    rho_A = prod_k (1 - x_k)^2 x_k^{n_k+ + n_k-},
    Tr[rho_A^n e^{i alpha Q_A}] = prod_k (1 - x_k)^{2n} sum_{n+} (x_k^n e^{i alpha})^{n+}
                                                        sum_{n-} (x_k^n e^{-i alpha})^{n-}
                                = prod_k (1 - x_k)^{2n} / [(1 - x_k^n e^{i alpha})(1 - x_k^n e^{-i alpha})],

which, with 1 - x = 1/(sigma + 1/2) and x = (sigma - 1/2)/(sigma + 1/2), is the form of DESIGN.md
section 5, prod_k 1/{[(sigma+1/2)^n - (sigma-1/2)^n e^{i alpha}][(sigma+1/2)^n - (sigma-1/2)^n e^{-i alpha}]}.
The product is real: |1 - y e^{i alpha}|^2 = (1 - y)^2 + 4 y sin^2(alpha/2), written so to avoid
cancellation near alpha = 0, y = 1.

Sectors. With y = x^n, the levels of one mode with n+ - n- = d sum to the two-sided geometric series
sum_{m >= 0} y^{|d| + 2m} = y^{|d|} / (1 - y^2). Normalised by the mode's total 1/(1 - y)^2 this is the
distribution f_y(d) = (1 - y)/(1 + y) y^{|d|} of d_k = n_k+ - n_k-, so

    Z_n(q) = sum_{levels with Q_A = q} lambda^n = Z_n F_n(q),   F_n = f_{y_1} * f_{y_2} * ...,
    Z_n = Tr rho^n = prod_k (1 - x_k)^{2n} / (1 - y_k)^2,

with p(q) = F_1(q) and S_n(q) = [log Z_n + log F_n(q) - n log p(q)]/(1 - n). Every f_y is even, so
p(q) = p(-q) exactly and the sums are computed for q >= 0 only. n = 1 is the exact limit:
log lambda = sum_k [2 log(1 - x_k) + N_k log x_k] with N_k = n_k+ + n_k-, so

    S_1(q) = log p(q) - 2 sum_k log(1 - x_k) + sum_k |log x_k| E[N_k | Q_A = q],

and E[N_k 1_{d_k = d}] = f_x(d) (|d| + 2x^2/(1 - x^2)) (sum over m of (|d| + 2m) x^{|d| + 2m}); the sums
G(q) = sum_k |log x_k| E[N_k 1_{Q_A = q}] are carried through the convolution as the second part of a
dual number (value, d/dn), as in :mod:`mps.theory.freefermions`. n = inf uses the largest level of
sector q, all |q| quanta in the mode with the largest x: log lambda_max(q) = 2 sum log(1 - x_k) + |q| log x_1.

Counts. A bosonic sector holds infinitely many levels (any number of particle-antiparticle pairs
can be added), so ``counts`` is ``np.inf`` for every sector.

Numerics (each step adds positive terms only, so relative accuracy is kept in the tails):

* Convolution by a two-sided geometric kernel is two first-order recursions,
  A(q) = H(q) + r A(q - 1) and E(q) = H(q) + r E(q + 1), O(window) per mode; the weights d r^d of
  the dual part are one more recursion on each side. They run in one compiled loop (numba), since
  a Python loop over modes and Renyi indices dominated the cost of a cut.
* Tilt: the values are carried as H(q) = F(q) z^q with z = y_1^{-theta}; z^q is multiplicative under
  convolution, so each kernel just becomes c (y z)^d for d >= 0 and c (y / z)^{|d|} for d < 0. The
  tilt keeps F_n(q) representable at large n, where it falls like y_1^{|q|} = x_1^{n |q|}.
* Window: the recursions run on q in [-W, W]; they then sum exactly the configurations whose partial
  sums S_j = d_1 + ... + d_j all stay in the window. z'^{S_j} is a submartingale for z' > 1 (each
  E[z'^{d_k}] = G_k(z') >= 1), so Doob's maximal inequality and the Chernoff argument give

      P(max_j |S_j| > W) <= 2 z'^{-(W+1)} prod_k G_k(z'),
      G_k(z') = E[z'^{d_k}] = (1 - y_k)^2 / [(1 - y_k z')(1 - y_k / z')],

  for every 1 < z' < 1/y_1 (:func:`tail_bound`, minimised over a grid of z'). This bounds the
  weight the window loses, in total and in every sector, and, at W = Q, the weight of the
  sectors |q| > Q that are not reported.
* Dropping modes: if F contains the factor f_{y_1} then F(q +- d) <= F(q) y_1^{-|d|}, so convolving with
  a mode of rho = y_k / y_1 changes every F(q) by a factor in [1 - 2 y_k, (1 + rho)/(1 - rho)]. Modes
  whose summed relative effect (with the matching bound on E[N_k | q] |log x_k| at n = 1) is below
  1e-17 are left out of the convolution (their exact contribution stays in the totals and moments).

Rounding: each recursion carries relative errors ~eps/(1 - r), r = y_1^{1 - theta} its largest ratio,
so p(q) and F_n(q) are accurate to ~eps/(1 - x_1) relative (1e-13 at x_1 = 0.999, measured).

Cost: O(modes x window) per Renyi index; the window is a few times the width of p(q).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy.special import xlogy

from mps.analysis.resolved import CutResolved

DROP_TOL = 1e-17  # summed relative effect of the modes left out of a convolution
# tilts z' = y_1^{-theta} at which the Chernoff bound is evaluated (any value gives a valid bound)
_THETAS = np.concatenate([np.linspace(0.02, 0.98, 25), 1.0 - np.geomspace(1e-2, 1e-7, 6)])
_LOG2 = float(np.log(2.0))


def _as_weights(x) -> np.ndarray:
    """Mode weights as a descending float array; refuses values outside [0, 1)."""
    x = np.asarray(x, dtype=float)
    if x.ndim != 1 or not np.all(np.isfinite(x)) or np.any((x < 0) | (x >= 1)):
        raise ValueError("mode weights must be a 1-D array of numbers in [0, 1)")
    return np.sort(x)[::-1]


class _Chernoff:
    """log 2 + sum_k log G_k(z') - a log z' on a grid of tilts z' = y_1^{-theta} (module docstring).

    G_k(z') = E[z'^{d_k}] = (1 - y_k)^2 / ((1 - y_k z')(1 - y_k / z')); ``y`` positive, descending.
    """

    def __init__(self, y: np.ndarray):
        self.empty = y.size == 0
        if not self.empty:
            self.log_z = -_THETAS * np.log(y[0])
            yz = y[None, :] * np.exp(self.log_z)[:, None]
            yiz = y[None, :] * np.exp(-self.log_z)[:, None]
            self.c = _LOG2 + np.sum(2.0 * np.log1p(-y)[None, :] - np.log1p(-yz) - np.log1p(-yiz), axis=1)

    def bound(self, a: float) -> float:
        """Upper bound on P(max_j |S_j| >= a)."""
        if self.empty:
            return 0.0 if a > 0 else 1.0
        return float(min(1.0, np.exp(np.min(self.c - a * self.log_z))))

    def window(self, log_target: float) -> int:
        """Smallest W >= 0 with bound(W + 1) <= exp(log_target), in closed form for each tilt."""
        if self.empty or log_target >= 0.0:
            return 0
        return max(0, int(np.ceil(np.min((self.c - log_target) / self.log_z))) - 1)


def _positive(y) -> np.ndarray:
    y = np.asarray(y, dtype=float)
    return np.sort(y[y > 0])[::-1]


def tail_bound(y, a: float) -> float:
    """Upper bound on P(max_j |S_j| >= a), S_j = d_1 + ... + d_j, d_k ~ f_{y_k} independent, any order.

    Doob's maximal inequality for the submartingale z^{S_j} with the Chernoff factor (module
    docstring): 2 z^{-a} prod_k G_k(z), minimised over a grid of 1 < z < 1/max(y). Also bounds
    P(|S_K| >= a) for the full sum, i.e. the weight of the sectors |q| >= a.
    """
    return _Chernoff(_positive(y)).bound(a)


def window_for(y, target: float) -> int:
    """Smallest W >= 0 with :func:`tail_bound` (y, W + 1) <= target (closed form on the tilt grid)."""
    if not target > 0:
        raise ValueError(f"target must be positive, got {target}")
    return _Chernoff(_positive(y)).window(float(np.log(target)))


def _kept_modes(x: np.ndarray, y: np.ndarray, dual: bool) -> int:
    """Number of leading modes (descending) to convolve, y = x^n (module docstring)."""
    if y.size < 2:
        return y.size
    rho = y[1:] / y[0]
    with np.errstate(divide="ignore", invalid="ignore"):   # rho = 1 (degenerate modes): kept
        effect = 2.0 * rho / (1.0 - rho)
        if dual:
            xs = x[1:]
            beta = 2.0 * xs**2 / (1.0 - xs**2)
            effect += -np.log(xs) * (2.0 * rho / (1.0 - rho) ** 2 + beta * (1.0 + rho) / (1.0 - rho))
    effect = np.where(rho < 1.0, effect, np.inf)
    tail = np.cumsum(effect[::-1])[::-1]       # effect of dropping modes k..end
    return 1 + int(np.count_nonzero(tail > DROP_TOL))


@njit(cache=False)
def _sweep(y, cost, beta, log_z, W, dual):  # pragma: no cover - compiled
    """Tilted, windowed convolution of the kernels f_{y_k} on q = -W..W (module docstring).

    Returns h (2, 2W + 1): h[0] = F(q) z^q and, if ``dual``, h[1] = G(q) z^q with
    G = sum_k cost_k E[N_k 1_{Q = q}], E[N_k 1_{d}] = f(d) (|d| + beta_k). Recursions (positive terms):
    A(i) = h(i) + r+ A(i-1), D+(i) = r+ (D+(i-1) + A(i-1)) = sum_{d>=1} d r+^d h(i-d), and the mirror
    images E(i) = h(i) + r- E(i+1), D-(i) = r- (D-(i+1) + E(i+1)) for d <= -1.
    """
    n = 2 * W + 1
    h = np.zeros((2, n))
    h[0, W] = 1.0
    a = np.empty((2, n))
    e = np.empty((2, n))
    dp = np.zeros(n)
    dm = np.zeros(n)
    zp, zm = np.exp(log_z), np.exp(-log_z)
    parts = 2 if dual else 1
    for k in range(y.size):
        rp, rm = y[k] * zp, y[k] * zm
        c = (1.0 - y[k]) / (1.0 + y[k])
        for s in range(parts):
            acc = 0.0
            for i in range(n):
                acc = h[s, i] + rp * acc
                a[s, i] = acc
            acc = 0.0
            for i in range(n - 1, -1, -1):
                acc = h[s, i] + rm * acc
                e[s, i] = acc
        if dual:
            for i in range(1, n):
                dp[i] = rp * (dp[i - 1] + a[0, i - 1])
            for i in range(n - 2, -1, -1):
                dm[i] = rm * (dm[i + 1] + e[0, i + 1])
        for i in range(n):
            for s in range(parts):
                b = rm * e[s, i + 1] if i + 1 < n else 0.0
                h[s, i] = c * (a[s, i] + b)
            if dual:
                h[1, i] += cost[k] * (beta[k] * h[0, i] + c * (dp[i] + dm[i]))
    return h


def _sums(x: np.ndarray, n: float, W: int, dual: bool) -> tuple[np.ndarray, np.ndarray | None]:
    """(log F_n(q), G(q)/F_1(q) or None) for q = 0..W; x positive, descending."""
    y = x**n
    k = _kept_modes(x, y, dual)
    if k == 0:
        log_f = np.full(W + 1, -np.inf)
        log_f[0] = 0.0
        return log_f, (np.zeros(W + 1) if dual else None)
    kept, y = x[:k], y[:k]
    # tilt z = y_1^{-theta}: halves (or more) the log-range of the values; theta <= 0.95 keeps the
    # recursion ratio y_1^{1 - theta} away from 1 (rounding grows like 1/(1 - ratio))
    theta = min(0.95, max(0.5, 1.0 - 575.0 / (max(W, 1) * -np.log(y[0]))))
    log_z = -theta * np.log(y[0])
    half = _sweep(y, -np.log(kept), 2.0 * kept**2 / (1.0 - kept**2), log_z, W, dual)[:, W:]
    with np.errstate(divide="ignore", invalid="ignore"):
        log_f = np.log(half[0]) - np.arange(W + 1) * log_z
        ratio = half[1] / half[0] if dual else None
    return log_f, ratio


@dataclass(frozen=True)
class SectorSums:
    """Windowed sector sums of one Renyi index for q = 0..window.

    log_f[q] = log F_n(q); ratio[q] = G(q)/F_1(q) (n = 1 with ``dual``, else None), G the dual part
    sum_k |log x_k| E[N_k 1_{Q_A = q}]; ``lost`` bounds the weight the window dropped.
    """

    log_f: np.ndarray
    ratio: np.ndarray | None
    window: int
    lost: float


def truncated_distribution(x, n: float, window: int, dual: bool = False) -> SectorSums:
    """F_n(q), q = 0..W, from the modes x, summing configurations whose partial sums stay in [-W, W].

    The weight lost by the window is at most ``tail_bound(x**n, W + 1)`` in total and in every
    sector (the computed values are lower bounds up to rounding). ``dual`` (n = 1 only) also
    carries G(q) = sum_k |log x_k| E[N_k 1_{Q_A = q}] (module docstring).
    """
    x = _as_weights(x)
    x = x[x > 0]
    if dual and n != 1.0:
        raise ValueError("the dual part is the n -> 1 derivative; use it with n = 1")
    W = int(window)
    if W < 0:
        raise ValueError(f"window must be >= 0, got {window}")
    log_f, ratio = _sums(x, float(n), W, dual)
    return SectorSums(log_f, ratio, W, tail_bound(x**n, W + 1))


def log_partition(x: np.ndarray, n: float) -> float:
    """log Tr rho^n = sum_k [2n log(1 - x_k) - 2 log(1 - x_k^n)] (n finite)."""
    return float(np.sum(2.0 * n * np.log1p(-x) - 2.0 * np.log1p(-(x**n))))


def total_entropy(x: np.ndarray, n: float) -> float:
    """S_n of the block: log Tr rho^n/(1 - n); n = 1: 2 sum_k [-log(1-x) - x log x/(1-x)];
    n = inf: -2 sum_k log(1 - x)."""
    if n == 1.0:
        return float(np.sum(2.0 * (-np.log1p(-x) - xlogy(x, x) / (1.0 - x))))
    if np.isinf(n):
        return float(-2.0 * np.sum(np.log1p(-x)))
    return log_partition(x, n) / (1.0 - n)


def charged_moments(x: np.ndarray, n: float, alphas: np.ndarray) -> np.ndarray:
    """Z_n(alpha)/Z_n(0) = prod_k (1 - y_k)^2 / [(1 - y_k)^2 + 4 y_k sin^2(alpha/2)], y = x^n (real).

    n = inf: the largest level (every mode empty) is unique and has Q_A = 0, so the ratio is 1.
    """
    if np.isinf(n) or x.size == 0:
        return np.ones(alphas.size, dtype=complex)
    y = x**n
    s2 = np.sin(alphas / 2.0) ** 2
    denominator = (1.0 - y)[None, :] ** 2 + 4.0 * y[None, :] * s2[:, None]
    logs = np.sum(2.0 * np.log1p(-y)[None, :] - np.log(denominator), axis=1)
    return np.exp(logs).astype(complex)


def _replica_sums(x: np.ndarray, n: float, q_f: int, q_max: int, tol: float) -> np.ndarray:
    """log F_n(q), q = 0..q_max, with relative truncation error below tol for q <= q_f.

    First window from F_n(q_f) >~ c_1 y_1^{q_f} (one mode); then the rigorous check
    lost <= tol min_{q <= q_f} F_n(q) with the computed values (lower bounds), widened once if needed.
    """
    y = x**n
    chern = _Chernoff(y)
    guess = np.log((1.0 - y[0]) / (1.0 + y[0])) + q_f * np.log(y[0])
    W = max(q_max, chern.window(np.log(tol) + guess))
    log_f, _ = _sums(x, n, W, False)
    need = float(np.min(log_f[: q_f + 1]))
    if chern.bound(W + 1) > tol * np.exp(need):
        W = max(q_max, chern.window(np.log(0.5 * tol) + need))
        log_f, _ = _sums(x, n, W, False)
    return log_f


def resolve_block(
    x,
    cut: int,
    renyi: Sequence[float],
    alphas: np.ndarray,
    floor: float = 1e-12,
    tol: float = 1e-14,
) -> CutResolved:
    """Exact charge-resolved entanglement of a bosonic Gaussian block with mode weights ``x``.

    Formulas in the module docstring: p(q) = F_1(q), S_n(q) = [log Z_n + log F_n(q) - n log p(q)]/(1 - n),
    S_1(q) = log p(q) - 2 sum log(1 - x_k) + G(q)/p(q), S_inf(q) = log p(q) - log lambda_max(q);
    total S_n and the charged moments Z_n(alpha)/Z_n(0) from the product formula (exact, all modes).

    Truncation (rigorous, :func:`tail_bound`): the reported sectors are q = -Q..Q with Q the
    smallest range whose outside weight is at most tol/2, so sum_q p(q) over the record lies in
    [1 - tol, 1] up to rounding. The convolution window W >= Q is chosen so that the weight it loses
    is below tol * max(floor, tol) for p and for the n = 1 dual part (Hoelder:
    E[Y 1_lost] <= E[Y^2]^{1/2} P(lost)^{1/2}), and below tol * min F_n(q) over the sectors with
    entropies for every other n (checked after the sum, widened if needed): p(q) and F_n(q) of every
    sector with p(q) >= floor then carry relative truncation errors below tol. The range is set by p,
    so for n < 1, whose F_n has the heavier tail, the unreported sectors hold up to
    ``tail_bound(x**n, Q + 1)`` of Tr rho^n (1e-8 at n = 1/2 for tol = 1e-14). Sectors whose p(q) is
    not representable (0 in double precision) are left out; sector entropies are NaN where
    p(q) < ``floor``. ``counts`` is ``np.inf`` for every sector (infinitely many levels).

    Parameters
    ----------
    x : mode weights x_k in [0, 1) of the block (zeros are ignored), e.g. from
        :func:`mps.theory.scalar.block_weights`.
    cut : number of sites of the block (at least the number of non-zero weights).
    renyi : Renyi indices n > 0 (``np.inf`` allowed).
    alphas : flux values for the charged moments.
    floor : probability below which sector entropies are NaN.
    tol : bound on the unreported weight and on the relative truncation error of reported sectors.
    """
    x = _as_weights(x)
    x = x[x > 0]
    if x.size > cut:
        raise ValueError(f"a block of {cut} sites has at most {cut} modes, got {x.size} non-zero weights")
    ns = tuple(float(n) for n in renyi)
    if any(not n > 0 for n in ns):
        raise ValueError(f"Renyi indices must be positive, got {ns}")
    if not 0 < tol < 1:
        raise ValueError(f"tol must lie in (0, 1), got {tol}")
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))

    pent = max(floor, tol)  # smallest p(q) whose entropies are held to relative accuracy tol
    chern = _Chernoff(x)
    q_range = chern.window(np.log(tol / 2.0))
    mean_n = 2.0 * x / (1.0 - x)                   # E[N_k], N_k = n+ + n- (two geometric)
    cost = -np.log(x)
    second = float(np.dot(cost, mean_n) ** 2 + np.dot(cost**2, 2.0 * x / (1.0 - x) ** 2))
    target = min(tol / 2.0, tol * pent, (tol * pent) ** 2 / max(second, 1.0))
    log_one, ratio_one = _sums(x, 1.0, max(q_range, chern.window(np.log(target))), True)
    p = np.exp(log_one[: q_range + 1])
    if not p[0] > 0:
        raise RuntimeError("p(0) underflowed; the mode weights are outside the supported range")
    q_max = int(np.nonzero(p > 0)[0].max())      # p(q) is even and log-concave: sectors -q_max..q_max
    p, logp = p[: q_max + 1], log_one[: q_max + 1]
    keep = p >= floor
    q_f = int(np.nonzero(keep)[0].max()) if keep.any() else 0
    log_top = 2.0 * float(np.sum(np.log1p(-x)))  # log of the largest level (every mode empty)
    log_x1 = float(np.log(x[0])) if x.size else 0.0

    half = np.full((len(ns), q_max + 1), np.nan)
    entropy = np.empty(len(ns))
    moments = np.empty((len(ns), alphas.size), dtype=complex)
    q = np.arange(q_max + 1)
    for r, n in enumerate(ns):
        entropy[r] = total_entropy(x, n)
        moments[r] = charged_moments(x, n, alphas)
        if n == 1.0:
            values = logp - log_top + ratio_one[: q_max + 1]
        elif np.isinf(n):
            values = logp - log_top - q * log_x1
        elif x.size == 0:
            values = np.zeros(q_max + 1)
        else:
            log_f = _replica_sums(x, n, q_f, q_max, tol)
            values = (log_partition(x, n) + log_f[: q_max + 1] - n * logp) / (1.0 - n)
        half[r, keep] = values[keep]

    charges = np.arange(-q_max, q_max + 1)
    idx = np.abs(charges)
    return CutResolved(
        cut=cut,
        charges=charges.astype(float),
        probability=p[idx],
        counts=np.full(charges.size, np.inf),
        renyi=ns,
        entropy=entropy,
        sector_entropy=half[:, idx],
        alphas=alphas,
        moments=moments,
        floor=floor,
    )
