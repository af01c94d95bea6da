"""Figures of a finished run: entanglement profile, charge variance, sector entropies, p(q), charged
moments and sweep history, drawn from the run directory's tables into ``<dir>/plots/*.png``.

Every figure is built on a :class:`matplotlib.figure.Figure` and rendered by the Agg canvas
directly; pyplot is never imported, so no backend is switched, no figure registry grows and no
global style changes leak out (font sizes are applied through ``matplotlib.rc_context`` for the
duration of one figure). A figure whose tables are absent is skipped quietly; theory curves are
drawn when comparison.json (fits) or the exact free-fermion tables are present.

Forms and sources of the theory curves are those of :mod:`mps.theory.fieldtheory`: Calabrese and Cardy
(J. Stat. Mech. 2004, P06002) with the open-chain parity term, the block charge variance
(K/(2 pi^2)) log l_eff, the leading resolved entropies S_n - 1/2 log(2 pi sigma^2) +
log n/(2(1-n)), the Gaussian p(q) and Z_n(alpha)/Z_n(0) = exp(-alpha^2 sigma^2/(2n)) (Goldstein and
Sela, PRL 120, 200602 (2018); Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019)).
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import numpy as np
import yaml
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator, MultipleLocator

from mps.pipeline.rundir import read_table
from mps.theory.fieldtheory import (
    chord_length,
    gaussian_probability,
    renyi_prefactor,
    resolved_entropy_leading,
)

PLOTS = "plots"
DPI = 150
STYLE = {
    "font.size": 11, "axes.titlesize": 11.5, "axes.labelsize": 11.5, "legend.fontsize": 9.5,
    "xtick.labelsize": 10, "ytick.labelsize": 10, "figure.titlesize": 12.5, "lines.linewidth": 1.4,
    "axes.grid": True, "grid.alpha": 0.25, "grid.linewidth": 0.6, "legend.framealpha": 0.9,
    "savefig.dpi": DPI, "mathtext.fontset": "dejavusans",
}
PALETTE = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#17becf", "#7f7f7f")
EXACT_STYLE = dict(color="0.15", lw=0.9, zorder=1)
FIT_STYLE = dict(ls="--", lw=1.1)
SECTOR_THRESHOLD = 1e-3          # p(q) above which a sector is drawn as "well resolved" (filled)
COUPLING_TEX = {"Delta": r"\Delta", "h_stag": r"h_{\rm stag}", "mu": r"\mu", "mu_stag": r"\mu_{\rm stag}",
                "dimer": r"\delta"}
CHARGE_TEX = {"Sz": r"{S^z_A}", "N": r"{N_A}"}


# ----------------------------------------------------------------------------- reading the run
Table = dict[str, np.ndarray]


def _number(cell: str) -> float:
    try:
        return float(cell) if cell != "" else math.nan
    except ValueError:
        return math.nan


def load_table(path: Path) -> Table | None:
    """A CSV table as float columns (empty cells NaN, 'inf' -> inf); None if absent or empty."""
    if not path.is_file():
        return None
    header, rows = read_table(path)
    if not rows:
        return None
    data = np.array([[_number(c) for c in row] for row in rows], dtype=float).reshape(len(rows), len(header))
    return {name: data[:, i] for i, name in enumerate(header)}


def _json(path: Path) -> dict | None:
    if not path.is_file():
        return None
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def _yaml(path: Path) -> dict | None:
    if not path.is_file():
        return None
    try:
        data = yaml.safe_load(path.read_text())
    except (OSError, yaml.YAMLError):
        return None
    return data if isinstance(data, dict) else None


@dataclass
class RunFiles:
    """Everything the figures read from one run directory (None where a file is absent)."""

    directory: Path
    name: str
    sites: int | None
    subtitle: str
    charge_tex: str
    entropies: Table | None
    sectors: Table | None
    moments: Table | None
    sweeps: Table | None
    exact_entropies: Table | None
    exact_sectors: Table | None
    comparison: dict | None
    summary: dict | None

    @classmethod
    def read(cls, directory: str | Path) -> "RunFiles":
        d = Path(directory)
        config = _yaml(d / "config.yaml") or {}
        summary = _json(d / "summary.json")
        model = config.get("model") if isinstance(config.get("model"), dict) else {}
        name = str(config.get("name") or (summary or {}).get("name") or d.name)
        tables = {key: load_table(d / f"{key}.csv") for key in
                  ("entropies", "sectors", "moments", "sweeps", "exact_entropies", "exact_sectors")}
        sites = model.get("sites") or (summary or {}).get("sites")
        if sites is None and tables["entropies"] is not None:
            sites = int(np.nanmax(tables["entropies"]["cut"])) + 1
        resolve = (config.get("analysis") or {}).get("resolve") if isinstance(config.get("analysis"), dict) else None
        return cls(d, name, int(sites) if sites else None, _describe_model(model),
                   CHARGE_TEX.get(str(resolve), "q"), comparison=_json(d / "comparison.json"),
                   summary=summary, **tables)

    def title(self, what: str) -> str:
        return f"{self.name}: {what}" + (f"\n{self.subtitle}" if self.subtitle else "")


def _describe_model(model: dict) -> str:
    """'xxz, L = 32, J = 1, Delta = 0.6 ...' in mathtext, leaving out zero couplings."""
    if not model:
        return ""
    parts = [str(model.get("family", "")), f"$L = {model.get('sites', '?')}$"]
    for key, value in (model.get("couplings") or {}).items():
        if isinstance(value, (int, float)) and value != 0:
            parts.append(f"${COUPLING_TEX.get(key, key)} = {value:g}$")
    for key, value in (model.get("charge") or {}).items():
        parts.append(f"${CHARGE_TEX.get(key, key).replace('_A', '')} = {value:g}$")
    return ", ".join(p for p in parts if p)


def renyi_columns(table: Table) -> list[tuple[str, float]]:
    """(label, n) of every S_<n> column whose suffix is a Renyi index (S_number, S_config are not)."""
    out = []
    for name in table:
        if name.startswith("S_"):
            try:
                out.append((name[2:], float(name[2:])))
            except ValueError:
                continue
    return out


def _label_of(n: float) -> str:
    """Column / JSON label of a Renyi index: '1', '2', 'inf', '0.5'."""
    return "inf" if math.isinf(n) else (str(int(n)) if float(n).is_integer() else repr(float(n)))


def _n_tex(n: float) -> str:
    return r"\infty" if math.isinf(n) else f"{n:g}"


def _colour(k: int) -> str:
    return PALETTE[k % len(PALETTE)]


def _nearest_cut(cuts: np.ndarray, sites: int | None) -> int:
    target = (sites or (np.nanmax(cuts) + 1)) / 2
    uniq = np.unique(cuts)
    return int(uniq[np.argmin(np.abs(uniq - target))])


def _fit(entry) -> dict | None:
    """A fit dict from comparison.json if it holds numbers, else None."""
    if not isinstance(entry, dict):
        return None
    keys = ("value", "const", "alternating", "exponent", "window")
    if any(entry.get(k) is None for k in keys):
        return None
    return entry


def _get(data: dict | None, *path):
    for key in path:
        if not isinstance(data, dict):
            return None
        data = data.get(key)
    return data


def _charge_ticks(ax, charges: np.ndarray, spacing: float) -> None:
    """Ticks on the charge lattice (half-integers included) when there are few enough sectors."""
    q = np.unique(charges[np.isfinite(charges)])
    if q.size and spacing > 0 and (q.max() - q.min()) / spacing <= 14:
        ax.xaxis.set_major_locator(MultipleLocator(spacing, offset=float(q[0] % spacing)))


def _charge_spacing(charges: np.ndarray) -> float:
    q = np.unique(charges[np.isfinite(charges)])
    return float(np.min(np.diff(q))) if q.size > 1 else 1.0


def _save(fig: Figure, path: Path) -> Path:
    """Render with the Agg canvas to a temporary name and rename, so readers never see half a PNG."""
    FigureCanvasAgg(fig)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        fig.savefig(tmp, dpi=DPI, format="png")
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return path


# ----------------------------------------------------------------------------- figures
def draw_entropy_profile(run: RunFiles, path: Path) -> Path | None:
    """S_n(l) against the cut and against log l_eff, with the Calabrese-Cardy fits and exact values."""
    ent = run.entropies
    if ent is None or not run.sites:
        return None
    cols = renyi_columns(ent)
    if not cols:
        return None
    L, cuts = run.sites, ent["cut"]
    fits = _get(run.comparison, "central_charge", "by_renyi") or {}
    exact = run.exact_entropies
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    x = np.log(chord_length(cuts, L))
    window, ranges = None, []
    for k, (label, n) in enumerate(cols):
        col, y = _colour(k), ent[f"S_{label}"]
        fit = _fit(fits.get(label))
        name = f"$S_{{{_n_tex(n)}}}$" + (f"  ($c = {fit['value']:.3f}$)" if fit else "")
        ax1.plot(cuts, y, "o", ms=3.6, color=col, label=name, zorder=3)
        if exact is not None and f"S_{label}" in exact:
            for parity in (0, 1):   # one line per parity: open chains alternate between even and odd l
                sel = exact["cut"] % 2 == parity
                ax1.plot(exact["cut"][sel], exact[f"S_{label}"][sel], "-", **EXACT_STYLE)
        corrected, inside = y, np.ones_like(cuts, dtype=bool)
        if fit:
            lo, hi = fit["window"]
            window = (lo, hi)
            inside = (cuts >= lo) & (cuts <= hi)
            ll = np.linspace(lo, hi, 300)
            xl = chord_length(ll, L)
            smooth = fit["value"] * renyi_prefactor(n) * np.log(xl) + fit["const"]
            for sign in (1.0, -1.0):   # even-l and odd-l branches of the parity term
                ax1.plot(ll, smooth + sign * fit["alternating"] * xl ** (-fit["exponent"]), color=col,
                         **FIT_STYLE, zorder=2)
            corrected = y - fit["alternating"] * (-1.0) ** cuts * np.exp(-fit["exponent"] * x)
            xs = np.linspace(np.nanmin(x), np.nanmax(x), 50)
            ax2.plot(xs, fit["value"] * renyi_prefactor(n) * xs + fit["const"], color=col, **FIT_STYLE)
        ax2.plot(x[inside], corrected[inside], "o", ms=3.6, color=col)
        ax2.plot(x[~inside], corrected[~inside], "o", ms=3.6, mfc="none", color=col, alpha=0.55)
        ranges.append(corrected[inside])
    if fits and ranges:
        # outside the window the fitted parity term is an extrapolation that can blow up at small l;
        # scale the axis to the fitted cuts
        vals = np.concatenate(ranges)
        vals = vals[np.isfinite(vals)]
        if vals.size:
            lo, hi = vals.min(), vals.max()
            pad = 0.5 * max(hi - lo, 1e-3)
            ax2.set_ylim(lo - pad, hi + pad)
    if window:
        ax1.axvspan(window[0], window[1], color="0.5", alpha=0.08, lw=0)
    ax1.set(xlabel=r"cut $\ell$ (sites in the left block)", ylabel=r"Rényi entropy $S_n(\ell)$",
            title="entanglement profile", xlim=(0, L))
    ax2.set(xlabel=r"$\log \ell_{\rm eff}$,  $\ell_{\rm eff} = (2L/\pi)\,\sin(\pi \ell/L)$",
            ylabel=r"$S_n - A_n(-1)^\ell\,\ell_{\rm eff}^{-p_n}$" if fits else r"$S_n(\ell)$",
            title="against the chord length" + (" (parity term removed)" if fits else ""))
    handles, labels = ax1.get_legend_handles_labels()
    if fits:
        handles.append(Line2D([], [], color="0.3", **FIT_STYLE))
        labels.append(r"Calabrese–Cardy fit, $\frac{c}{12}(1+\frac{1}{n})\log\ell_{\rm eff}$ + parity term")
    if window:
        handles.append(Patch(color="0.5", alpha=0.15))
        labels.append(f"fit window ${window[0]} \\leq \\ell \\leq {window[1]}$ (open symbols: outside)")
    if exact is not None:
        handles.append(Line2D([], [], **EXACT_STYLE))
        labels.append("exact lattice free fermions")
    fig.legend(handles, labels, loc="outside lower center", ncol=min(4, len(handles)), frameon=False)
    fig.suptitle(run.title("Rényi entanglement entropies"))
    return _save(fig, path)


def draw_charge_variance(run: RunFiles, path: Path) -> Path | None:
    """sigma^2(l) of the block charge against log l_eff with the fitted (K/(2 pi^2)) log l_eff line."""
    ent = run.entropies
    if ent is None or not run.sites or "charge_var" not in ent:
        return None
    L, cuts, var = run.sites, ent["cut"], ent["charge_var"]
    x = np.log(chord_length(cuts, L))
    lutt = _get(run.comparison, "luttinger")
    fit = _fit(_get(lutt, "fit"))
    fig = Figure(figsize=(7.6, 6.0), layout="constrained")
    ax = fig.subplots()
    inside = np.ones_like(cuts, dtype=bool)
    if fit:
        inside = (cuts >= fit["window"][0]) & (cuts <= fit["window"][1])
    even = cuts % 2 == 0
    for mask, marker, what in ((even, "o", r"even $\ell$"), (~even, "s", r"odd $\ell$")):
        ax.plot(x[mask & inside], var[mask & inside], marker, ms=4, color=_colour(0), label=f"MPS, {what}")
        ax.plot(x[mask & ~inside], var[mask & ~inside], marker, ms=4, color=_colour(0), mfc="none", alpha=0.5)
    if run.exact_entropies is not None and "charge_var" in run.exact_entropies:
        ex = run.exact_entropies
        ax.plot(np.log(chord_length(ex["cut"], L)), ex["charge_var"], "x", ms=5, color="0.15",
                label="exact lattice free fermions", zorder=4)
    if fit:
        xs = np.linspace(np.nanmin(x), np.nanmax(x), 50)
        K = fit["value"]
        label = rf"fit $\frac{{K}}{{2\pi^2}}\log\ell_{{\rm eff}}$ + const, $K = {K:.3f}$"
        ba = _get(lutt, "bethe_ansatz")
        if isinstance(ba, (int, float)):
            label += rf" (Bethe ansatz ${ba:.3f}$)"
        ax.plot(xs, K / (2 * np.pi**2) * xs + fit["const"], color=_colour(1), **FIT_STYLE, label=label)
        lo, hi = fit["window"]
        xe = np.linspace(np.log(chord_length(min(lo, L - hi), L)), np.nanmax(x), 200)   # fitted range only
        smooth = K / (2 * np.pi**2) * xe + fit["const"]
        for sign in (1.0, -1.0):   # even-l and odd-l branches
            ax.plot(xe, smooth + sign * fit["alternating"] * np.exp(-fit["exponent"] * xe), color=_colour(1),
                    ls=":", lw=0.9)
        ax.plot([], [], color=_colour(1), ls=":", lw=0.9,
                label=rf"with parity term $\pm A\,\ell_{{\rm eff}}^{{-{fit['exponent']:.2f}}}$")
    if fit:
        ax.plot([], [], "o", ms=4, color=_colour(0), mfc="none", alpha=0.5,
                label=f"outside the fit window {fit['window'][0]} ≤ ℓ ≤ {fit['window'][1]}")
    ax.set(xlabel=r"$\log \ell_{\rm eff}$,  $\ell_{\rm eff} = (2L/\pi)\,\sin(\pi \ell/L)$",
           ylabel=rf"block charge variance $\sigma^2(\ell)$ of ${run.charge_tex}$")
    fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncol=2, frameon=False)
    fig.suptitle(run.title("block charge variance"))
    return _save(fig, path)


def _mid_sectors(run: RunFiles) -> tuple[int, Table] | None:
    sec = run.sectors
    if sec is None:
        return None
    cut = _nearest_cut(sec["cut"], run.sites)
    rows = sec["cut"] == cut
    return cut, {k: v[rows] for k, v in sec.items()}


def _mid_totals(run: RunFiles, cut: int) -> dict[str, float] | None:
    ent = run.entropies
    if ent is None:
        return None
    rows = np.flatnonzero(ent["cut"] == cut)
    return {k: float(v[rows[0]]) for k, v in ent.items()} if rows.size else None


def draw_sector_entropies(run: RunFiles, path: Path) -> Path | None:
    """S_n(q) at mid-chain against q with the leading (equipartition) prediction, and S_1(q) minus
    that prediction at several cuts against q - <q>."""
    mid = _mid_sectors(run)
    if mid is None:
        return None
    cut, sec = mid
    cols = renyi_columns(sec)
    totals = _mid_totals(run, cut)
    threshold = _get(run.comparison, "equipartition", "threshold")
    threshold = threshold if isinstance(threshold, (int, float)) else SECTOR_THRESHOLD
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    q, p = sec["charge"], sec["probability"]
    strong = p > threshold
    exact = None
    if run.exact_sectors is not None:
        rows = run.exact_sectors["cut"] == cut
        exact = {k: v[rows] for k, v in run.exact_sectors.items()}
    shown, predicted = [], []
    for k, (label, n) in enumerate(cols):
        col, s = _colour(k), sec[f"S_{label}"]
        ok = np.isfinite(s)
        ax1.plot(q[ok & strong], s[ok & strong], "o-", ms=5, color=col, label=f"$S_{{{_n_tex(n)}}}(q)$")
        ax1.plot(q[ok & ~strong], s[ok & ~strong], "o", ms=5, mfc="none", color=col, alpha=0.6)
        shown.extend(s[ok])
        if totals and totals.get("charge_var", 0) > 0 and f"S_{label}" in totals:
            pred = float(resolved_entropy_leading(totals[f"S_{label}"], totals["charge_var"], n))
            ax1.axhline(pred, color=col, **FIT_STYLE)
            predicted.append((n, pred))
        if exact is not None and f"S_{label}" in exact:
            keep = exact["probability"] > min(threshold, float(np.min(p))) / 10
            ax1.plot(exact["charge"][keep], exact[f"S_{label}"][keep], "x", ms=6, color="0.15", zorder=4)
    _limit_to_data(ax1, np.asarray(shown), predicted)
    _charge_ticks(ax1, q, _charge_spacing(q))
    ax1.set(xlabel=rf"block charge $q$ (${run.charge_tex}$)", ylabel=r"$S_n(q)$",
            title=rf"cut $\ell = {cut}$ (filled: $p(q) > {threshold:g}$)")
    handles, labels = ax1.get_legend_handles_labels()
    handles.append(Line2D([], [], color="0.3", **FIT_STYLE))
    labels.append(r"leading order $S_n - \frac{1}{2}\log(2\pi\sigma^2) + \frac{\log n}{2(1-n)}$")
    if exact is not None:
        handles.append(Line2D([], [], ls="none", marker="x", color="0.15"))
        labels.append("exact free fermions")
    fig.legend(handles, labels, loc="outside lower left", ncol=len(handles), frameon=False)
    _draw_equipartition_cuts(run, ax2, threshold)
    fig.suptitle(run.title("charge-resolved entropies and equipartition"))
    return _save(fig, path)


def _limit_to_data(ax, values: np.ndarray, predicted: list[tuple[float, float]]) -> None:
    """Keep the data readable: a prediction far outside the data range (leading order applied to
    a block with tiny variance, say) is listed as off scale instead of squashing the data."""
    values = values[np.isfinite(values)]
    if not values.size:
        return
    lo, hi = float(values.min()), float(values.max())
    span = max(hi - lo, 0.05 * abs(hi), 1e-3)
    low, high = lo - 1.5 * span, hi + 1.5 * span
    inside = [v for _, v in predicted if low <= v <= high]
    off = [(n, v) for n, v in predicted if not low <= v <= high]
    lo, hi = min([lo] + inside), max([hi] + inside)
    pad = 0.08 * max(hi - lo, 1e-3)
    ax.set_ylim(lo - pad, hi + (2.5 if off else 1.0) * pad)
    if off:
        text = "leading order off scale: " + ", ".join(f"$n = {_n_tex(n)}$: {v:.3f}" for n, v in off)
        ax.text(0.01, 0.99, text, transform=ax.transAxes, va="top", fontsize=9, color="0.3")


def _draw_equipartition_cuts(run: RunFiles, ax, threshold: float) -> None:
    """S_1(q) - leading prediction against q - <q> for a few cuts from L/8 to L/2."""
    sec, ent = run.sectors, run.entropies
    ax.set(xlabel=r"$q - \langle q\rangle$",
           ylabel=r"$S_1(q) - [S_1 - \frac{1}{2}\log(2\pi\sigma^2) - \frac{1}{2}]$",
           title=r"$S_1(q)$ relative to the leading prediction")
    if ent is None or "S_1" not in sec or not run.sites:
        return
    L = run.sites
    wanted = sorted({max(1, round(L * f)) for f in (1 / 8, 1 / 4, 3 / 8, 1 / 2)})
    available = np.unique(sec["cut"])
    cuts = sorted({int(available[np.argmin(np.abs(available - w))]) for w in wanted})
    for k, cut in enumerate(cuts):
        tot = _mid_totals(run, cut)
        if not tot or not tot.get("charge_var", 0) > 0 or "charge_mean" not in tot or "S_1" not in tot:
            continue
        rows = (sec["cut"] == cut) & (sec["probability"] > threshold) & np.isfinite(sec["S_1"])
        pred = float(resolved_entropy_leading(tot["S_1"], tot["charge_var"], 1.0))
        dq = sec["charge"][rows] - tot["charge_mean"]
        col = matplotlib.colormaps["viridis"](k / max(len(cuts) - 1, 1) * 0.85)
        ax.plot(dq, sec["S_1"][rows] - pred, "o-", ms=4.5, color=col,
                label=rf"$\ell = {cut}$, $\sigma^2 = {tot['charge_var']:.3f}$")
    ax.axhline(0.0, color="0.3", **FIT_STYLE)
    values = np.concatenate([np.asarray(line.get_ydata(), dtype=float) for line in ax.lines])
    values = values[np.isfinite(values)]
    if ax.lines[:-1] and values.size:
        lo, hi = min(values.min(), 0.0), max(values.max(), 0.0)
        span = max(hi - lo, 1e-3)
        ax.set_ylim(lo - 0.06 * span, hi + 0.45 * span)     # headroom for the legend
        ax.legend(loc="upper center", ncol=2)


def _lattice_gaussian(lattice: np.ndarray, mean: float, var: float, spacing: float) -> np.ndarray:
    """The Gaussian of the given mean and variance, normalised over the charge lattice.

    For sigma^2 well below the lattice spacing squared the continuum density exceeds 1 at its
    peak; like comparison.json's distances, the plot compares p(q) with the normalised version.
    """
    reach = 12.0 * np.sqrt(var) + 2 * spacing
    start = lattice[0] - spacing * np.ceil((lattice[0] - (mean - reach)) / spacing)
    wide = np.arange(start, mean + reach + spacing, spacing)
    total = gaussian_probability(wide, mean, var, spacing).sum()
    return gaussian_probability(lattice, mean, var, spacing) / total


def draw_charge_distribution(run: RunFiles, path: Path) -> Path | None:
    """p(q) at mid-chain against the Gaussian of the measured mean and variance (linear and log)."""
    mid = _mid_sectors(run)
    if mid is None:
        return None
    cut, sec = mid
    q, p = sec["charge"], sec["probability"]
    totals = _mid_totals(run, cut)
    mean = (totals or {}).get("charge_mean", float(np.sum(q * p) / np.sum(p)))
    var = (totals or {}).get("charge_var", float(np.sum((q - mean) ** 2 * p) / np.sum(p)))
    spacing = _charge_spacing(q)
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    floor = float(np.min(p[p > 0])) if np.any(p > 0) else 1e-16
    exact = None
    if run.exact_sectors is not None:
        rows = (run.exact_sectors["cut"] == cut) & (run.exact_sectors["probability"] > floor / 10)
        exact = {k: v[rows] for k, v in run.exact_sectors.items()}
    lattice = np.arange(q.min() - 2 * spacing, q.max() + 2.5 * spacing, spacing)
    for ax, log in ((ax1, False), (ax2, True)):
        ax.bar(q, p, width=0.6 * spacing, color=_colour(0), alpha=0.75, label="MPS $p(q)$")
        if var > 0:   # the Gaussian normalised on the charge lattice; lines only guide the eye
            ax.plot(lattice, _lattice_gaussian(lattice, mean, var, spacing), "D--", ms=5, mfc="none",
                    color=_colour(1), lw=0.9,
                    label=rf"Gaussian on the lattice, $\langle q\rangle = {mean:.3f}$, $\sigma^2 = {var:.3f}$")
        if exact is not None:
            ax.plot(exact["charge"], exact["probability"], "x", ms=7, color="0.15", label="exact free fermions")
        ax.set(xlabel=rf"block charge $q$ (${run.charge_tex}$)", ylabel=r"$p(q)$",
               xlim=(lattice[0] - 0.5 * spacing, lattice[-1] + 0.5 * spacing))
        _charge_ticks(ax, lattice, spacing)
        if log:
            ax.set_yscale("log")
            ax.set_ylim(max(floor, 1e-300) / 10, 3.0)
    ax1.set_title(rf"cut $\ell = {cut}$")
    ax2.set_title("log scale")
    gauss = _get(run.comparison, "equipartition", "gaussian")
    handles, labels = ax1.get_legend_handles_labels()
    if isinstance(gauss, dict) and isinstance(gauss.get("total_variation"), (int, float)):
        handles.append(Line2D([], [], ls="none"))
        labels.append(f"total-variation distance from the Gaussian: {gauss['total_variation']:.2e}")
    fig.legend(handles, labels, loc="outside lower center", ncol=len(handles), frameon=False)
    fig.suptitle(run.title("charge distribution of the block"))
    return _save(fig, path)


def draw_charged_moments(run: RunFiles, path: Path) -> Path | None:
    """Z_n(alpha)/Z_n(0) at mid-chain against alpha with the Gaussian exp(-alpha^2 sigma^2/(2n))."""
    mom = run.moments
    if mom is None:
        return None
    cut = _nearest_cut(mom["cut"], run.sites)
    rows = mom["cut"] == cut
    n_all, alpha, re, im = mom["n"][rows], mom["alpha"][rows], mom["re"][rows], mom["im"][rows]
    totals = _mid_totals(run, cut)
    var = (totals or {}).get("charge_var")
    mean = (totals or {}).get("charge_mean", 0.0)
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    shifted = abs(mean) > 1e-9    # a Gaussian p(q) centred on <q>: Z(alpha) = e^{i alpha <q> - alpha^2 sigma^2/2}
    fitted = _get(run.comparison, "charged_moments", "by_renyi") or {}
    for k, n in enumerate(np.unique(n_all[np.isfinite(n_all)])):
        col, sel = _colour(k), n_all == n
        order = np.argsort(alpha[sel])
        a, z = alpha[sel][order], (re[sel] + 1j * im[sel])[order]
        ax1.plot(a, z.real, "o", ms=3, color=col, label=f"$n = {_n_tex(n)}$")
        pos = a >= 0
        with np.errstate(divide="ignore"):
            ax2.plot(a[pos] ** 2, -np.log(np.abs(z[pos])), "o", ms=3, color=col)
        aa = np.linspace(a.min(), a.max(), 300)
        if var is not None and var > 0:
            ax1.plot(aa, np.cos(aa * mean) * np.exp(-aa**2 * var / (2 * n)), color=col, **FIT_STYLE)
            ax2.plot(aa[aa >= 0] ** 2, aa[aa >= 0] ** 2 * var / (2 * n), color=col, **FIT_STYLE)
        width = _get(fitted, _label_of(n), "sigma_sq")
        if isinstance(width, (int, float)) and width > 0:
            ax2.plot(aa[aa >= 0] ** 2, aa[aa >= 0] ** 2 * width / 2, color=col, ls=":", lw=1.2)
    ax1.set(xlabel=r"flux $\alpha$", ylabel=r"Re $Z_n(\alpha)/Z_n(0)$", title=rf"cut $\ell = {cut}$")
    ax2.set(xlabel=r"$\alpha^2$", ylabel=r"$-\log|Z_n(\alpha)/Z_n(0)|$", title="Gaussian check: straight lines")
    ax1.set_xticks(np.pi * np.array([-1, -0.5, 0, 0.5, 1]), [r"$-\pi$", r"$-\pi/2$", "0", r"$\pi/2$", r"$\pi$"])
    handles, labels = ax1.get_legend_handles_labels()
    if var is not None and var > 0:
        handles.append(Line2D([], [], color="0.3", **FIT_STYLE))
        cos = r"\cos(\alpha\langle q\rangle)\," if shifted else ""
        mean_note = rf", $\langle q\rangle = {mean:.3f}$" if shifted else ""
        labels.append(rf"${cos}\exp(-\alpha^2\sigma^2/2n)$, $\sigma^2 = {var:.3f}${mean_note}")
    if fitted:
        handles.append(Line2D([], [], color="0.3", ls=":", lw=1.2))
        labels.append(r"right: Gaussian with the fitted width $\sigma_n^2$ (comparison.json)")
    fig.legend(handles, labels, loc="outside lower center", ncol=min(len(handles), 3), frameon=False)
    fig.suptitle(run.title(r"charged moments $Z_n(\alpha) = {\rm Tr}[\rho_A^n e^{i\alpha Q_A}]$"))
    return _save(fig, path)


def draw_sweeps(run: RunFiles, path: Path) -> Path | None:
    """|E - E_final| and the discarded weight per sweep, stage boundaries marked with their bond."""
    sw = run.sweeps
    if sw is None or "energy" not in sw:
        return None
    sweep, energy = sw["sweep"], sw["energy"]
    final = _get(run.summary, "energy")
    final = float(final) if isinstance(final, (int, float)) else float(energy[-1])
    fig = Figure(figsize=(7.6, 6.0), layout="constrained")
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    err = np.abs(energy - final)
    ok = err > 0
    ax1.semilogy(sweep[ok], err[ok], "o-", ms=4, color=_colour(0), label=r"$|E - E_{\rm final}|$")
    if "delta_energy" in sw:
        d = np.abs(sw["delta_energy"])
        good = np.isfinite(d) & (d > 0)
        ax1.semilogy(sweep[good], d[good], "s--", ms=3.5, color=_colour(1), lw=1,
                     label=r"$|E_k - E_{k-1}|$")
    ax1.set(ylabel="energy difference")
    ax1.legend(loc="lower left", title=f"$E_{{\\rm final}} = {final:.10f}$")
    if "truncation" in sw:
        t = sw["truncation"]
        good = np.isfinite(t) & (t > 0)
        ax2.semilogy(sweep[good], t[good], "o-", ms=4, color=_colour(2), label="discarded weight (largest per sweep)")
        ax2.legend(loc="upper right")
    ax2.set(xlabel="sweep", ylabel="discarded weight")
    if "stage" in sw and "bond" in sw:
        for s in np.unique(sw["stage"]):
            first = sweep[sw["stage"] == s].min()
            for ax in (ax1, ax2):
                ax.axvline(first - 0.5, color="0.5", lw=0.8, ls=":")
            for ax in (ax2,):
                ax.text(first - 0.47, 0.5, f"stage {int(s) + 1}: bond {int(sw['bond'][sw['stage'] == s][0])}",
                        transform=ax.get_xaxis_transform(), rotation=90, ha="left", va="center", fontsize=8.5,
                        color="0.35", bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1.0))
    ax2.xaxis.set_major_locator(MaxNLocator(integer=True))
    fig.suptitle(run.title("ground-state search"))
    return _save(fig, path)


DRAWERS = (
    ("entropy_profile.png", draw_entropy_profile),
    ("charge_variance.png", draw_charge_variance),
    ("sector_entropies.png", draw_sector_entropies),
    ("charge_distribution.png", draw_charge_distribution),
    ("charged_moments.png", draw_charged_moments),
    ("sweeps.png", draw_sweeps),
)


def draw_all(directory: str | Path) -> list[Path]:
    """Draw every figure whose data exist into ``<directory>/plots/``; return the files written.

    Figures whose tables are missing are skipped quietly; theory curves appear when
    comparison.json and the exact free-fermion tables are present.
    """
    if not Path(directory).is_dir():
        raise FileNotFoundError(f"{directory}: no such run directory")
    run = RunFiles.read(directory)
    out_dir = run.directory / PLOTS
    out_dir.mkdir(exist_ok=True)
    written = []
    with matplotlib.rc_context(STYLE):
        for name, draw in DRAWERS:
            path = draw(run, out_dir / name)
            if path is not None:
                written.append(path)
    return written
