"""The ``massive`` section of comparison.json: a gapped chain against the massive Dirac fermion and the
massive complex scalar (forms and their derivation in :mod:`mps.theory.massive`; Murciano, Di Giulio
and Calabrese, JHEP 08 (2020) 073, adapted to one entangling point).

At the cut nearest mid-chain:

- ``flux``: per finite Renyi index n, the fit of log|Z_n(alpha)/Z_n(0)| over alpha by the Dirac
  form (a^2) and the scalar form (|a|(2 pi - |a|), a cusp), both as leading forms (coefficient b,
  field theory b = log(xi)/n + const) and as exact ladders of equally spaced entanglement levels
  (spacing eps; the lattice Dirac ladder of a staggered chain has offset 1/4 or 1/2 depending on the
  cut, so both are tried and the better one is kept), with the verdict of each (dirac, scalar or
  neither; :func:`mps.theory.massive_fits.fit_alpha`);
- ``free_reference``: the same fits on the exact lattice answer of the free chain with the same
  correlation length: free fermions with hopping 1 and a staggered potential, and the harmonic
  complex scalar, each long enough (8 xi_field + 200 sites, at most 4000) for the central block to
  be many xi long. The correlation length of a run is measured on the connected charge-charge
  correlations; the charge density of a free field is bilinear in the field, so by Wick's theorem
  its correlations decay with half the field's correlation length: xi_field = 2 xi is matched;
- ``equipartition``: per n, the measured curvature k of S_n(q) - S_n = s0 + k (q - <q>)^2 over the
  sectors with p(q) >= threshold, next to the same fit of each field's ladder prediction at the
  fitted spacing (Dirac: 0, equipartition is exact for equally spaced levels; scalar: n eps^2/8 for
  small eps, the leading breaking term), and the number entropy against each field's ladder value;
- ``predicted``: p(q) and S_n(q) - S_n of each field's ladder at its fitted spacing, charges
  relative to the mean (for the plots);
- ``summary``: one line for the terminal.
"""

from __future__ import annotations

import math

import numpy as np

from mps.analysis.resolved import CutResolved
from mps.theory import massive, scalar
from mps.theory.freefermions import block_occupations, correlation_matrix, resolve_block
from mps.theory.massive_fits import fit_alpha
from mps.theory.scalar_sectors import resolve_block as resolve_scalar_block

FIELDS = ("dirac", "scalar")
REFERENCE_MAX_SITES = 4000
DIRAC_OFFSETS = (0.5, 0.25)


def massive_section(cfg, mid: CutResolved, records: list[CutResolved], xi: float | None, alpha_max: float,
                    threshold: float = 1e-3) -> dict:
    """The ``massive`` entry for a gapped run (see the module docstring)."""
    ns = [n for n in mid.renyi if math.isfinite(n)]
    flux = {_label(n): flux_fits(mid, i, n) for i, n in enumerate(mid.renyi) if math.isfinite(n)}
    predicted = predicted_shapes(flux, ns)
    out = {"cut": mid.cut, "xi": xi, "xi_field": None if xi is None else 2.0 * xi, "flux": flux,
           "free_reference": None, "equipartition": equipartition_breaking(mid, predicted, threshold),
           "predicted": predicted}
    if xi is not None and math.isfinite(xi) and xi > 0:
        out["free_reference"] = free_reference(2.0 * xi, mid.alphas, ns)
    else:
        out["free_reference_note"] = "no correlation length measured: no free chain of the same xi"
    out["summary"] = _summary(out)
    return out


def flux_fits(rec: CutResolved, i: int, n: float) -> dict:
    """Leading and ladder fits of one Renyi index's charged moments (errors as {"error": ...})."""
    out = {}
    for form in ("leading", "ladder"):
        try:
            fits = [fit_alpha(rec.alphas, rec.moments[i], n, form=form, offset_dirac=d)
                    for d in (DIRAC_OFFSETS if form == "ladder" else DIRAC_OFFSETS[:1])]
        except ValueError as exc:
            out[form] = {"error": str(exc)}
            continue
        best = min(fits, key=lambda f: f.rel_dirac)
        entry = best.to_dict()
        if form == "ladder":
            entry["offset_dirac"] = DIRAC_OFFSETS[fits.index(best)]
        out[form] = entry
    return out


def free_reference(xi_field: float, alphas: np.ndarray, ns: list[float]) -> dict:
    """Fits of the free Dirac (staggered hopping chain) and free scalar chains of field correlation
    length ``xi_field`` at their central cut (exact engines)."""
    L = int(min(REFERENCE_MAX_SITES, 2 * math.ceil((8 * xi_field + 200) / 2)))
    cut = L // 2
    renyi = tuple(ns) if 1.0 in ns else (1.0, *ns)
    mu = 2.0 * math.sinh(1.0 / xi_field)          # sinh(1/xi) = mu_stag/(2t), t = 1 (mps.theory.massive)
    h = np.diag(mu * (-1.0) ** np.arange(L)) - np.eye(L, k=1) - np.eye(L, k=-1)
    C = correlation_matrix(h, L // 2)
    dirac = resolve_block(block_occupations(C, cut), cut, renyi, alphas)
    m = 2.0 * math.sinh(1.0 / (2.0 * xi_field))   # 2 sinh(1/(2 xi)) = m (mps.theory.massive)
    X, P = scalar.correlations(scalar.mass_matrix(np.full(L, m)))
    bos = resolve_scalar_block(scalar.block_weights(X, P, cut, scalar.choose_window(X)), cut, renyi, alphas)
    out = {"sites": L, "cut": cut, "xi_field": xi_field}
    for name, rec, mass in (("dirac", dirac, {"mu_stag": mu, "t": 1.0}), ("scalar", bos, {"m": m})):
        out[name] = {"couplings": mass, "flux": {_label(n): flux_fits(rec, rec.renyi.index(n), n) for n in ns},
                     "number_entropy": rec.number_entropy}
    return out


def equipartition_breaking(rec: CutResolved, predicted: dict, threshold: float) -> dict:
    """Curvature k of S_n(q) - S_n = s0 + k (q - <q>)^2 over the sectors with p(q) >= ``threshold``:
    measured, and the same fit of each field's ladder prediction at its fitted spacing."""
    mean = rec.cumulant(1)
    keep = rec.probability >= threshold
    out = {"threshold": threshold, "number_entropy": rec.number_entropy, "by_renyi": {},
           "predicted_number_entropy": {f: v["number_entropy"] for f, v in predicted.items()}}
    for i, n in enumerate(rec.renyi):
        if not math.isfinite(n):
            continue
        label = _label(n)
        shift = rec.sector_entropy[i] - rec.entropy[i]
        ok = keep & np.isfinite(shift)
        entry = {"sectors": int(ok.sum()), "curvature": _curvature(rec.charges[ok] - mean, shift[ok]),
                 "predicted": {}}
        for field, shape in predicted.items():
            q, p = np.asarray(shape["charges"]), np.asarray(shape["probability"])
            y = np.asarray(shape["entropy_shift"].get(label, []), dtype=float)
            sel = (p >= threshold) & np.isfinite(y) if y.size == q.size else np.zeros(q.size, bool)
            entry["predicted"][field] = _curvature(q[sel], y[sel])
        out["by_renyi"][label] = entry
    return out


def _curvature(dq: np.ndarray, y: np.ndarray) -> float | None:
    """Slope of y against dq^2 (least squares), None with fewer than three points."""
    return float(np.polyfit(dq**2, y, 1)[0]) if dq.size >= 3 and np.ptp(dq**2) > 0 else None


def predicted_shapes(flux: dict, ns: list[float]) -> dict:
    """p(q) and S_n(q) - S_n of each field's ladder at the spacing fitted to n = 1 (charges about 0)."""
    ladder = flux.get("1", {}).get("ladder", {})
    out = {}
    for field in FIELDS:
        eps = ladder.get(f"eps_{field}")
        if eps is None or not math.isfinite(eps):
            continue
        offset = ladder.get("offset_dirac", 0.5) if field == "dirac" else 0.5
        res = massive.resolve_moments(field, "ladder", tuple(ns), eps=eps, offset=offset)
        keep = res.probability > 1e-8
        q = res.charges[keep] - float(np.dot(res.probability, res.charges))
        out[field] = {"eps": eps, "charges": q.tolist(), "probability": res.probability[keep].tolist(),
                      "entropy_shift": {_label(n): res.entropy_shift[i][keep].tolist() for i, n in enumerate(ns)},
                      "number_entropy": res.number_entropy}
    return out


def _summary(section: dict) -> str:
    fit = section["flux"].get("1", {})
    ladder, leading = fit.get("ladder", {}), fit.get("leading", {})
    verdict = ladder.get("verdict", "neither")
    parts = [f"massive: log Z_1(alpha) follows the {verdict} form" if verdict != "neither"
             else "massive: log Z_1(alpha) fits neither the Dirac nor the scalar ladder"]
    if verdict in FIELDS and leading.get(f"b_{verdict}") is not None:
        parts.append(f"b = {leading[f'b_{verdict}']:.3g}")
        ref = (section.get("free_reference") or {}).get(verdict, {})
        b_free = ref.get("flux", {}).get("1", {}).get("leading", {}).get(f"b_{verdict}")
        if b_free is not None:
            parts.append(f"free {verdict} at the same xi: b = {b_free:.3g}")
    return ", ".join(parts)


def _label(n: float) -> str:
    return str(int(n)) if float(n).is_integer() else repr(float(n))
