"""Charged moments Z_n(alpha)/Z_n(0) against the Gaussian (Luttinger-liquid) form.

The Gaussian curves are drawn only in the critical regime or when comparison.json never decided
it (older files); a gapped chain gets a note pointing to massive_moments.png, an undecided one the
shortened reason (:class:`mps.pipeline.plots.massive.RegimeView`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from mps.pipeline.plots.common import (
    FIT_STYLE,
    RunFiles,
    central_totals,
    colour,
    label_of,
    lookup,
    n_tex,
    nearest_cut,
    save,
)
from mps.pipeline.plots.massive import RegimeView, note_box


def draw_charged_moments(run: RunFiles, path: Path) -> Path | None:
    """Write :func:`charged_moments_figure` to ``path`` (None when moments.csv is absent)."""
    fig = charged_moments_figure(run)
    return None if fig is None else save(fig, path)


def charged_moments_figure(run: RunFiles) -> Figure | None:
    """Z_n(alpha)/Z_n(0) at mid-chain against alpha with the Gaussian exp(-alpha^2 sigma^2/(2n))
    (critical regime only)."""
    mom = run.moments
    if mom is None:
        return None
    cut = nearest_cut(mom["cut"], run.sites)
    rows = mom["cut"] == cut
    n_all, alpha, re, im = mom["n"][rows], mom["alpha"][rows], mom["re"][rows], mom["im"][rows]
    totals = central_totals(run, cut)
    var = (totals or {}).get("charge_var")
    mean = (totals or {}).get("charge_mean", 0.0)
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    shifted = abs(mean) > 1e-9    # a Gaussian p(q) centred on <q>: Z(alpha) = e^{i alpha <q> - alpha^2 sigma^2/2}
    regime = RegimeView.of(run)
    fitted = (lookup(run.comparison, "charged_moments", "by_renyi") or {}) if regime.critical else {}
    gaussian = regime.critical and var is not None and var > 0
    for k, n in enumerate(np.unique(n_all[np.isfinite(n_all)])):
        col, sel = colour(k), n_all == n
        order = np.argsort(alpha[sel])
        a, z = alpha[sel][order], (re[sel] + 1j * im[sel])[order]
        ax1.plot(a, z.real, "o", ms=3, color=col, label=f"$n = {n_tex(n)}$")
        pos = a >= 0
        with np.errstate(divide="ignore"):
            ax2.plot(a[pos] ** 2, -np.log(np.abs(z[pos])), "o", ms=3, color=col)
        aa = np.linspace(a.min(), a.max(), 300)
        if gaussian:
            ax1.plot(aa, np.cos(aa * mean) * np.exp(-aa**2 * var / (2 * n)), color=col, **FIT_STYLE,
                     gid="critical-fit")
            ax2.plot(aa[aa >= 0] ** 2, aa[aa >= 0] ** 2 * var / (2 * n), color=col, **FIT_STYLE, gid="critical-fit")
        width = lookup(fitted, label_of(n), "sigma_sq")
        if isinstance(width, (int, float)) and width > 0:
            ax2.plot(aa[aa >= 0] ** 2, aa[aa >= 0] ** 2 * width / 2, color=col, ls=":", lw=1.2, gid="critical-fit")
    ax1.set(xlabel=r"flux $\alpha$", ylabel=r"Re $Z_n(\alpha)/Z_n(0)$", title=rf"cut $\ell = {cut}$")
    ax2.set(xlabel=r"$\alpha^2$", ylabel=r"$-\log|Z_n(\alpha)/Z_n(0)|$",
            title="Gaussian check: straight lines" if regime.critical else r"against $\alpha^2$")
    note = regime.note("massive_moments.png")
    if note:
        note_box(ax2, note)
    ax1.set_xticks(np.pi * np.array([-1, -0.5, 0, 0.5, 1]), [r"$-\pi$", r"$-\pi/2$", "0", r"$\pi/2$", r"$\pi$"])
    handles, labels = ax1.get_legend_handles_labels()
    if gaussian:
        handles.append(Line2D([], [], color="0.3", **FIT_STYLE))
        cos = r"\cos(\alpha\langle q\rangle)\," if shifted else ""
        mean_note = rf", $\langle q\rangle = {mean:.3f}$" if shifted else ""
        labels.append(rf"${cos}\exp(-\alpha^2\sigma^2/2n)$, $\sigma^2 = {var:.3f}${mean_note}")
    if fitted:
        handles.append(Line2D([], [], color="0.3", ls=":", lw=1.2))
        labels.append(r"right: Gaussian with the fitted width $\sigma_n^2$ (comparison.json)")
    fig.legend(handles, labels, loc="outside lower center", ncol=min(len(handles), 3), frameon=False)
    fig.suptitle(run.title(r"charged moments $Z_n(\alpha) = {\rm Tr}[\rho_A^n e^{i\alpha Q_A}]$"))
    return fig
