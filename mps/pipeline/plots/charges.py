"""Figures of chains with several conserved charges (e.g. N and S^z of the Hubbard chain): the
block variance of every charge with its own Luttinger fit, and, when the run is resolved jointly,
p(q_1, q_2) and S_1(q_1, q_2) of the central cut as maps.

Variance forms: sigma_c^2 = K_c s_c log l_eff + const with the family's slope s_c (spinful
fermions: 1/pi^2 for N, 1/(4 pi^2) for S^z, so free fermions have K_c = 1); a charge whose
correlations decay exponentially on a scale below the fit window is marked gapped instead.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from mps.pipeline.plots.common import (
    CHARGE_TEX,
    FIT_STYLE,
    RunFiles,
    central_totals,
    colour,
    lookup,
    nearest_cut,
    save,
)
from mps.theory.fieldtheory import chord_length


def joint_columns(table: dict) -> list[str]:
    """Charge names of the ``charge_<name>`` columns of a jointly resolved sectors table."""
    return [k[len("charge_"):] for k in table if k.startswith("charge_")]


def draw_variance_by_charge(run: RunFiles, path: Path) -> Path | None:
    """One panel per charge: sigma_c^2(l) against log l_eff, the fitted line or the gapped verdict."""
    ent, by_charge = run.entropies, lookup(run.comparison, "luttinger_by_charge")
    if ent is None or not run.sites or not isinstance(by_charge, dict):
        return None
    names = [n for n in by_charge if f"charge_var_{n}" in ent]
    if not names:
        return None
    L, cuts = run.sites, ent["cut"]
    x = np.log(chord_length(cuts, L))
    fig = Figure(figsize=(5.2 * len(names), 5.2), layout="constrained")
    axes = np.atleast_1d(fig.subplots(1, len(names)))
    for k, (ax, name) in enumerate(zip(axes, names)):
        entry, var = by_charge[name], ent[f"charge_var_{name}"]
        ax.plot(x, var, "o", ms=4, color=colour(k), label="MPS")
        fit = entry.get("fit") if isinstance(entry.get("fit"), dict) else {}
        if entry.get("value") is not None and fit.get("const") is not None:
            xs = np.linspace(np.nanmin(x), np.nanmax(x), 50)
            smooth = entry["value"] * entry["slope"] * xs + fit["const"]
            ax.plot(xs, smooth, color="0.2", **FIT_STYLE,
                    label=rf"$K_{{{name}}} = {entry['value']:.3f}$ (window {fit['window'][0]}..{fit['window'][1]})")
            if fit.get("alternating") is not None and fit.get("exponent") is not None:
                lo, hi = fit["window"]    # the parity term only over the fitted cuts: it blows up below them
                xe = np.linspace(np.log(chord_length(min(lo, L - hi), L)), np.nanmax(x), 100)
                for sign in (1.0, -1.0):   # even-l and odd-l branches of the open-chain parity term
                    ax.plot(xe, entry["value"] * entry["slope"] * xe + fit["const"]
                            + sign * fit["alternating"] * np.exp(-fit["exponent"] * xe), color="0.2", ls=":", lw=0.9)
        elif entry.get("regime") == "gapped":
            ax.plot([], [], " ", label=rf"gapped: $\xi = {entry['correlation_length']:.2f}$ sites, no $K$")
        tex = CHARGE_TEX.get(name, name)
        ax.set(xlabel=r"$\log \ell_{\rm eff}$", ylabel=rf"$\sigma^2({tex})$", title=f"charge {name}")
        ax.legend(loc="best")
    fig.suptitle(run.title("block variance of every charge"))
    return save(fig, path)


def draw_joint_sectors(run: RunFiles, path: Path) -> Path | None:
    """p(q_1, q_2) (log colour scale) and S_1(q_1, q_2) of the central cut, for joint resolution."""
    sec = run.sectors
    if sec is None or "charge" in sec:
        return None
    names = joint_columns(sec)
    if len(names) != 2 or "S_1" not in sec:
        return None
    cut = nearest_cut(sec["cut"], run.sites)
    rows = sec["cut"] == cut
    q1, q2 = sec[f"charge_{names[0]}"][rows], sec[f"charge_{names[1]}"][rows]
    p, s1 = sec["probability"][rows], sec["S_1"][rows]
    u1, u2 = np.unique(q1), np.unique(q2)
    grid_p = np.full((u2.size, u1.size), np.nan)
    grid_s = np.full_like(grid_p, np.nan)
    i1, i2 = np.searchsorted(u1, q1), np.searchsorted(u2, q2)
    keep = p > 1e-3
    grid_p[i2, i1] = np.where(p > 0, np.log10(np.maximum(p, 1e-300)), np.nan)
    grid_s[i2[keep], i1[keep]] = s1[keep]
    fig = Figure(figsize=(11.5, 4.9), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    extent = (u1[0] - 0.5 * _step(u1), u1[-1] + 0.5 * _step(u1), u2[0] - 0.5 * _step(u2), u2[-1] + 0.5 * _step(u2))
    for ax, grid, label in ((ax1, grid_p, r"$\log_{10} p(q_1, q_2)$"),
                            (ax2, grid_s, r"$S_1(q_1, q_2)$ where $p > 10^{-3}$")):
        im = ax.imshow(grid, origin="lower", aspect="auto", extent=extent, cmap="viridis")
        fig.colorbar(im, ax=ax, label=label)
        ax.set(xlabel=rf"${CHARGE_TEX.get(names[0], names[0])}$", ylabel=rf"${CHARGE_TEX.get(names[1], names[1])}$")
    totals = central_totals(run, cut) or {}
    ax2.set_title(rf"cut $\ell = {cut}$, $S_1 = {totals.get('S_1', float('nan')):.3f}$; equipartition: flat colours")
    fig.suptitle(run.title("jointly resolved sectors"))
    return save(fig, path)


def _step(u: np.ndarray) -> float:
    return float(np.min(np.diff(u))) if u.size > 1 else 1.0
