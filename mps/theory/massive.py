"""Massive free Dirac and complex-scalar fields: charged moments, p(q), S_n(q) and their fits.

Source: Murciano, Di Giulio and Calabrese, "Entanglement and symmetry resolution in two
dimensional free quantum field theories", JHEP 08 (2020) 073 (MDC). MDC treat an interval (two
entangling points); our block is the left end of an open chain, cut once, so every coefficient
of log xi below is half of MDC's (each entangling point contributes equally at leading order).
Equation numbers of MDC were not checked; their forms are quoted from memory.

Derivation (checked numerically in tests/theory/test_massive.py). For a block much longer than
the correlation length xi, cut far from the ends, the entanglement Hamiltonian of a free field
has an equally spaced single-particle spectrum (corner transfer matrix: Peschel, Kaulke and
Legeza, Ann. Phys. (Leipzig) 8, 153 (1999); Peschel and Eisler, J. Phys. A 42, 504003 (2009),
from memory), spacing eps. Dirac: levels eps (j + d), j in Z (particles above zero, holes below;
d = 1/2 is particle-hole symmetric); complex scalar: eps (k + d), k >= 0, each a particle (+1) and
an antiparticle (-1) boson. With level density 1/eps the occupation entropies integrate to pi^2/6
per sign of fermion level and pi^2/3 per boson species: S = pi^2/(3 eps) (Dirac), 2 pi^2/(3 eps)
(scalar), and S = (c/6) log xi (c = 1 Dirac, c = 2 scalar) fixes

    1/eps = log(xi)/(2 pi^2)                                                    (*)

for both fields. The same integrals with Re Li_2(e^{it}) = pi^2/6 - pi t/2 + t^2/4 (0 <= t <= 2pi) give

    Dirac:  log Z_n(a)/Z_n(0) = -(1/n) (a/2pi)^2 log xi                 (|a| <= pi)
    scalar: log Z_n(a)/Z_n(0) = -(1/n) (|a|/2pi)(1 - |a|/2pi) log xi    (|a| <= pi),

i.e. -(2 pi^2/(n eps)) f(a) (modulus; the phase e^{i a <q>} dropped), as MDC's Gaussian Dirac
moments and the |a|-cusp of their boson (from memory). The finite-eps "ladder" sums are exact for
an equally spaced spectrum and show what the integrals hide:

- Dirac: by the Jacobi triple product Z_n(q) is proportional to exp(-n eps (q - 1/2 + d)^2/2) on
  the integers, so the ladder moment is the 2pi-periodised Gaussian (the leading form plus images
  of relative size e^{-2pi(pi - |a|)/(n eps)}) and equipartition is EXACT at every eps (S_n(q)
  independent of q); p(q) is a discrete Gaussian of variance ~ 1/eps.
- scalar (d = 1/2): sum_k log[(k+1/2)^2/((k+1/2)^2 + z^2)] = -log cosh(pi z) rounds the cusp on
  |a| ~ n eps; uniformly in a, up to O(e^{-2pi^2/(n eps)}) (checked numerically in the tests),
  log Z_n(a)/Z_n(0) = -log cosh(pi a/(n eps)) + a^2/(2 n eps), i.e. the leading form plus log 2
  for |a| >> n eps. On the scale |a| ~ eps that decides p(q) the a^2 term is O(eps); the Fourier
  transform of the sech gives the scaling limit p(q) = (eps/2pi) sech(eps q/2) (excess kurtosis 2,
  not Gaussian; variance pi^2/eps^2 ~ log^2 xi), Z_n(q)/Z_n(0) = (n eps/2pi) sech(n eps q/2), so

    S_n(q) - S_n = log(eps/2pi) + log(n)/(1-n) + [n log cosh(eps q/2) - log cosh(n eps q/2)]/(1-n)

  (n -> 1: log(eps/2pi) - 1 + y tanh y - log cosh y, y = eps q/2). Its q-dependence, the leading
  equipartition breaking, is n eps^2 q^2/8 = n pi^4 q^2/(2 log^2 xi) for |q| << log xi and
  saturates at log 2 for |q| >> log xi. The q-independent part is -log(log xi/pi), twice the
  Dirac value -(1/2) log(log xi/pi) (whether MDC's boson has the same coefficient was not checked).
  The transform of the un-rounded leading cusp is Lorentzian-like with 1/q^2 tails, NOT this
  limit: the rounding region |a| < n eps decides p(q) at |q| ~ log xi.
- Dirac equipartition breaking: none from an equally spaced spectrum; with a non-universal
  n-dependent constant, sigma_n^2 = (log xi + g_n)/(2 pi^2 n), the Gaussian transform gives
  S_n(q) - S_n = (1/2) log(eps/2pi) + log(n)/(2(1-n)) + pi^2 n (g_n - g_1) q^2/((1-n) log^2 xi).

Lattice (exact engines, tests): the staggered fermion chain (left half, half filling) and the
harmonic chain have equally spaced levels, d = 3/4 (same |Z_n| as 1/4) and d = 1/2; measured
2 pi^2/eps = log(4 xi) + 0.083/xi^2 and log(8 xi) + 0.021/xi^2 (xi = 5..21, xi as defined below).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

FIELDS = ("dirac", "scalar")
LEVEL_CUTOFF = 40.0      # ladder levels with n*energy above this contribute < e^-40 and are dropped
NODES_PER_PANEL = 24     # Gauss-Legendre nodes per panel of the alpha integral
SECTOR_FLOOR = 1e-8      # p(q) below which S_n(q) is reported as NaN (Fourier error ~1e-15)


# ----------------------------------------------------------------------------- correlation lengths
def dirac_correlation_length(t: float, mu_stag: float) -> float:
    """xi of the chain -t sum (c+_j c_j+1 + h.c.) + mu_stag sum (-1)^j n_j: sinh(1/xi) = mu_stag/(2t).

    E^2 = mu_stag^2 + 4 t^2 cos^2 k vanishes at k = pi/2 + i/xi, the pole that sets the decay of
    <c+_0 c_r> ~ r^(-1/2) e^{-r/xi} (square-root branch point). Infinite at mu_stag = 0.
    """
    t, mu = abs(float(t)), abs(float(mu_stag))
    if t == 0.0:
        raise ValueError("the hopping t must be non-zero")
    return math.inf if mu == 0.0 else 1.0 / math.asinh(mu / (2.0 * t))


def scalar_correlation_length(m: float) -> float:
    """xi of the harmonic chain omega^2 = m^2 + 4 sin^2(k/2): 2 sinh(1/(2 xi)) = m (pole at k = i/xi)."""
    m = abs(float(m))
    return math.inf if m == 0.0 else 1.0 / (2.0 * math.asinh(m / 2.0))


def ladder_spacing(xi) -> np.ndarray:
    """eps = 2 pi^2 / log xi, the level spacing (*) that reproduces S = (c/6) log xi."""
    return 2.0 * np.pi**2 / np.log(np.asarray(xi, dtype=float))


# ----------------------------------------------------------------------------- charged moments
def _check_field(field: str) -> str:
    if field not in FIELDS:
        raise ValueError(f"field must be one of {FIELDS}, got {field!r}")
    return field


def shape(field: str, alpha) -> np.ndarray:
    """f_D = (a/2pi)^2 or f_S = (|a|/2pi)(1 - |a|/2pi), a reduced to [-pi, pi)."""
    x = np.abs(np.mod(np.asarray(alpha, dtype=float) + np.pi, 2.0 * np.pi) - np.pi) / (2.0 * np.pi)
    return x**2 if _check_field(field) == "dirac" else x * (1.0 - x)


def log_moment_leading(field: str, alpha, n: float, xi: float) -> np.ndarray:
    """log |Z_n(a)/Z_n(0)| = -(1/n) f(a) log xi, the leading form (see module docstring)."""
    return -shape(field, alpha) * math.log(xi) / n


def log_moment_ladder(field: str, alpha, n: float, eps: float, offset: float = 0.5,
                      dn: bool = False):
    """Exact log Z_n(a)/Z_n(0) of the equally spaced ladder (complex; charge counted from the filled
    negative levels). Dirac: levels eps (j + offset), j in Z, 0 <= offset < 1, per level of energy
    |u| (x = e^{-n|u|}) log[(1 + x e^{+-ia})/(1 + x)] (+ particles above zero, - holes below);
    scalar: levels eps (k + offset), k >= 0, 0 < offset <= 1, per level 2 log(1 - x) - log(1 - x
    e^{ia}) - log(1 - x e^{-ia}). ``dn``: also d/dn of the same. Levels with n|u| > 40 dropped.
    """
    if not eps > 0 or not n > 0:
        raise ValueError(f"eps and n must be positive, got eps={eps}, n={n}")
    k = np.arange(int(math.ceil(LEVEL_CUTOFF / (n * eps))) + 2)
    if _check_field(field) == "dirac":
        if not 0.0 <= offset < 1.0:
            raise ValueError(f"Dirac ladder offset must be in [0, 1), got {offset}")
        u = np.concatenate([eps * (k + offset), eps * (k + 1.0 - offset)])
        sign = np.concatenate([np.ones(k.size), -np.ones(k.size)])
    else:
        if not 0.0 < offset <= 1.0:
            raise ValueError(f"scalar ladder offset must be in (0, 1], got {offset}")
        u, sign = eps * (k + offset), None
    x = np.exp(-n * u)
    a = np.atleast_1d(np.asarray(alpha, dtype=float))
    val, der = np.empty(a.size, dtype=complex), np.empty(a.size, dtype=complex)
    step = max(1, 2_000_000 // u.size)     # bounded memory: alpha in chunks
    for s in range(0, a.size, step):
        ph = np.exp(1j * a[s:s + step, None])
        if sign is not None:
            z = x * np.where(sign > 0, ph, ph.conj())
            val[s:s + step] = (np.log1p(z) - np.log1p(x)).sum(axis=1)
            der[s:s + step] = (u * x / (1.0 + x) - u * z / (1.0 + z)).sum(axis=1)
        else:
            zp, zm = x * ph, x * ph.conj()
            val[s:s + step] = (2.0 * np.log1p(-x) - np.log1p(-zp) - np.log1p(-zm)).sum(axis=1)
            der[s:s + step] = (2 * u * x / (1 - x) - u * zp / (1 - zp) - u * zm / (1 - zm)).sum(axis=1)
    return (val, der) if dn else val


# ----------------------------------------------------------------------------- Fourier transform
@dataclass(frozen=True)
class MassiveResolved:
    """p(q) and S_n(q) - S_n from charged moments, charges relative to the reference filling.

    ``missing`` = 1 - sum of p over ``charges`` (weight beyond the range, plus Fourier error);
    ``entropy_shift[i, j]`` = S_n(q_j) - S_n for n = renyi[i] (NaN where p < SECTOR_FLOOR).
    """

    field: str
    form: str
    renyi: tuple[float, ...]
    charges: np.ndarray
    probability: np.ndarray
    entropy_shift: np.ndarray
    missing: float

    @property
    def number_entropy(self) -> float:
        """S_number = -sum_q p log p (Lukin et al., Science 364, 256 (2019))."""
        p = self.probability[self.probability > 0]
        return float(-np.dot(p, np.log(p)))

    @property
    def variance(self) -> float:
        """kappa_2 of p(q): ~1/eps (Dirac), ~pi^2/eps^2 (scalar, the sech law)."""
        d = self.charges - np.dot(self.probability, self.charges)
        return float(np.dot(self.probability, d**2))

    @property
    def excess_kurtosis(self) -> float:
        """kappa_4/kappa_2^2 of p(q): 0 for a Gaussian, 2 for the sech law of the scalar."""
        d = self.charges - np.dot(self.probability, self.charges)
        return float(np.dot(self.probability, d**4)) / self.variance**2 - 3.0


def _alpha_nodes(qmax: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [0, pi]: panels refined geometrically towards a = 0
    (the cusp) and no wider than 24/qmax (at most ~4 periods of cos(qa) per 24-node panel)."""
    width = min(0.25, 24.0 / max(qmax, 1))
    edges = np.concatenate([[0.0], np.pi * 2.0 ** -np.arange(30, 0, -1),
                            np.arange(0.5, np.ceil(np.pi / width)) * width, [np.pi]])
    edges = np.unique(edges[edges <= np.pi])
    x, w = np.polynomial.legendre.leggauss(NODES_PER_PANEL)
    lo, hi = edges[:-1, None], edges[1:, None]
    return (0.5 * (hi - lo) * x + 0.5 * (hi + lo)).ravel(), (0.5 * (hi - lo) * w).ravel()


def _sector_transform(field, form, xi, eps, offset, qmax):
    """A function n -> (z_n(q), d z_n(q)/dn) on q = -qmax..qmax, z_n(q) = Z_n(q)/Z_n(0)."""
    q = np.arange(-qmax, qmax + 1)
    if form == "ladder":
        # analytic and 2pi-periodic: the N-point trapezoid rule is exact up to aliasing,
        # z(q) + sum_{m != 0} z(q + m N), negligible once N >= 4 qmax
        N = max(64, 1 << int(math.ceil(math.log2(4 * qmax + 1))))
        a = 2.0 * np.pi * np.arange(N) / N

        def transform(n):
            lz, d = log_moment_ladder(field, a, n, eps, offset, dn=True)
            z = np.exp(lz)
            return np.real(np.fft.fft(z)[q % N]) / N, np.real(np.fft.fft(z * d)[q % N]) / N
        return q, transform
    a, w = _alpha_nodes(qmax)
    step = max(1, 4_000_000 // a.size)      # bounded memory: charges in chunks

    def transform(n):                       # leading forms are real and even in a
        lz = log_moment_leading(field, a, n, xi)
        z = np.exp(lz) * w / np.pi
        rows = np.array([z, -z * lz / n])
        out = [rows @ np.cos(np.outer(a, q[s:s + step])) for s in range(0, q.size, step)]
        return tuple(np.concatenate(out, axis=1))
    return q, transform


def resolve_moments(field: str, form: str, renyi=(1.0, 2.0), *, xi: float | None = None,
                    eps: float | None = None, offset: float = 0.5, qmax: int | None = None
                    ) -> MassiveResolved:
    """p(q), S_n(q) - S_n by Fourier transform of the leading (``xi``) or ladder (``eps``) moments.

    z_n(q) = Z_n(q)/Z_n(0) = (1/2pi) int_{-pi}^{pi} Z_n(a)/Z_n(0) e^{-iaq} da; p = z_1. Ladder: FFT
    (trapezoid, exact up to aliasing); leading forms: Gauss-Legendre panels on [0, pi] (even
    integrand). Absolute error ~1e-15 in both cases (checked against the exact discrete Gaussian
    of the Dirac ladder). S_n(q) - S_n = [log z_n(q) - n log p(q)]/(1 - n); at n = 1,
    S_1(q) - S_1 = log p(q) - (dz_n/dn)(q)/p(q) with the exact n-derivative of the moments.
    Reported where p > SECTOR_FLOOR and z_n > 1e-10 (NaN elsewhere; error <~ 1e-6). The leading
    forms drop the mean charge; the leading scalar form has p(q) ~ 1/q^2 tails (its cusp), reported
    through ``missing``. Default ``qmax``: the ladder's p(q) down to ~e^-40, 8 widths otherwise.
    """
    _check_field(field)
    if form not in ("leading", "ladder"):
        raise ValueError(f"form must be 'leading' or 'ladder', got {form!r}")
    if not ((xi or 0) > 1 if form == "leading" else (eps or 0) > 0):
        raise ValueError(f"the {form} form needs xi > 1 or eps > 0 respectively, got xi={xi}, eps={eps}")
    width = math.log(xi) / (2 * math.pi**2) if form == "leading" else 1.0 / eps
    ns = tuple(float(n) for n in renyi)
    if any(not n > 0 or math.isinf(n) for n in ns):
        raise ValueError(f"Renyi indices must be finite and positive, got {ns}")
    if qmax is None:
        if field == "dirac":
            reach = math.sqrt(2 * LEVEL_CUTOFF * width) if form == "ladder" else 8 * math.sqrt(width)
        else:
            reach = 2 * LEVEL_CUTOFF * width if form == "ladder" else 8 * math.pi * width
        qmax = int(math.ceil(reach)) + 3
    q, transform = _sector_transform(field, form, xi, eps, offset, int(qmax))
    p, dp = transform(1.0)
    shift = np.full((len(ns), q.size), np.nan)
    ok = p > SECTOR_FLOOR
    for i, n in enumerate(ns):
        if n == 1.0:
            shift[i, ok] = np.log(p[ok]) - dp[ok] / p[ok]
        else:
            zn = transform(n)[0]
            good = ok & (zn > 1e-10)
            shift[i, good] = (np.log(zn[good]) - n * np.log(p[good])) / (1.0 - n)
    return MassiveResolved(field, form, ns, q, p, shift, float(1.0 - p.sum()))


# ----------------------------------------------------------------------------- scaling limits
def scaling_probability(field: str, q, xi: float) -> np.ndarray:
    """Leading p(q) (eps = 2pi^2/log xi): sqrt(eps/2pi) e^{-eps q^2/2} (Dirac), (eps/2pi) sech(eps q/2)."""
    e, q = float(ladder_spacing(xi)), np.asarray(q, dtype=float)
    if _check_field(field) == "dirac":
        return np.sqrt(e / (2 * np.pi)) * np.exp(-e * q**2 / 2)
    return e / (2 * np.pi) / np.cosh(e * q / 2)


def equipartition_breaking(field: str, q, n: float, xi: float, g_n: float = 0.0,
                           g_1: float = 0.0) -> np.ndarray:
    """q-dependent part of S_n(q) - S_n at leading order (module docstring; eps = 2pi^2/log xi).

    scalar: [n log cosh(eps q/2) - log cosh(n eps q/2)]/(1 - n) (n = 1: y tanh y - log cosh y),
    ~ n pi^4 q^2/(2 log^2 xi) for small q. Dirac: pi^2 n (g_n - g_1) q^2/((1 - n) log^2 xi), zero
    for an equally spaced spectrum (g_n = g_1); at n = 1 ``g_n`` is read as dg_n/dn at n = 1,
    giving -pi^2 g_n q^2/log^2 xi.
    """
    q, b = np.asarray(q, dtype=float), math.log(xi)
    if _check_field(field) == "dirac":
        if n == 1.0:
            return -np.pi**2 * g_n * q**2 / b**2
        return np.pi**2 * n * (g_n - g_1) * q**2 / ((1 - n) * b**2)
    y = float(ladder_spacing(xi)) * np.abs(q) / 2.0

    def logcosh(v):
        return v + np.log1p(np.exp(-2.0 * v)) - math.log(2.0)

    if n == 1.0:
        return y * np.tanh(y) - logcosh(y)
    return (n * logcosh(y) - logcosh(n * y)) / (1.0 - n)


def entropy_shift_scaling(field: str, q, n: float, xi: float) -> np.ndarray:
    """S_n(q) - S_n at leading order: Dirac (1/2) log(eps/2pi) + log(n)/(2(1-n)); scalar
    log(eps/2pi) + log(n)/(1-n) + the q-dependent term of :func:`equipartition_breaking`."""
    e = float(ladder_spacing(xi))
    shift = -1.0 if n == 1.0 else math.log(n) / (1.0 - n)
    if _check_field(field) == "dirac":
        return np.full(np.shape(q), 0.5 * (math.log(e / (2 * np.pi)) + shift))
    return math.log(e / (2 * np.pi)) + shift + equipartition_breaking(field, q, n, xi)


def number_entropy_scaling(field: str, xi: float) -> float:
    """Leading S_number = -sum p log p: (1/2) log(2 pi e/eps) for the Gaussian, log(4 pi/eps) for the
    sech law (its differential entropy is log 2 + (2/pi) int_0^inf sech y log cosh y dy = log 4)."""
    e = float(ladder_spacing(xi))
    if _check_field(field) == "dirac":
        return 0.5 * math.log(2 * math.pi * math.e / e)
    return math.log(4 * math.pi / e)
