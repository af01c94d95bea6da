"""The ground-state search: energy and truncation per sweep, stage by stage.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from mps.pipeline.plots.common import RunFiles, colour, lookup, save


def draw_sweeps(run: RunFiles, path: Path) -> Path | None:
    """|E - E_final| and the discarded weight per sweep, stage boundaries marked with their bond."""
    sw = run.sweeps
    if sw is None or "energy" not in sw:
        return None
    sweep, energy = sw["sweep"], sw["energy"]
    final = lookup(run.summary, "energy")
    final = float(final) if isinstance(final, (int, float)) else float(energy[-1])
    fig = Figure(figsize=(7.6, 6.0), layout="constrained")
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    err = np.abs(energy - final)
    ok = err > 0
    ax1.semilogy(sweep[ok], err[ok], "o-", ms=4, color=colour(0), label=r"$|E - E_{\rm final}|$")
    if "delta_energy" in sw:
        d = np.abs(sw["delta_energy"])
        good = np.isfinite(d) & (d > 0)
        ax1.semilogy(sweep[good], d[good], "s--", ms=3.5, color=colour(1), lw=1,
                     label=r"$|E_k - E_{k-1}|$")
    ax1.set(ylabel="energy difference")
    ax1.legend(loc="lower left", title=f"$E_{{\\rm final}} = {final:.10f}$")
    if "truncation" in sw:
        t = sw["truncation"]
        good = np.isfinite(t) & (t > 0)
        ax2.semilogy(sweep[good], t[good], "o-", ms=4, color=colour(2), label="discarded weight (largest per sweep)")
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
    return save(fig, path)
