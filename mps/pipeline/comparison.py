"""The comparison stage of a run: field-theory fits, equipartition figures, the exact free-fermion check.

:func:`compare_run` reads the sector-labelled Schmidt values of every cut of a finished state and
returns a JSON-ready report; :func:`write_comparison` writes it as ``comparison.json`` and, for
quadratic chains, the exact lattice answer as ``exact_entropies.csv`` and ``exact_sectors.csv``
(same columns as ``entropies.csv`` and ``sectors.csv``, so plots can overlay them). The caller
holds the run-directory lock.

Keys of comparison.json (forms and sources in :mod:`mps.theory.fieldtheory`):

- ``name, family, sites, couplings, charge, renyi, version``;
- ``window`` [lo, hi]: cuts used by every fit (default L/8 .. 7L/8);
- ``central_charge``: ``value`` (c from S_1) and ``by_renyi`` {"1": fit, "2": fit, ...}, each fit
  holding ``value`` (c), ``const``, ``alternating`` (amplitude of the (-1)^l term),
  ``exponent`` (its decay exponent, fitted), ``residual_rms``, ``window``, ``points``;
- ``luttinger``: ``value`` (K from the block charge variance), ``fit`` (as above, value = K),
  ``bethe_ansatz`` (K of the uniform zero-field xxz / t-V chain at zero magnetisation, else
  null), ``relative_difference`` (fit / Bethe ansatz - 1, or null);
- ``equipartition``: at mid-chain (``cut``): ``by_renyi`` {n: spread, slope, intercept,
  sectors, threshold}, ``gaussian`` {mean, variance, max_abs, total_variation},
  ``leading_order`` {n: measured S_n(q) at the sector nearest <q>, predicted S_n - 1/2
  log(2 pi sigma^2) + log n/(2(1-n)), difference}; ``per_cut``: lists over ``cut`` of the
  spread and slope of each n and of the Gaussian distances;
- ``charged_moments``: at mid-chain, per finite n: ``sigma_sq`` (fitted Gaussian width of
  |Z_n(alpha)| at |alpha| <= alpha_max), ``predicted`` (measured variance / n),
  ``relative_difference``, ``residual_rms``, ``alpha_max``, ``points``. Only the coefficient of
  log l in sigma_n^2 is K/(2 pi^2 n); the constant depends on n, so at reachable sizes sigma_sq
  lies well below variance/n for n > 1 (exact free fermions, 64 sites, mid-chain, n = 2: 0.077
  against 0.146);
- ``luttinger_by_charge``: null for one charge; with several (hubbard: N and Sz), per charge name
  ``value`` (K of that charge, null when the charge is gapped), ``slope`` (s in sigma^2 = K s log
  l_eff), ``fit``, ``regime`` (critical, gapped or unchecked), ``correlation_length`` and a
  ``reason`` when K is withheld (see :func:`luttinger_by_charge`);
- ``method``: ``sweeps`` or ``exact`` (``solver.method``);
- ``regime``: ``verdict`` (critical, gapped or undecided), ``xi``, ``reason`` (one line),
  ``reasons`` and ``signals`` (entropy: grows, saturates or unclear; correlations: exponential,
  long, none or unmeasured); see :mod:`mps.pipeline.regime`. Outside the critical regime, and for a
  non-positive fit, the headline ``central_charge.value`` and ``luttinger.value`` are null with a
  ``reason`` (the fits stay under ``by_renyi`` and ``fit`` for reference);
- ``massive``: null unless the regime is gapped; then the massive-field comparison of
  :mod:`mps.pipeline.massive_report` (xi, the flux dependence of log Z_n(alpha) at the central cut
  against the Dirac and the complex-scalar forms, equipartition breaking, the free prediction at
  the same xi);
- ``correlation_length``: the result of :func:`mps.analysis.correlations.correlation_length` on the
  connected charge-charge correlations (xi, null when the decay is not exponential, as on a
  critical chain; amplitude, residual, window, ...) plus ``window_start_over_xi`` (the massive
  forms need l >> xi); null when ``analysis.correlations`` is false;
- ``sum_rules``: the largest violation over all cuts of sum_q p(q) = 1, of S_1 = S_number +
  S_config and, for the complex scalar at Q = 0, of p(q) = p(-q) (:mod:`mps.pipeline.sum_rules`);
- ``exact``: null unless the chain is quadratic; then ``n_particles``, ``rare_sector``,
  ``max_deviation`` {probability, sector_entropy, entropy, moments, charge_correlations}, each
  {value, cut, ...where}, ``missing_sectors`` (sectors with exact p above ``rare_sector`` that the
  solver does not resolve), ``central_charge`` and ``luttinger`` ({value, fit}) fits of the
  exact data, and ``tables`` (the exact_*.csv file names); or {"error": message} if the free
  ground state is degenerate.

Non-finite numbers become null in the JSON file (:func:`mps.pipeline.rundir.write_json`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from mps import __version__
from mps.analysis import correlations as _correlations
from mps.analysis.entanglement import charge_moments
from mps.analysis.resolved import CutResolved
from mps.chain.state import ChainState
from mps.pipeline.errors import InputError
from mps.pipeline.exact_check import EXACT_ENTROPIES, EXACT_SECTORS, deviations, exact_records, exact_tables
from mps.pipeline.massive_report import massive_section
from mps.pipeline.regime import decide, headline
from mps.pipeline.rundir import write_json
from mps.pipeline.schema import RunConfig
from mps.pipeline.sum_rules import sum_rules
from mps.pipeline.tables import Table, charge_value, renyi_label, resolve_state, write_tables
from mps.theory.fieldtheory import (
    default_window,
    equipartition,
    fit_central_charge,
    fit_charged_moment,
    fit_luttinger,
    gaussian_distance,
    luttinger_bethe_ansatz,
    resolved_entropy_leading,
)

COMPARISON = "comparison.json"


@dataclass(frozen=True)
class ComparisonSettings:
    """Choices of the comparison stage.

    window : cuts (lo, hi) used by the fits; None for L/8 .. 7L/8.
    threshold : p(q) above which a sector enters the equipartition figures.
    alpha_max : largest |alpha| in the Gaussian fit of the charged moments.
    rare_sector : exact p(q) above which sector entropies are compared with the exact engine
        (rarer sectors are round-off dominated on both sides).
    correlations : measure the connected charge correlations and the correlation length
        (O(L^2 D^3) work: seconds at 64 sites and bond 64, much more for long chains at large bond).
    """

    window: tuple[int, int] | None = None
    threshold: float = 1e-3
    alpha_max: float = 1.0
    rare_sector: float = 1e-6
    correlations: bool = True


@dataclass(frozen=True)
class Comparison:
    """The report (JSON-ready) and the exact free-fermion tables (empty unless quadratic)."""

    report: dict
    tables: dict[str, Table] = field(default_factory=dict)


def compare_run(cfg: RunConfig, state: ChainState,
                settings: ComparisonSettings = ComparisonSettings()) -> dict:
    """comparison.json content of a finished state (see the module docstring for the keys)."""
    return build_comparison(cfg, state, settings).report


def write_comparison(directory: str | Path, cfg: RunConfig, state: ChainState,
                     settings: ComparisonSettings = ComparisonSettings()) -> dict:
    """Write comparison.json (and exact_*.csv for quadratic chains) into ``directory``; return the report."""
    directory = Path(directory)
    result = build_comparison(cfg, state, settings)
    write_tables(directory, result.tables)
    write_json(directory / COMPARISON, result.report)
    return result.report


# ----------------------------------------------------------------------------- assembly
def build_comparison(cfg: RunConfig, state: ChainState,
                     settings: ComparisonSettings = ComparisonSettings()) -> Comparison:
    """Report and exact tables of a run (pure: reads the state, writes nothing).

    Every cut with stored Schmidt values enters, whatever ``analysis.cuts`` says (the fits need
    consecutive cuts); the Renyi indices are those of ``analysis.renyi``, with n = 1 added.
    """
    L = cfg.model.sites
    space = cfg.model.space()
    renyi = comparison_renyi(cfg)
    cuts = [c for c in range(1, L) if state.spectra[c] is not None]
    if not cuts:
        raise InputError("the stored state holds no Schmidt values (run at least one sweep)")
    records = resolve_state(state, space.charge_units, cfg.analysis, space.charge_names, renyi, cuts)
    component = _component(cfg)
    site_charge = state.tensors[0].legs[1].state_charges()[:, component] * space.charge_units[component]
    corr = _solver_correlations(state, site_charge) if settings.correlations else None
    by_charge = None
    if len(space.charge_names) > 1:
        window = settings.window or default_window(L)
        by_charge = luttinger_by_charge(cfg, state, cuts, window, settings.correlations)
    return assemble(cfg, records, corr, settings, by_charge, check_exact=True)


def comparison_renyi(cfg: RunConfig) -> tuple[float, ...]:
    """The Renyi indices of the comparison: those of ``analysis.renyi`` with n = 1 added."""
    return tuple(cfg.analysis.renyi) if 1.0 in cfg.analysis.renyi else (1.0,) + tuple(cfg.analysis.renyi)


def assemble(cfg: RunConfig, records: list[CutResolved], corr: np.ndarray | None,
             settings: ComparisonSettings, by_charge: dict | None = None, check_exact: bool = True
             ) -> Comparison:
    """The report from the records of consecutive cuts and the connected charge correlations (or None).

    ``by_charge``: the per-charge Luttinger entries of a chain with several charges. ``check_exact``:
    compare with the exact engine when the chain is quadratic (off for runs of the exact engine).
    """
    L = cfg.model.sites
    window = settings.window or default_window(L)
    mid_rec = min(records, key=lambda r: abs(r.cut - L // 2))
    report = {
        "name": cfg.name, "family": cfg.model.family, "sites": L, "method": cfg.solver.method,
        "couplings": dict(cfg.model.couplings), "charge": dict(cfg.model.charge),
        "renyi": [renyi_label(n) for n in records[0].renyi], "version": __version__, "window": list(window),
        "central_charge": _central_charges(records, L, window),
        "luttinger": _luttinger(cfg, records, window),
        "luttinger_by_charge": by_charge,
        "equipartition": _equipartition(records, mid_rec, settings.threshold),
        "charged_moments": _moments(mid_rec, settings.alpha_max),
        "correlation_length": None if corr is None else _correlation_length(corr, window),
        "regime": None,
        "massive": None,
        "exact": None,
        "sum_rules": sum_rules(records, cfg.model.family, sum(abs(v) for v in cfg.model.charge.values())),
    }
    entropy_fit = report["central_charge"]["by_renyi"]["1"]
    report["regime"] = decide(entropy_fit, report["correlation_length"], window, L)
    if by_charge is not None:
        resolved = by_charge[cfg.model.space().charge_names[_component(cfg)]]
        if resolved["regime"] == "gapped":   # the headline K of the resolved charge follows its regime
            report["luttinger"].update(value=None, reason=resolved["reason"])
        gapless = [n for n, e in by_charge.items() if e["regime"] != "gapped"]
        if gapless and report["regime"]["verdict"] == "gapped":   # one gapless sector keeps log l
            report["regime"] = {**report["regime"], "verdict": "critical",
                                "reason": "critical: gapless sector(s) " + ", ".join(gapless)}
    for key, name in (("central_charge", "c"), ("luttinger", "K")):
        value, why = headline(report[key], name, report["regime"])
        if why is not None and report[key].get("value") is not None:
            report[key].update(value=None, reason=why)
    if report["regime"]["verdict"] == "gapped":
        report["massive"] = massive_section(cfg, mid_rec, records, report["regime"]["xi"], settings.alpha_max)
    tables: dict[str, Table] = {}
    exact = _exact(cfg, records, corr, settings) if check_exact else None
    if exact is not None:
        report["exact"], tables = exact
    return Comparison(_plain(report), tables)


def _plain(x):
    """Python scalars, lists and dicts only (numpy scalars and arrays converted), for JSON."""
    if isinstance(x, dict):
        return {k: _plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple, np.ndarray)):
        return [_plain(v) for v in x]
    if isinstance(x, np.generic):
        return x.item()
    return x


def _component(cfg: RunConfig) -> int:
    names = cfg.model.space().charge_names
    return 0 if cfg.analysis.resolve == "joint" else names.index(cfg.analysis.resolve)


def _series(records: list[CutResolved]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """cuts, entropies (nrenyi, ncut) and charge variance over the records."""
    cuts = np.array([r.cut for r in records])
    return cuts, np.array([r.entropy for r in records]).T, np.array([r.cumulant(2) for r in records])


def _fit_or_error(fit, *args, **kw) -> dict:
    try:
        return fit(*args, **kw).to_dict()
    except ValueError as exc:
        return {"value": None, "error": str(exc)}


def _central_charges(records: list[CutResolved], L: int, window) -> dict:
    cuts, ent, _ = _series(records)
    by = {renyi_label(n): _fit_or_error(fit_central_charge, cuts, ent[i], L, n, window)
          for i, n in enumerate(records[0].renyi)}
    return {"value": by["1"]["value"], "by_renyi": by}


def _wrap(fit: dict) -> dict:
    return {"value": fit["value"], "fit": fit}


def _luttinger(cfg: RunConfig, records: list[CutResolved], window) -> dict:
    cuts, _, var = _series(records)
    slope = cfg.model.family_record().variance_slope(cfg.model.space().charge_names[_component(cfg)])
    out = _wrap(_fit_or_error(fit_luttinger, cuts, var, cfg.model.sites, window, slope=slope))
    out["slope"] = slope
    known = bethe_ansatz_luttinger(cfg)
    out["bethe_ansatz"] = known
    out["relative_difference"] = None if known is None or out["value"] is None else out["value"] / known - 1.0
    return out


def luttinger_by_charge(cfg: RunConfig, state: ChainState, cuts: list[int], window, correlations: bool) -> dict:
    """One Luttinger parameter per conserved charge, from that charge's block variance.

    sigma_c^2(l) = K_c s_c log l_eff + const (s_c from the family: for the Hubbard chain
    s_N = 1/pi^2 and s_Sz = 1/(4 pi^2), so that free fermions give K_N = K_Sz = 1). A charge whose
    density correlations decay exponentially with a correlation length below the smallest fitted
    block (a gapped sector, e.g. the charge of the half-filled Hubbard chain at U > 0) saturates
    instead of growing with log l: its K is withheld (``value`` null, ``regime`` "gapped") and
    the correlation length is reported. Without measured correlations the regime is "unchecked".
    """
    space, fam, L = cfg.model.space(), cfg.model.family_record(), cfg.model.sites
    var = np.array([np.diag(charge_moments(state.spectra[c].as_dict(), space.charge_units)[1]) for c in cuts])
    phys = state.tensors[0].legs[1].state_charges() * np.asarray(space.charge_units)
    out = {}
    for i, name in enumerate(space.charge_names):
        slope = fam.variance_slope(name)
        fit = _fit_or_error(fit_luttinger, cuts, var[:, i], L, window, slope=slope)
        entry = {"value": fit["value"], "slope": slope, "fit": fit, "regime": "unchecked", "correlation_length": None}
        if correlations:
            xi = _correlation_length(_solver_correlations(state, phys[:, i]), window).get("xi")
            entry["correlation_length"] = xi
            if xi is not None and math.isfinite(xi) and xi < window[0]:
                entry.update(regime="gapped", value=None,
                             reason=f"{name} correlations decay exponentially (xi = {xi:.3g} sites, below the "
                                    f"smallest fitted block {window[0]}): the variance saturates")
            else:
                entry["regime"] = "critical"
        out[name] = entry
    return out


def bethe_ansatz_luttinger(cfg: RunConfig) -> float | None:
    """Bethe-ansatz K for a uniform, zero-field chain at zero magnetisation, else None.

    xxz with h = h_stag = dimer = 0 and S^z = 0: K(Delta sign J) (a sublattice rotation maps
    J < 0 onto J > 0 with -Delta). fermions with mu = mu_stag = dimer = 0 at half filling:
    the Jordan-Wigner map (DESIGN.md section 5) gives Delta = V/(2|t|) in the bulk.
    K = pi/(2(pi - arccos Delta)), -1 < Delta <= 1 (Luther and Peschel, PRB 12, 3908 (1975)).
    """
    c, L = cfg.model.couplings, cfg.model.sites
    if cfg.model.family == "xxz":
        ok = c["h"] == 0 and c["h_stag"] == 0 and c["dimer"] == 0 and c["J"] != 0
        ok = ok and cfg.model.charge["Sz"] == 0
        delta = c["Delta"] * math.copysign(1.0, c["J"])
    elif cfg.model.family == "fermions":
        ok = c["mu"] == 0 and c["mu_stag"] == 0 and c["dimer"] == 0 and c["t"] != 0
        ok = ok and 2 * cfg.model.charge["N"] == L
        delta = c["V"] / (2.0 * abs(c["t"])) if c["t"] != 0 else math.nan
    else:
        return None
    return luttinger_bethe_ansatz(delta) if ok and -1.0 < delta <= 1.0 else None


def _equipartition(records: list[CutResolved], mid: CutResolved, threshold: float) -> dict:
    labels = [renyi_label(n) for n in mid.renyi]
    var = mid.cumulant(2)
    nearest = int(np.argmin(np.abs(mid.charges - mid.cumulant(1))))
    leading = {}
    for i, n in enumerate(mid.renyi):
        measured = float(mid.sector_entropy[i, nearest])
        predicted = float(resolved_entropy_leading(mid.entropy[i], var, n)) if var > 0 else math.nan
        leading[labels[i]] = {"charge": charge_value(mid.charges[nearest]), "measured": measured,
                              "predicted": predicted, "difference": measured - predicted}
    per_cut: dict = {"cut": [r.cut for r in records]}
    for i, lab in enumerate(labels):
        figs = [equipartition(r.charges, r.probability, r.sector_entropy[i], threshold) for r in records]
        per_cut[f"spread_S_{lab}"] = [f.spread for f in figs]
        per_cut[f"slope_S_{lab}"] = [f.slope for f in figs]
    gauss = [gaussian_distance(r.charges, r.probability) for r in records]
    per_cut["gaussian_max_abs"] = [g.max_abs for g in gauss]
    per_cut["gaussian_total_variation"] = [g.total_variation for g in gauss]
    by_renyi = {lab: equipartition(mid.charges, mid.probability, mid.sector_entropy[i], threshold).to_dict()
                for i, lab in enumerate(labels)}
    return {
        "cut": mid.cut, "threshold": threshold, "by_renyi": by_renyi,
        "gaussian": gaussian_distance(mid.charges, mid.probability).to_dict(),
        "leading_order": leading,
        "per_cut": per_cut,
    }


def _moments(mid: CutResolved, alpha_max: float) -> dict:
    var = mid.cumulant(2)
    out = {"cut": mid.cut, "variance": var, "by_renyi": {}}
    for i, n in enumerate(mid.renyi):
        if math.isinf(n):
            continue
        fit = fit_charged_moment(mid.alphas, mid.moments[i], n, alpha_max).to_dict()
        fit["predicted"] = var / n
        fit["relative_difference"] = fit["sigma_sq"] / (var / n) - 1.0 if var > 0 else None
        out["by_renyi"][renyi_label(n)] = fit
    return out


# ----------------------------------------------------------------------------- correlations
def _solver_correlations(state: ChainState, site_charge: np.ndarray) -> np.ndarray:
    return np.asarray(_correlations.connected_charge_correlations(state, site_charge), dtype=float)


def _correlation_length(corr: np.ndarray, window) -> dict:
    try:
        fit = dict(_correlations.correlation_length(corr))
    except ValueError as exc:
        return {"xi": None, "error": str(exc)}
    xi = fit.get("xi")
    fit["window_start_over_xi"] = window[0] / xi if xi and np.isfinite(xi) and xi > 0 else None
    return fit


# ----------------------------------------------------------------------------- exact free fermions
def _exact(cfg: RunConfig, records: list[CutResolved], corr: np.ndarray | None,
           settings: ComparisonSettings) -> tuple[dict, dict[str, Table]] | None:
    """Exact lattice answer of a quadratic chain and the solver's largest deviations from it."""
    try:
        found = exact_records(cfg, [r.cut for r in records], records[0].renyi, records[0].alphas, _component(cfg))
    except ValueError as exc:
        return {"error": str(exc)}, {}
    if found is None:
        return None
    exact, exact_corr, n_particles = found
    L = cfg.model.sites
    window = settings.window or default_window(L)
    cuts, _, variance = _series(exact)
    slope = cfg.model.family_record().variance_slope(cfg.model.space().charge_names[_component(cfg)])
    report = {
        "n_particles": n_particles, "rare_sector": settings.rare_sector,
        **deviations(records, exact, settings.rare_sector),
        "central_charge": _central_charges(exact, L, window),
        "luttinger": _wrap(_fit_or_error(fit_luttinger, cuts, variance, L, window, slope=slope)),
        "tables": [f"{EXACT_ENTROPIES}.csv", f"{EXACT_SECTORS}.csv"],
    }
    if corr is not None:
        d = np.abs(corr - exact_corr)
        i, j = np.unravel_index(int(np.argmax(d)), d.shape)
        report["max_deviation"]["charge_correlations"] = {"value": float(d[i, j]), "sites": [int(i), int(j)]}
    return report, exact_tables(exact)
