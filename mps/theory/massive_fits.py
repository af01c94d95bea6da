"""Fits of massive-field forms to data: the flux dependence of log Z_n(alpha) at one cut (Dirac
against complex scalar) and the coefficient across a mass series (slope in log xi).

Forms and their derivation: :mod:`mps.theory.massive` (Murciano, Di Giulio and Calabrese, JHEP 08
(2020) 073, adapted to one entangling point).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from mps.theory.massive import log_moment_ladder, shape

LADDER_EPS_RANGE = (0.05, 60.0)   # spacings searched by the ladder fit (log xi from ~0.33 to ~400)
VERDICT_MARGIN = 0.5     # the better form must halve the other's relative residual


# ----------------------------------------------------------------------------- fits
@dataclass(frozen=True)
class AlphaFit:
    """Fit of log|Z_n(a)/Z_n(0)| at one cut by the Dirac and the scalar form.

    ``b_*`` is the coefficient of -f(a) (field theory: log xi / n); for the ladder forms b =
    2 pi^2/(n eps) with eps the fitted spacing (``eps_*``; for the leading forms the eps that
    the same b implies). ``rel_*`` = rms residual / ``signal`` (rms of the data). ``verdict``: the
    form with the smaller relative residual if it is at most ``rel_tol`` and at most
    VERDICT_MARGIN times the other's, else "neither" (both large, or too close to tell apart).
    Leading forms on exact lattice data at xi <= 50 leave 10-20 % (finite eps: periodic images of
    the Dirac Gaussian, the rounded scalar cusp); the default rel_tol 0.2 is chosen to accept
    that, not more. Exact ladders fit lattice data to ~1e-8.
    """

    n: float
    form: str
    b_dirac: float
    b_scalar: float
    eps_dirac: float
    eps_scalar: float
    rel_dirac: float
    rel_scalar: float
    signal: float
    verdict: str
    alpha_min: float
    alpha_max: float
    rel_tol: float
    points: int

    def to_dict(self) -> dict:
        return asdict(self)


def fit_alpha(alphas, moments, n: float = 1.0, form: str = "leading", alpha_max: float = np.pi,
              alpha_min: float = 0.0, rel_tol: float = 0.2, offset_dirac: float = 0.5,
              offset_scalar: float = 0.5) -> AlphaFit:
    """b for each field from log|Z_n(a)/Z_n(0)| over alpha_min < |a| <= alpha_max.

    "leading": one-parameter least squares through the origin, y = -b f(a). "ladder": y = Re log
    of the ladder moment, one parameter eps (bounded search over LADDER_EPS_RANGE after a coarse
    scan), the offsets given. The scalar's cusp is rounded for |a| < n eps: with the leading
    form, choose alpha_min of a few n eps where that is below pi; otherwise use the ladder.
    """
    a = np.abs(np.asarray(alphas, dtype=float))
    y = np.log(np.abs(np.asarray(moments)))
    keep = (a > alpha_min) & (a <= alpha_max) & np.isfinite(y)
    a, y = a[keep], y[keep]
    if a.size < 3:
        raise ValueError(f"fit_alpha: {a.size} alpha values in ({alpha_min}, {alpha_max}]; need at least 3")
    signal = float(np.sqrt(np.mean(y**2)))
    if signal == 0.0:
        raise ValueError("fit_alpha: the moments do not depend on alpha (no signal)")
    out = {}
    for field, off in (("dirac", offset_dirac), ("scalar", offset_scalar)):
        if form == "leading":
            f = shape(field, a)
            b = float(-np.dot(f, y) / np.dot(f, f))
            res, eps = y + b * f, 2 * np.pi**2 / (n * b) if b > 0 else math.inf
        elif form == "ladder":
            def sse(t, field=field, off=off):
                return float(np.sum((y - log_moment_ladder(field, a, n, math.exp(t), off).real) ** 2))
            lo, hi = np.log(LADDER_EPS_RANGE)
            grid = np.linspace(lo, hi, 41)
            i = int(np.argmin([sse(t) for t in grid]))
            t = minimize_scalar(sse, bounds=(grid[max(i - 1, 0)], grid[min(i + 1, 40)]),
                                method="bounded", options={"xatol": 1e-10}).x
            eps = math.exp(t)
            b, res = 2 * np.pi**2 / (n * eps), y - log_moment_ladder(field, a, n, eps, off).real
        else:
            raise ValueError(f"form must be 'leading' or 'ladder', got {form!r}")
        out[field] = (b, eps, float(np.sqrt(np.mean(res**2))) / signal)
    (bd, ed, rd), (bs, es, rs) = out["dirac"], out["scalar"]
    best, r_best, r_other = ("dirac", rd, rs) if rd <= rs else ("scalar", rs, rd)
    verdict = best if (r_best <= rel_tol and r_best <= VERDICT_MARGIN * r_other) else "neither"
    return AlphaFit(float(n), form, bd, bs, ed, es, rd, rs, signal, verdict, float(alpha_min),
                    float(alpha_max), float(rel_tol), int(a.size))


@dataclass(frozen=True)
class MassSeriesFit:
    """b_n(xi) = slope log xi + const over a mass series; field theory: slope = 1/n.

    ``local_slopes[i]`` = (b_{i+1} - b_i)/(log xi_{i+1} - log xi_i) at ``local_log_xi[i]`` (midpoint).
    """

    n: float
    slope: float
    const: float
    expected: float
    residual_rms: float
    local_slopes: tuple[float, ...]
    local_log_xi: tuple[float, ...]
    points: int

    def to_dict(self) -> dict:
        return {k: list(v) if isinstance(v, tuple) else v for k, v in asdict(self).items()}


def fit_mass_series(xis, b_values, n: float = 1.0) -> MassSeriesFit:
    """Least-squares line b = s log xi + const through (log xi, b), sorted by xi, and local slopes."""
    x, b = np.asarray(xis, dtype=float), np.asarray(b_values, dtype=float)
    if x.shape != b.shape or x.ndim != 1:
        raise ValueError(f"xis and b_values must be 1-D of one length, got {x.shape}, {b.shape}")
    ok = np.isfinite(x) & np.isfinite(b) & (x > 0)
    x, b = x[ok], b[ok]
    if np.unique(x).size < 3:
        raise ValueError(f"fit_mass_series: {np.unique(x).size} distinct correlation lengths; "
                         "need at least 3")
    order = np.argsort(x)
    lx, b = np.log(x[order]), b[order]
    s, c = np.polyfit(lx, b, 1)
    res = b - (s * lx + c)
    good = np.diff(lx) > 0
    local = (np.diff(b) / np.where(good, np.diff(lx), 1.0))[good]
    mid = (0.5 * (lx[1:] + lx[:-1]))[good]
    return MassSeriesFit(float(n), float(s), float(c), 1.0 / float(n), float(np.sqrt(np.mean(res**2))),
                         tuple(map(float, local)), tuple(map(float, mid)), int(lx.size))
