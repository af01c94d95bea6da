"""Field-theory predictions for open chains (one entangling point) and least-squares fits of them.

Every form below describes the left block of ``l`` sites of an open chain of ``L`` sites, whose
only entangling point is the cut; ``log`` is the natural logarithm and the lattice spacing is 1.

Critical chains (conformal field theory with central charge c; Luttinger liquid with parameter K):

- chord length l_eff = (2L/pi) sin(pi l/L) (Calabrese and Cardy, J. Stat. Mech. (2004) P06002);
- S_n(l) = (c/12)(1 + 1/n) log l_eff + const_n + A_n (-1)^l l_eff^(-K/n)   (same source for the
  smooth part; the alternating term that open ends produce for every n, n = 1 included:
  Laflorencie, Sorensen, Chang and Affleck, PRL 96, 100603 (2006); Calabrese, Campostrini,
  Essler and Nienhuis, PRL 104, 095701 (2010));
- block charge variance sigma^2(l) = (K/(2 pi^2)) log l_eff + const (half the bulk-interval
  value (K/pi^2) log l; Song, Rachel, Flindt, Klich, Laflorencie and Le Hur, PRB 85, 035409
  (2012), from memory);
- charged moments log Z_n(alpha)/Z_n(0) = -(K/n)(alpha/2pi)^2 log l_eff + ..., i.e. Gaussian in
  alpha with variance sigma^2/n (Goldstein and Sela, PRL 120, 200602 (2018));
- leading charge-resolved entropies S_n(q) = S_n - (1/2) log(2 pi sigma^2) + log(n)/(2(1 - n))
  and a Gaussian p(q) of variance sigma^2 (Goldstein and Sela 2018; Xavier, Alcaraz and Sierra,
  PRB 98, 041106 (2018); Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019));
- xxz chain, -1 < Delta <= 1: K = pi / (2 (pi - arccos Delta)) (Bethe ansatz; Luther and
  Peschel, PRB 12, 3908 (1975)).

Massive chains (Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073): once l >> xi the
logarithm of the block size is replaced by that of the correlation length xi (area law), with
the same prefactors; equipartition holds at leading order.

The leading forms carry O(1/log l) corrections that are large at reachable sizes; they serve
fits, trends and plots, not tight checks of lattice numbers.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.linalg import lstsq
from scipy.optimize import minimize_scalar

# Range searched for the decay exponent of the alternating term when it is not given.
EXPONENT_RANGE = (0.0, 4.0)


# ----------------------------------------------------------------------------- forms
def chord_length(l, L: int) -> np.ndarray:
    """l_eff = (2L/pi) sin(pi l/L), the block length seen by an open chain of L sites.

    Calabrese and Cardy (2004): the conformal map of the half-strip gives this length in place
    of l; l_eff -> 2l for l << L (a block at a boundary), and it is largest, 2L/pi, at mid-chain.
    """
    l = np.asarray(l, dtype=float)
    return (2.0 * L / np.pi) * np.sin(np.pi * l / L)


def renyi_prefactor(n: float) -> float:
    """(1 + 1/n)/12, the coefficient of c log l_eff in S_n for one entangling point (1/12 at n = inf)."""
    return (1.0 + (0.0 if math.isinf(n) else 1.0 / n)) / 12.0


def renyi_entropy_open(l, L: int, c: float, n: float = 1.0, const: float = 0.0,
                       alternating: float = 0.0, K: float = 1.0,
                       exponent: float | None = None) -> np.ndarray:
    """S_n(l) = c (1 + 1/n)/12 log l_eff + const + alternating (-1)^l l_eff^(-p), p = K/n.

    Calabrese and Cardy (2004) for the smooth part; the alternating term with decay exponent
    K/n: Calabrese, Campostrini, Essler and Nienhuis (2010), Laflorencie et al. (2006).
    ``exponent`` overrides p (p = 0 at n = inf: the parity term then does not decay).
    """
    x = chord_length(l, L)
    p = _alternating_exponent(n, K) if exponent is None else exponent
    parity = (-1.0) ** np.asarray(l, dtype=float)
    return c * renyi_prefactor(n) * np.log(x) + const + alternating * parity * x ** (-p)


def charge_variance_open(l, L: int, K: float, const: float = 0.0, alternating: float = 0.0,
                         exponent: float = 1.0) -> np.ndarray:
    """sigma^2(l) = (K/(2 pi^2)) log l_eff + const (+ alternating (-1)^l l_eff^(-exponent)).

    One entangling point, half the bulk value (K/pi^2) log l (Song et al., PRB 85, 035409
    (2012), from memory; DESIGN.md section 5). Open ends add a parity term, as for S_n.
    """
    x = chord_length(l, L)
    parity = (-1.0) ** np.asarray(l, dtype=float)
    return K / (2.0 * np.pi**2) * np.log(x) + const + alternating * parity * x ** (-exponent)


def resolved_shift(n: float) -> float:
    """log(n)/(2(1 - n)); -1/2 at n = 1 and 0 at n = inf (its limits)."""
    if math.isinf(n):
        return 0.0
    if n == 1.0:
        return -0.5
    return math.log(n) / (2.0 * (1.0 - n))


def resolved_entropy_leading(total, variance, n: float = 1.0):
    """S_n(q) = S_n - (1/2) log(2 pi sigma^2) + log(n)/(2(1 - n)), the same for every q.

    Goldstein and Sela, PRL 120, 200602 (2018); Bonsignori, Ruggiero and Calabrese (2019).
    Fourier transforming the Gaussian Z_n(alpha) = Z_n(0) e^{-alpha^2 sigma^2/(2n)} gives
    Z_n(q) = Z_n(0) sqrt(n/(2 pi sigma^2)) e^{-n q^2/(2 sigma^2)}, whose q-dependence cancels in
    S_n(q) = log[Z_n(q)/Z_1(q)^n]/(1 - n). Corrections are O((q - <q>)^2/log^2 l) and O(1/log l):
    even with sigma^2 the exact block variance, the n = 1 form misses the exact S_1(<q>) of free
    fermions by about 0.02 at blocks of 100 to 1000 sites (open chain, exact engine), a gap that
    shrinks only as the inverse logarithm of the block.
    """
    return np.asarray(total) - 0.5 * np.log(2.0 * np.pi * np.asarray(variance)) + resolved_shift(n)


def gaussian_probability(q, mean: float, variance: float, spacing: float = 1.0) -> np.ndarray:
    """p(q) = spacing (2 pi sigma^2)^(-1/2) exp(-(q - mean)^2/(2 sigma^2)), charges ``spacing`` apart.

    The Gaussian charge distribution of a block (Goldstein and Sela 2018). On the charge lattice
    it sums to 1 up to terms of order exp(-2 pi^2 sigma^2/spacing^2) (Poisson summation).
    """
    q = np.asarray(q, dtype=float)
    return spacing / np.sqrt(2.0 * np.pi * variance) * np.exp(-((q - mean) ** 2) / (2.0 * variance))


def log_charged_moment(alpha, variance: float, n: float = 1.0) -> np.ndarray:
    """log Z_n(alpha)/Z_n(0) = -alpha^2 sigma^2/(2n) (real part; Goldstein and Sela 2018).

    Equivalently -(K/n)(alpha/2pi)^2 log l_eff per entangling point with sigma^2 = K/(2 pi^2) log
    l_eff. Zero at n = inf (sigma^2/n -> 0).
    """
    a = np.asarray(alpha, dtype=float)
    scale = 0.0 if math.isinf(n) else variance / n
    return -0.5 * a**2 * scale


def luttinger_bethe_ansatz(delta: float) -> float:
    """K = pi / (2 (pi - arccos Delta)) of the xxz chain, -1 < Delta <= 1 (J > 0, zero field).

    Bethe ansatz (Luther and Peschel, PRB 12, 3908 (1975)): K = 1 at Delta = 0 (free fermions),
    3/4 at Delta = 1/2, 1/2 at Delta = 1 (Heisenberg), K -> inf as Delta -> -1.
    """
    delta = float(delta)
    if not -1.0 < delta <= 1.0:
        raise ValueError(f"the Bethe-ansatz K needs -1 < Delta <= 1 (critical xxz), got {delta}")
    return math.pi / (2.0 * (math.pi - math.acos(delta)))


def entropy_massive(xi, c: float, n: float = 1.0, const: float = 0.0):
    """S_n = c (1 + 1/n)/12 log xi + const for a block much longer than xi, one entangling point.

    Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073 (log l -> log xi, area law).
    """
    return c * renyi_prefactor(n) * np.log(np.asarray(xi, dtype=float)) + const


def charge_variance_massive(xi, K: float, const: float = 0.0):
    """sigma^2 = (K/(2 pi^2)) log xi + const for a block much longer than xi, one entangling point.

    Murciano, Di Giulio and Calabrese (2020): the logarithm of the block size becomes that of xi.
    """
    return K / (2.0 * np.pi**2) * np.log(np.asarray(xi, dtype=float)) + const


def _alternating_exponent(n: float, K: float) -> float:
    return 0.0 if math.isinf(n) else K / n


# ----------------------------------------------------------------------------- fits
@dataclass(frozen=True)
class LogFit:
    """A fit y(l) = slope * log l_eff + const + alternating (-1)^l l_eff^(-exponent) on a window.

    ``value`` is the physical parameter (c for entropies, K for the variance); ``exponent_fitted``
    says whether the decay exponent of the parity term was fitted or fixed.
    """

    quantity: str
    value: float
    const: float
    alternating: float
    exponent: float
    exponent_fitted: bool
    residual_rms: float
    window: tuple[int, int]
    points: int

    def to_dict(self) -> dict:
        d = asdict(self)
        d["window"] = list(self.window)
        return d


def default_window(L: int) -> tuple[int, int]:
    """Cuts l with L/8 <= l <= 7L/8: away from both ends, where lattice corrections are largest."""
    return max(1, math.ceil(L / 8)), min(L - 1, math.floor(7 * L / 8))


def fit_central_charge(cuts, entropies, L: int, n: float = 1.0,
                       window: tuple[int, int] | None = None, K: float | None = None) -> LogFit:
    """Least-squares fit of S_n(l) = c (1 + 1/n)/12 log l_eff + const + A (-1)^l l_eff^(-K/n).

    Calabrese and Cardy (2004) with the open-chain parity term (Calabrese, Campostrini, Essler and
    Nienhuis 2010). With ``K`` given the exponent is K/n; otherwise it is fitted (the linear
    parameters are solved exactly for each exponent, the exponent by a bounded 1-D search).
    Only cuts in ``window`` = (lo, hi), inclusive, enter (default :func:`default_window`).
    """
    p = None if K is None else _alternating_exponent(n, K)
    return _fit_log(f"S_{_label(n)}", cuts, entropies, L, renyi_prefactor(n), window, p)


def fit_luttinger(cuts, variance, L: int, window: tuple[int, int] | None = None,
                  exponent: float | None = None, slope: float = 1.0 / (2.0 * np.pi**2)) -> LogFit:
    """Least-squares fit of sigma^2(l) = K s log l_eff + const + A (-1)^l l_eff^(-p).

    One entangling point (DESIGN.md section 5): s = 1/(2 pi^2) for the charge of a
    one-component Luttinger liquid; other charges pass their own ``slope`` s (e.g. 1/pi^2 for the
    particle number and 1/(4 pi^2) for S^z of a spinful chain, so that free fermions have K = 1).
    The parity term of open chains is fitted with its exponent p (or p = ``exponent`` if given);
    window as in :func:`fit_central_charge`.
    """
    return _fit_log("charge_var", cuts, variance, L, slope, window, exponent)


def _fit_log(quantity: str, cuts, y, L: int, prefactor: float, window, exponent) -> LogFit:
    cuts = np.asarray(cuts, dtype=int)
    y = np.asarray(y, dtype=float)
    if cuts.shape != y.shape or cuts.ndim != 1:
        raise ValueError(f"cuts and values must be 1-D arrays of one length, got {cuts.shape}, {y.shape}")
    lo, hi = default_window(L) if window is None else (int(window[0]), int(window[1]))
    keep = (cuts >= lo) & (cuts <= hi) & (cuts > 0) & (cuts < L) & np.isfinite(y)
    l, y = cuts[keep], y[keep]
    if l.size < 4:
        raise ValueError(f"{quantity}: the fit window [{lo}, {hi}] holds {l.size} cuts; need at least 4")
    logx = np.log(chord_length(l, L))
    parity = (-1.0) ** l

    def solve(p: float):
        A = np.column_stack([prefactor * logx, np.ones_like(logx), parity * np.exp(-p * logx)])
        coef, *_ = lstsq(A, y)
        return coef, y - A @ coef

    if exponent is None:
        best = minimize_scalar(lambda p: float(np.sum(solve(p)[1] ** 2)), bounds=EXPONENT_RANGE,
                               method="bounded", options={"xatol": 1e-6})
        p, fitted = float(best.x), True
    else:
        p, fitted = float(exponent), False
    coef, res = solve(p)
    return LogFit(quantity, float(coef[0]), float(coef[1]), float(coef[2]), p, fitted,
                  float(np.sqrt(np.mean(res**2))), (lo, hi), int(l.size))


def _label(n: float) -> str:
    return "inf" if math.isinf(n) else (str(int(n)) if float(n).is_integer() else repr(float(n)))


# ----------------------------------------------------------------------------- equipartition
@dataclass(frozen=True)
class Equipartition:
    """How far S_n(q) at one cut is from being independent of q.

    ``spread`` = max - min of S_n(q) over the sectors with p(q) > ``threshold``; ``slope`` and
    ``intercept`` of the least-squares line S_n(q) = intercept + slope (q - <q>)^2 over the same
    sectors (NaN with fewer than two distinct (q - <q>)^2); leading order predicts slope 0 with
    corrections O(1/log^2 l) (Bonsignori, Ruggiero and Calabrese 2019).
    """

    spread: float
    slope: float
    intercept: float
    sectors: int
    threshold: float

    def to_dict(self) -> dict:
        return asdict(self)


def equipartition(charges, probability, sector_entropy, threshold: float = 1e-3) -> Equipartition:
    """Equipartition figures of one Renyi index at one cut (see :class:`Equipartition`)."""
    q, p, s = (np.asarray(a, dtype=float) for a in (charges, probability, sector_entropy))
    mean = float(np.dot(p, q) / p.sum())
    ok = (p > threshold) & np.isfinite(s)
    if not ok.any():
        return Equipartition(math.nan, math.nan, math.nan, 0, threshold)
    x, s = (q[ok] - mean) ** 2, s[ok]
    slope = intercept = math.nan
    if np.unique(np.round(x, 12)).size >= 2:
        coef, *_ = lstsq(np.column_stack([x, np.ones_like(x)]), s)
        slope, intercept = float(coef[0]), float(coef[1])
    return Equipartition(float(s.max() - s.min()), slope, intercept, int(ok.sum()), threshold)


@dataclass(frozen=True)
class GaussianDistance:
    """Distance of p(q) from the Gaussian of the same mean and variance on the charge lattice.

    ``max_abs`` = max_q |p(q) - g(q)|; ``total_variation`` = (1/2) sum_q |p(q) - g(q)| over the
    whole lattice (sectors absent from p count with p = 0). g is normalised on the lattice.
    """

    mean: float
    variance: float
    max_abs: float
    total_variation: float

    def to_dict(self) -> dict:
        return asdict(self)


def gaussian_distance(charges, probability) -> GaussianDistance:
    """p(q) against the lattice Gaussian with its own mean and variance (Goldstein and Sela 2018)."""
    q, p = np.asarray(charges, dtype=float), np.asarray(probability, dtype=float)
    p = p / p.sum()
    mean = float(np.dot(p, q))
    var = float(np.dot(p, (q - mean) ** 2))
    if q.size < 2 or var <= 0.0:
        return GaussianDistance(mean, var, math.nan, math.nan)
    step = float(np.min(np.diff(np.unique(q))))
    reach = 12.0 * math.sqrt(var) + 2.0 * step
    k = np.arange(math.floor((mean - reach - q[0]) / step), math.ceil((mean + reach - q[0]) / step) + 1)
    lattice = np.union1d(np.round((q - q[0]) / step).astype(int), k)
    g = np.exp(-((q[0] + step * lattice - mean) ** 2) / (2.0 * var))
    g /= g.sum()
    full = np.zeros(lattice.size)
    full[np.searchsorted(lattice, np.round((q - q[0]) / step).astype(int))] = p
    diff = np.abs(full - g)
    return GaussianDistance(mean, var, float(diff.max()), float(0.5 * diff.sum()))


# ----------------------------------------------------------------------------- charged moments
@dataclass(frozen=True)
class MomentFit:
    """Gaussian fit log|Z_n(alpha)/Z_n(0)| = -alpha^2 sigma_n^2/2 over 0 < |alpha| <= alpha_max."""

    n: float
    sigma_sq: float
    residual_rms: float
    alpha_max: float
    points: int

    def to_dict(self) -> dict:
        d = asdict(self)
        d["n"] = _label(self.n)
        return d


def fit_charged_moment(alphas, moments, n: float = 1.0, alpha_max: float = 1.0) -> MomentFit:
    """sigma_n^2 from the small-alpha decay of |Z_n(alpha)/Z_n(0)|.

    Gaussian prediction (Goldstein and Sela 2018): sigma_n^2 = sigma^2/n. The modulus removes the
    phase e^{i alpha <q>_n}; the fit is one-parameter least squares through the origin.
    """
    a = np.asarray(alphas, dtype=float)
    z = np.abs(np.asarray(moments))
    ok = (np.abs(a) > 0) & (np.abs(a) <= alpha_max) & (z > 0)
    if ok.sum() < 1:
        return MomentFit(n, math.nan, math.nan, alpha_max, 0)
    x, y = -0.5 * a[ok] ** 2, np.log(z[ok])
    s2 = float(np.dot(x, y) / np.dot(x, x))
    return MomentFit(n, s2, float(np.sqrt(np.mean((y - s2 * x) ** 2))), alpha_max, int(ok.sum()))
