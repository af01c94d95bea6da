"""Profiles along the chain: S_n(l) with the Calabrese-Cardy fit, and the block charge variance
with the fit of the Luttinger parameter.

Both fits are critical (log l) forms: they are drawn only when comparison.json's regime verdict is
``critical`` or was never decided (older files), and never with a fitted c or K <= 0; otherwise the
panel says why (:class:`mps.pipeline.plots.massive.RegimeView`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from mps.pipeline.plots.common import (
    EXACT_STYLE,
    FIT_STYLE,
    RunFiles,
    colour,
    fit_entry,
    lookup,
    n_tex,
    renyi_columns,
    save,
)
from mps.pipeline.plots.massive import RegimeView, note_box, positive, shorten
from mps.theory.fieldtheory import chord_length, renyi_prefactor


# ----------------------------------------------------------------------------- figures
def draw_entropy_profile(run: RunFiles, path: Path) -> Path | None:
    """Write :func:`entropy_profile_figure` to ``path`` (None when entropies.csv is absent)."""
    fig = entropy_profile_figure(run)
    return None if fig is None else save(fig, path)


def entropy_profile_figure(run: RunFiles) -> Figure | None:
    """S_n(l) against the cut and against log l_eff, with the Calabrese-Cardy fits (critical regime
    only) and exact values."""
    ent = run.entropies
    if ent is None or not run.sites:
        return None
    cols = renyi_columns(ent)
    if not cols:
        return None
    L, cuts = run.sites, ent["cut"]
    regime = RegimeView.of(run)
    fits = lookup(run.comparison, "central_charge", "by_renyi") if regime.critical else None
    fits = fits if isinstance(fits, dict) else {}
    negative = [label for label, fit in fits.items() if fit_entry(fit) and not positive(fit)]
    fits = {label: fit for label, fit in fits.items() if positive(fit)}   # never a fitted c <= 0
    exact = run.exact_entropies
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    x = np.log(chord_length(cuts, L))
    window, ranges = None, []
    for k, (label, n) in enumerate(cols):
        col, y = colour(k), ent[f"S_{label}"]
        fit = fit_entry(fits.get(label))
        name = f"$S_{{{n_tex(n)}}}$" + (f"  ($c = {fit['value']:.3f}$)" if fit else "")
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
                         **FIT_STYLE, zorder=2, gid="critical-fit")
            corrected = y - fit["alternating"] * (-1.0) ** cuts * np.exp(-fit["exponent"] * x)
            xs = np.linspace(np.nanmin(x), np.nanmax(x), 50)
            ax2.plot(xs, fit["value"] * renyi_prefactor(n) * xs + fit["const"], color=col, **FIT_STYLE,
                     gid="critical-fit")
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
    note = regime.note()      # say why no Calabrese-Cardy curve is drawn
    if note is None and negative:
        note = shorten("central charge fitted <= 0 for n = " + ", ".join(negative)
                       + ": the log l form does not describe the data, no curve drawn")
    if note:
        note_box(ax2, note)
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
    return fig


def draw_charge_variance(run: RunFiles, path: Path) -> Path | None:
    """Write :func:`charge_variance_figure` to ``path`` (None without a charge_var column)."""
    fig = charge_variance_figure(run)
    return None if fig is None else save(fig, path)


def charge_variance_figure(run: RunFiles) -> Figure | None:
    """sigma^2(l) of the block charge against log l_eff with the fitted (K/(2 pi^2)) log l_eff line
    (critical regime only, K > 0)."""
    ent = run.entropies
    if ent is None or not run.sites or "charge_var" not in ent:
        return None
    L, cuts, var = run.sites, ent["cut"], ent["charge_var"]
    x = np.log(chord_length(cuts, L))
    lutt = lookup(run.comparison, "luttinger")
    regime = RegimeView.of(run)
    fit = fit_entry(lookup(lutt, "fit")) if lookup(lutt, "value") is not None else None
    withheld = None
    if fit is not None and not (regime.critical and positive(fit)):   # never a K <= 0, nor outside the regime
        withheld = None if not regime.critical else f"K fitted as {fit['value']:.3g} <= 0: no line drawn"
        fit = None
    slope = lookup(lutt, "slope")
    slope = slope if isinstance(slope, (int, float)) else 1 / (2 * np.pi**2)
    fig = Figure(figsize=(7.6, 6.0), layout="constrained")
    ax = fig.subplots()
    inside = np.ones_like(cuts, dtype=bool)
    if fit:
        inside = (cuts >= fit["window"][0]) & (cuts <= fit["window"][1])
    even = cuts % 2 == 0
    for mask, marker, what in ((even, "o", r"even $\ell$"), (~even, "s", r"odd $\ell$")):
        ax.plot(x[mask & inside], var[mask & inside], marker, ms=4, color=colour(0), label=f"MPS, {what}")
        ax.plot(x[mask & ~inside], var[mask & ~inside], marker, ms=4, color=colour(0), mfc="none", alpha=0.5)
    if run.exact_entropies is not None and "charge_var" in run.exact_entropies:
        ex = run.exact_entropies
        ax.plot(np.log(chord_length(ex["cut"], L)), ex["charge_var"], "x", ms=5, color="0.15",
                label="exact lattice free fermions", zorder=4)
    if fit:
        xs = np.linspace(np.nanmin(x), np.nanmax(x), 50)
        K = fit["value"]
        label = rf"fit $K s\log\ell_{{\rm eff}}$ + const, $s = 1/{1 / slope:.1f}$, $K = {K:.3f}$"
        ba = lookup(lutt, "bethe_ansatz")
        if isinstance(ba, (int, float)):
            label += rf" (Bethe ansatz ${ba:.3f}$)"
        ax.plot(xs, K * slope * xs + fit["const"], color=colour(1), **FIT_STYLE, label=label, gid="critical-fit")
        lo, hi = fit["window"]
        xe = np.linspace(np.log(chord_length(min(lo, L - hi), L)), np.nanmax(x), 200)   # fitted range only
        smooth = K * slope * xe + fit["const"]
        for sign in (1.0, -1.0):   # even-l and odd-l branches
            ax.plot(xe, smooth + sign * fit["alternating"] * np.exp(-fit["exponent"] * xe), color=colour(1),
                    ls=":", lw=0.9, gid="critical-fit")
        ax.plot([], [], color=colour(1), ls=":", lw=0.9,
                label=rf"with parity term $\pm A\,\ell_{{\rm eff}}^{{-{fit['exponent']:.2f}}}$")
    if fit:
        ax.plot([], [], "o", ms=4, color=colour(0), mfc="none", alpha=0.5,
                label=f"outside the fit window {fit['window'][0]} ≤ ℓ ≤ {fit['window'][1]}")
    note = regime.note("massive_moments.png") or (withheld and shorten(withheld))
    if note:
        note_box(ax, note)
    ax.set(xlabel=r"$\log \ell_{\rm eff}$,  $\ell_{\rm eff} = (2L/\pi)\,\sin(\pi \ell/L)$",
           ylabel=rf"block charge variance $\sigma^2(\ell)$ of ${run.charge_tex}$")
    fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncol=2, frameon=False)
    fig.suptitle(run.title("block charge variance"))
    return fig
