"""The charge sectors of the central cut: S_n(q) against the equipartition prediction, and p(q)
against the Gaussian with the measured variance.

The leading-order S_n(q) and the Gaussian p(q) are Luttinger-liquid forms: drawn in the critical
regime or when comparison.json never decided it (older files); a gapped chain gets a note pointing
to the massive figures, an undecided one the shortened reason, and the right panel of the S_n(q)
figure then shows S_1(q) - S_1 without a theory form (:class:`mps.pipeline.plots.massive.RegimeView`).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from mps.pipeline.plots.common import (
    FIT_STYLE,
    SECTOR_THRESHOLD,
    RunFiles,
    central_sectors,
    central_totals,
    charge_spacing,
    charge_ticks,
    colour,
    lookup,
    n_tex,
    renyi_columns,
    save,
)
from mps.pipeline.plots.massive import RegimeView, note_box
from mps.theory.fieldtheory import gaussian_probability, resolved_entropy_leading


def draw_sector_entropies(run: RunFiles, path: Path) -> Path | None:
    """Write :func:`sector_entropies_figure` to ``path`` (None when sectors.csv is absent)."""
    fig = sector_entropies_figure(run)
    return None if fig is None else save(fig, path)


def sector_entropies_figure(run: RunFiles) -> Figure | None:
    """S_n(q) at mid-chain against q with the leading (equipartition) prediction, and S_1(q) minus
    that prediction at several cuts against q - <q> (critical regime; otherwise S_1(q) - S_1)."""
    mid = central_sectors(run)
    if mid is None:
        return None
    cut, sec = mid
    cols = renyi_columns(sec)
    totals = central_totals(run, cut)
    threshold = lookup(run.comparison, "equipartition", "threshold")
    threshold = threshold if isinstance(threshold, (int, float)) else SECTOR_THRESHOLD
    regime = RegimeView.of(run)
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
        col, s = colour(k), sec[f"S_{label}"]
        ok = np.isfinite(s)
        ax1.plot(q[ok & strong], s[ok & strong], "o-", ms=5, color=col, label=f"$S_{{{n_tex(n)}}}(q)$")
        ax1.plot(q[ok & ~strong], s[ok & ~strong], "o", ms=5, mfc="none", color=col, alpha=0.6)
        shown.extend(s[ok])
        if regime.critical and totals and totals.get("charge_var", 0) > 0 and f"S_{label}" in totals:
            pred = float(resolved_entropy_leading(totals[f"S_{label}"], totals["charge_var"], n))
            ax1.axhline(pred, color=col, **FIT_STYLE, gid="critical-fit")
            predicted.append((n, pred))
        if exact is not None and f"S_{label}" in exact:
            keep = exact["probability"] > min(threshold, float(np.min(p))) / 10
            ax1.plot(exact["charge"][keep], exact[f"S_{label}"][keep], "x", ms=6, color="0.15", zorder=4)
    _limit_to_data(ax1, np.asarray(shown), predicted)
    charge_ticks(ax1, q, charge_spacing(q))
    ax1.set(xlabel=rf"block charge $q$ (${run.charge_tex}$)", ylabel=r"$S_n(q)$",
            title=rf"cut $\ell = {cut}$ (filled: $p(q) > {threshold:g}$)")
    handles, labels = ax1.get_legend_handles_labels()
    if predicted:
        handles.append(Line2D([], [], color="0.3", **FIT_STYLE))
        labels.append(r"leading order $S_n - \frac{1}{2}\log(2\pi\sigma^2) + \frac{\log n}{2(1-n)}$")
    note = regime.note("massive_sector_entropies.png")
    if note:
        note_box(ax1, note)
    if exact is not None:
        handles.append(Line2D([], [], ls="none", marker="x", color="0.15"))
        labels.append("exact free fermions")
    fig.legend(handles, labels, loc="outside lower left", ncol=len(handles), frameon=False)
    _draw_equipartition_cuts(run, ax2, threshold, regime.critical)
    fig.suptitle(run.title("charge-resolved entropies and equipartition"))
    return fig


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
        text = "leading order off scale: " + ", ".join(f"$n = {n_tex(n)}$: {v:.3f}" for n, v in off)
        ax.text(0.01, 0.99, text, transform=ax.transAxes, va="top", fontsize=9, color="0.3")


def _draw_equipartition_cuts(run: RunFiles, ax, threshold: float, critical: bool = True) -> None:
    """S_1(q) - leading prediction against q - <q> for a few cuts from L/8 to L/2; outside the
    critical regime S_1(q) - S_1 (no theory form)."""
    sec, ent = run.sectors, run.entropies
    if critical:
        ax.set(xlabel=r"$q - \langle q\rangle$",
               ylabel=r"$S_1(q) - [S_1 - \frac{1}{2}\log(2\pi\sigma^2) - \frac{1}{2}]$",
               title=r"$S_1(q)$ relative to the leading prediction")
    else:
        ax.set(xlabel=r"$q - \langle q\rangle$", ylabel=r"$S_1(q) - S_1$", title=r"$S_1(q)$ relative to $S_1$")
    if ent is None or "S_1" not in sec or not run.sites:
        return
    L = run.sites
    wanted = sorted({max(1, round(L * f)) for f in (1 / 8, 1 / 4, 3 / 8, 1 / 2)})
    available = np.unique(sec["cut"])
    cuts = sorted({int(available[np.argmin(np.abs(available - w))]) for w in wanted})
    for k, cut in enumerate(cuts):
        tot = central_totals(run, cut)
        if not tot or not tot.get("charge_var", 0) > 0 or "charge_mean" not in tot or "S_1" not in tot:
            continue
        rows = (sec["cut"] == cut) & (sec["probability"] > threshold) & np.isfinite(sec["S_1"])
        pred = float(resolved_entropy_leading(tot["S_1"], tot["charge_var"], 1.0)) if critical else tot["S_1"]
        dq = sec["charge"][rows] - tot["charge_mean"]
        col = matplotlib.colormaps["viridis"](k / max(len(cuts) - 1, 1) * 0.85)
        ax.plot(dq, sec["S_1"][rows] - pred, "o-", ms=4.5, color=col,
                label=rf"$\ell = {cut}$, $\sigma^2 = {tot['charge_var']:.3f}$")
    data = len(ax.lines)
    if critical:
        ax.axhline(0.0, color="0.3", **FIT_STYLE, gid="critical-fit")
    values = np.concatenate([np.asarray(line.get_ydata(), dtype=float) for line in ax.lines] or [np.zeros(0)])
    values = values[np.isfinite(values)]
    if data and values.size:
        lo, hi = (min(values.min(), 0.0), max(values.max(), 0.0)) if critical else (values.min(), values.max())
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
    """Write :func:`charge_distribution_figure` to ``path`` (None when sectors.csv is absent)."""
    fig = charge_distribution_figure(run)
    return None if fig is None else save(fig, path)


def charge_distribution_figure(run: RunFiles) -> Figure | None:
    """p(q) at mid-chain against the Gaussian of the measured mean and variance (linear and log;
    the Gaussian in the critical regime only)."""
    mid = central_sectors(run)
    if mid is None:
        return None
    cut, sec = mid
    q, p = sec["charge"], sec["probability"]
    totals = central_totals(run, cut)
    mean = (totals or {}).get("charge_mean", float(np.sum(q * p) / np.sum(p)))
    var = (totals or {}).get("charge_var", float(np.sum((q - mean) ** 2 * p) / np.sum(p)))
    spacing = charge_spacing(q)
    regime = RegimeView.of(run)
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    floor = float(np.min(p[p > 0])) if np.any(p > 0) else 1e-16
    exact = None
    if run.exact_sectors is not None:
        rows = (run.exact_sectors["cut"] == cut) & (run.exact_sectors["probability"] > floor / 10)
        exact = {k: v[rows] for k, v in run.exact_sectors.items()}
    lattice = np.arange(q.min() - 2 * spacing, q.max() + 2.5 * spacing, spacing)
    for ax, log in ((ax1, False), (ax2, True)):
        ax.bar(q, p, width=0.6 * spacing, color=colour(0), alpha=0.75, label="MPS $p(q)$")
        if regime.critical and var > 0:   # the Gaussian normalised on the charge lattice; lines guide the eye
            ax.plot(lattice, _lattice_gaussian(lattice, mean, var, spacing), "D--", ms=5, mfc="none",
                    color=colour(1), lw=0.9, gid="critical-fit",
                    label=rf"Gaussian on the lattice, $\langle q\rangle = {mean:.3f}$, $\sigma^2 = {var:.3f}$")
        if exact is not None:
            ax.plot(exact["charge"], exact["probability"], "x", ms=7, color="0.15", label="exact free fermions")
        ax.set(xlabel=rf"block charge $q$ (${run.charge_tex}$)", ylabel=r"$p(q)$",
               xlim=(lattice[0] - 0.5 * spacing, lattice[-1] + 0.5 * spacing))
        charge_ticks(ax, lattice, spacing)
        if log:
            ax.set_yscale("log")
            ax.set_ylim(max(floor, 1e-300) / 10, 3.0)
    ax1.set_title(rf"cut $\ell = {cut}$")
    ax2.set_title("log scale")
    gauss = lookup(run.comparison, "equipartition", "gaussian")
    handles, labels = ax1.get_legend_handles_labels()
    note = regime.note("massive_distribution.png")
    if note:
        note_box(ax1, note)
    if regime.critical and isinstance(gauss, dict) and isinstance(gauss.get("total_variation"), (int, float)):
        handles.append(Line2D([], [], ls="none"))
        labels.append(f"total-variation distance from the Gaussian: {gauss['total_variation']:.2e}")
    fig.legend(handles, labels, loc="outside lower center", ncol=len(handles), frameon=False)
    fig.suptitle(run.title("charge distribution of the block"))
    return fig
