"""Charge-resolved entanglement of one cut, computed from sector-labelled Schmidt values.

A U(1)^k-symmetric matrix-product state stores on every bond the Schmidt values s grouped by
the integer charge vector q of the left block. The reduced density matrix of the left block is
then rho_A = sum_q p(q) rho_A(q), block-diagonal in q with eigenvalues lambda = s^2 / sum s^2,
so every charge-resolved quantity follows from the Schmidt values alone; no dense rho_A is built.

Definitions (Goldstein and Sela, PRL 120, 200602 (2018); Xavier, Alcaraz and Sierra,
PRB 98, 041106 (2018); Lukin et al., Science 364, 256 (2019)):

- p(q) = sum_{lambda in q} lambda;
- S_n = log(sum lambda^n) / (1 - n), S_1 = -sum lambda log lambda, S_inf = -log max lambda;
- S_n(q) = Renyi entropy of the normalised sector spectrum lambda / p(q);
- Z_n(alpha) / Z_n(0) = Tr[rho_A^n e^{i alpha Q_A}] / Tr[rho_A^n]
  = sum_q e^{i alpha Q(q)} P_n(q) / sum_q P_n(q), with P_n(q) = sum_{lambda in q} lambda^n
  and Q(q) = unit * q + offset the physical charge of the block.

Schmidt values need not be normalised: they are divided by sqrt(sum of all s^2) first, so the
result describes the normalised state. All sums are done on logarithms of the weights
(log-sum-exp), so very small Schmidt values neither underflow nor lose precision when powered.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np
from scipy.special import logsumexp

from mps.analysis.resolved import CutResolved, JointResolved

Spectrum = Mapping[tuple[int, ...], np.ndarray]

# Below this |n - 1| the Renyi entropy is evaluated as log1p(sum lambda expm1((n-1) log lambda))
# / (1 - n), which stays accurate as n -> 1; above it the plain log-sum-exp form is as accurate.
_NEAR_ONE = 0.5


def default_alphas(points: int = 65) -> np.ndarray:
    """``points`` fluxes evenly spaced on [-pi, pi], both ends included."""
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) or points < 2:
        raise ValueError(f"points must be an integer >= 2, got {points!r}")
    return np.linspace(-np.pi, np.pi, int(points))


def renyi_entropy(log_weights: np.ndarray, n: float) -> float:
    """Renyi entropy S_n of the distribution proportional to ``exp(log_weights)``.

    S_n = log(sum pi^n) / (1 - n) with pi the normalised weights; n = 1 gives
    -sum pi log pi and n = inf gives -log max pi (Renyi, Proc. 4th Berkeley Symp. 1961).
    Near n = 1 the form log1p(sum pi expm1((n - 1) log pi)) / (1 - n) is used: the numerator is
    then a sum of same-sign terms, so S_{1 +- 1e-7} keeps full relative precision.

    Parameters
    ----------
    log_weights : (m,) finite logarithms of unnormalised positive weights, m >= 1.
    n : Renyi index, n > 0 or ``np.inf``.
    """
    x = np.asarray(log_weights, dtype=float)
    log_pi = x - logsumexp(x)
    if n == 1.0:
        pi = np.exp(log_pi)
        return float(-np.dot(pi, log_pi) / pi.sum())
    if np.isinf(n):
        return float(-log_pi.max())
    if abs(n - 1.0) < _NEAR_ONE:
        pi = np.exp(log_pi)
        t = np.dot(pi, np.expm1((n - 1.0) * log_pi)) / pi.sum()
        return float(np.log1p(t) / (1.0 - n))
    return float(logsumexp(n * log_pi) / (1.0 - n))


def resolve_cut(
    schmidt: Spectrum,
    cut: int,
    renyi: Sequence[float],
    alphas: np.ndarray,
    units: tuple[float, ...],
    offsets: tuple[float, ...] | None = None,
    component: int = 0,
    floor: float = 1e-12,
    *,
    degeneracy_tol: float = 1e-12,
) -> CutResolved:
    """Resolve the entanglement of one cut by one component of the block charge.

    Parameters
    ----------
    schmidt : integer charge vector (length k) of the left block -> Schmidt values of that
        sector (not squared, any order, zeros allowed, any overall normalisation).
    cut : number of sites in the left block (stored in the record).
    renyi : Renyi indices, each n > 0 or ``np.inf``.
    alphas : (nalpha,) fluxes for the charged moments (usually :func:`default_alphas`).
    units, offsets : physical charge = units[c] * q[c] + offsets[c]; offsets default to 0.
    component : index c of the charge to resolve by; sectors with equal q[c] are merged.
    floor : sectors with p(q) < floor (and empty sectors) get NaN sector entropies.
    degeneracy_tol : for n = inf the moments keep only the levels with
        lambda >= (1 - degeneracy_tol) max lambda, each with equal weight (the n -> inf limit
        of P_n(q) / sum P_n).

    Returns
    -------
    CutResolved
        Every charge present as a key is reported, also when its sector holds no weight
        (p = 0, count 0, NaN entropies). ``counts`` counts the non-zero Schmidt values.
    """
    spec, u, o = _clean(schmidt, units, offsets)
    k = u.size
    if isinstance(component, bool) or not isinstance(component, (int, np.integer)):
        raise ValueError(f"component must be an integer charge index, got {component!r}")
    if not 0 <= component < k:
        raise ValueError(f"component must be in 0..{k - 1} for {k} charges, got {component}")
    a = _clean_alphas(alphas)
    labels, groups = _group(spec, lambda key: (key[component],))
    phys = u[component] * np.array([lab[0] for lab in labels], float) + o[component]
    order = np.argsort(phys)
    table = _tables(
        [groups[i] for i in order], phys[order, None], _clean_renyi(renyi), a[:, None],
        _clean_floor(floor), degeneracy_tol,
    )
    return CutResolved(cut=_clean_cut(cut), charges=phys[order], alphas=a, **table)


def resolve_cut_joint(
    schmidt: Spectrum,
    cut: int,
    renyi: Sequence[float],
    units: tuple[float, ...],
    offsets: tuple[float, ...] | None = None,
    fluxes: np.ndarray | None = None,
    floor: float = 1e-12,
    *,
    degeneracy_tol: float = 1e-12,
) -> JointResolved:
    """Resolve the entanglement of one cut by the full charge vector (all k components).

    As :func:`resolve_cut`, but sectors are the distinct charge vectors and the moments are
    taken at flux vectors ``fluxes`` of shape (nalpha, k) (none if omitted), with the phase
    e^{i sum_c fluxes[a, c] Q_c}.
    """
    spec, u, o = _clean(schmidt, units, offsets)
    k = u.size
    f = np.zeros((0, k)) if fluxes is None else np.asarray(fluxes, dtype=float)
    if f.ndim != 2 or f.shape[1] != k or not np.all(np.isfinite(f)):
        raise ValueError(f"fluxes must be a finite (nalpha, {k}) array, got shape {f.shape}")
    labels, groups = _group(spec, lambda key: key)
    order = sorted(range(len(labels)), key=lambda i: labels[i])
    phys = u * np.array([labels[i] for i in order], float).reshape(-1, k) + o
    table = _tables(
        [groups[i] for i in order], phys, _clean_renyi(renyi), f, _clean_floor(floor),
        degeneracy_tol,
    )
    return JointResolved(cut=_clean_cut(cut), charges=phys, fluxes=f, **table)


def resolve_chain(
    schmidt_per_cut: Sequence[Spectrum],
    renyi: Sequence[float],
    alphas: np.ndarray,
    units: tuple[float, ...],
    offsets: tuple[float, ...] | None = None,
    offset_per_site: tuple[float, ...] | None = None,
    component: int = 0,
    floor: float = 1e-12,
    first_cut: int = 1,
    *,
    degeneracy_tol: float = 1e-12,
) -> list[CutResolved]:
    """Resolve consecutive cuts ``first_cut, first_cut + 1, ...`` of a chain.

    The offset of cut l is ``offsets + l * offset_per_site`` (e.g. per-site offset -1/2 when the
    stored charge counts particles but the physical charge is S^z = n - 1/2).
    """
    k = len(units)
    base = np.zeros(k) if offsets is None else np.asarray(offsets, float)
    step = np.zeros(k) if offset_per_site is None else np.asarray(offset_per_site, float)
    if base.shape != (k,) or step.shape != (k,):
        raise ValueError(f"offsets and offset_per_site need {k} entries, one per charge")
    return [
        resolve_cut(spec, first_cut + i, renyi, alphas, units,
                    tuple(base + (first_cut + i) * step), component, floor,
                    degeneracy_tol=degeneracy_tol)
        for i, spec in enumerate(schmidt_per_cut)
    ]


def charge_moments(
    schmidt: Spectrum, units: tuple[float, ...], offsets: tuple[float, ...] | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Mean vector (k,) and covariance matrix (k, k) of the block charges under p(q).

    With k charges (e.g. N and S^z of a spinful chain) the diagonal holds each charge's block
    variance, whose growth with log l_eff gives that charge's Luttinger parameter; the
    off-diagonal entries vanish when the state is symmetric under the exchange of species.
    """
    spec, u, o = _clean(schmidt, units, offsets)
    keys = list(spec)
    logw = [_log_weights(spec[q]) for q in keys]
    logp = np.array([logsumexp(w) if w.size else -np.inf for w in logw])
    p = np.exp(logp - logsumexp(logp))
    q = u * np.array(keys, dtype=float).reshape(-1, u.size) + o
    mean = p @ q
    d = q - mean
    return mean, (p[:, None] * d).T @ d


def entanglement_spectrum(
    schmidt: Spectrum,
    units: tuple[float, ...],
    offsets: tuple[float, ...] | None = None,
    component: int = 0,
    levels: int = 20,
) -> list[tuple[float, int, float]]:
    """Lowest ``levels`` entanglement energies -log lambda of every sector.

    lambda are the squared Schmidt values normalised over all sectors; zeros are skipped.
    Returns rows ``(physical charge, level, -log lambda)`` sorted by charge, then level
    (level 0 is the largest lambda of the sector), as written to spectrum.csv.
    """
    spec, u, o = _clean(schmidt, units, offsets)
    if isinstance(levels, bool) or not isinstance(levels, (int, np.integer)) or levels < 1:
        raise ValueError(f"levels must be an integer >= 1, got {levels!r}")
    if isinstance(component, bool) or not isinstance(component, (int, np.integer)) \
            or not 0 <= component < u.size:
        raise ValueError(f"component must be in 0..{u.size - 1}, got {component!r}")
    labels, groups = _group(spec, lambda key: (key[component],))
    log_total = logsumexp(_log_weights(np.concatenate(groups)))
    rows = []
    for lab, s in sorted(zip(labels, groups), key=lambda t: t[0]):
        energies = np.sort(log_total - _log_weights(s))[:levels]
        charge = float(u[component] * lab[0] + o[component])
        rows.extend((charge, j, float(e)) for j, e in enumerate(energies))
    return rows


# --- internals --------------------------------------------------------------------------------


def _log_weights(s: np.ndarray) -> np.ndarray:
    """log s^2 of the non-zero Schmidt values (2 log s avoids underflow of s^2)."""
    return 2.0 * np.log(s[s > 0])


def _tables(
    groups: list[np.ndarray],
    phys: np.ndarray,
    renyi: tuple[float, ...],
    fluxes: np.ndarray,
    floor: float,
    tol: float,
) -> dict:
    """Probabilities, counts, entropies and moments for sectors ``groups`` at charges ``phys``."""
    if not 0.0 <= tol < 1.0:
        raise ValueError(f"degeneracy_tol must be in [0, 1), got {tol}")
    logw = [_log_weights(s) for s in groups]
    allw = np.concatenate(logw)
    log_total = logsumexp(allw)
    lmax = allw.max()
    nsec = len(groups)
    log_p = np.array([logsumexp(w) - log_total if w.size else -np.inf for w in logw])
    p = np.exp(log_p)
    counts = np.array([w.size for w in logw], dtype=int)
    entropy = np.array([renyi_entropy(allw, n) for n in renyi])
    sector = np.full((len(renyi), nsec), np.nan)
    # log P_n(q) up to a q-independent constant, for the moment weights.
    log_pn = np.full((len(renyi), nsec), -np.inf)
    for j, w in enumerate(logw):
        if w.size == 0:
            continue
        for i, n in enumerate(renyi):
            if p[j] >= floor:
                sector[i, j] = renyi_entropy(w, n)
            if np.isinf(n):
                top = np.count_nonzero(w >= lmax + np.log1p(-tol))
                log_pn[i, j] = np.log(top) if top else -np.inf
            else:
                log_pn[i, j] = logsumexp(n * (w - lmax))
    weight = np.exp(log_pn - logsumexp(log_pn, axis=1, keepdims=True))
    phase = np.exp(1j * (fluxes @ phys.T))  # (nalpha, nsec)
    return dict(
        probability=p, counts=counts, renyi=renyi, entropy=entropy, sector_entropy=sector,
        moments=weight @ phase.T, floor=floor,
    )


def _group(
    spec: dict[tuple[int, ...], np.ndarray], label: Callable[[tuple[int, ...]], tuple[int, ...]]
) -> tuple[list[tuple[int, ...]], list[np.ndarray]]:
    """Merge the sectors whose keys share ``label(key)``; returns labels and value arrays."""
    merged: dict[tuple[int, ...], list[np.ndarray]] = {}
    for key, s in spec.items():
        merged.setdefault(label(key), []).append(s)
    labels = list(merged)
    return labels, [np.concatenate(merged[lab]) for lab in labels]


def _clean(
    schmidt: Spectrum, units: tuple[float, ...], offsets: tuple[float, ...] | None
) -> tuple[dict[tuple[int, ...], np.ndarray], np.ndarray, np.ndarray]:
    """Validate the sector spectrum and the charge units; return clean copies."""
    u = np.asarray(units, dtype=float)
    if u.ndim != 1 or u.size == 0 or not np.all(np.isfinite(u)) or np.any(u <= 0):
        raise ValueError(f"units must be a non-empty tuple of finite numbers > 0, got {units!r}")
    k = u.size
    o = np.zeros(k) if offsets is None else np.asarray(offsets, dtype=float)
    if o.shape != (k,) or not np.all(np.isfinite(o)):
        raise ValueError(f"offsets must hold {k} finite numbers (one per charge), got {offsets!r}")
    if not isinstance(schmidt, Mapping) or len(schmidt) == 0:
        raise ValueError("schmidt must be a non-empty mapping: charge vector -> Schmidt values")
    spec: dict[tuple[int, ...], np.ndarray] = {}
    for key, values in schmidt.items():
        q = tuple(key) if isinstance(key, (tuple, list, np.ndarray)) else (key,)
        if len(q) != k or not all(_is_int(x) for x in q):
            raise ValueError(f"sector key {key!r} must be a tuple of {k} integers (one per unit)")
        q = tuple(int(x) for x in q)
        if q in spec:
            raise ValueError(f"sector {q} appears twice")
        s = np.asarray(values, dtype=float)
        if s.ndim != 1:
            raise ValueError(f"Schmidt values of sector {q} must be a 1-D array, got {s.shape}")
        if not np.all(np.isfinite(s)):
            raise ValueError(f"Schmidt values of sector {q} must be finite")
        if np.any(s < 0):
            raise ValueError(f"Schmidt values must be >= 0; sector {q} has {s.min()}")
        spec[q] = s
    if not any(np.any(s > 0) for s in spec.values()):
        raise ValueError("all Schmidt values are zero: the state has no weight")
    return spec, u, o


def _is_int(x) -> bool:
    if isinstance(x, (bool, np.bool_)):
        return False
    if isinstance(x, (int, np.integer)):
        return True
    return isinstance(x, (float, np.floating)) and float(x).is_integer()


def _clean_renyi(renyi: Sequence[float]) -> tuple[float, ...]:
    ns = tuple(float(n) for n in np.atleast_1d(np.asarray(renyi, dtype=float)))
    if not ns:
        raise ValueError("renyi must list at least one Renyi index")
    for n in ns:
        if not n > 0:
            raise ValueError(f"Renyi index must be > 0 (or inf), got {n}")
    return ns


def _clean_alphas(alphas: np.ndarray) -> np.ndarray:
    a = np.asarray(alphas, dtype=float)
    if a.ndim != 1 or not np.all(np.isfinite(a)):
        raise ValueError(f"alphas must be a finite 1-D array, got shape {a.shape}")
    return a


def _clean_floor(floor: float) -> float:
    f = float(floor)
    if not (np.isfinite(f) and f >= 0):
        raise ValueError(f"floor must be a finite number >= 0, got {floor!r}")
    return f


def _clean_cut(cut: int) -> int:
    if isinstance(cut, bool) or not isinstance(cut, (int, np.integer)) or cut < 0:
        raise ValueError(f"cut must be a non-negative integer, got {cut!r}")
    return int(cut)
