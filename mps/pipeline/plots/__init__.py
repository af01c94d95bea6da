"""Figures of a finished run: entanglement profile, charge variance, sector entropies, p(q), charged
moments and sweep history, and for gapped chains the comparison with the massive Dirac and complex
scalar fields, drawn from the run directory's tables into ``<dir>/plots/*.png``.

Every figure is built on a :class:`matplotlib.figure.Figure` and rendered by the Agg canvas
directly; pyplot is never imported, so no backend is switched, no figure registry grows and no
global style changes leak out (font sizes are applied through ``matplotlib.rc_context`` for the
duration of one figure). A figure whose tables are absent is skipped quietly; theory curves are
drawn when comparison.json (fits) or the exact free-fermion tables are present, and only the forms
the run's regime supports: the critical (Luttinger-liquid) forms when comparison.json's regime
verdict is critical or was never decided (older files), the massive figures when it holds a
``massive`` section (gapped chains); otherwise the panels say why
(:class:`mps.pipeline.plots.massive.RegimeView`).

Forms and sources of the theory curves are those of :mod:`mps.theory.fieldtheory`: Calabrese and Cardy
(J. Stat. Mech. 2004, P06002) with the open-chain parity term, the block charge variance
(K/(2 pi^2)) log l_eff, the leading resolved entropies S_n - 1/2 log(2 pi sigma^2) +
log n/(2(1-n)), the Gaussian p(q) and Z_n(alpha)/Z_n(0) = exp(-alpha^2 sigma^2/(2n)) (Goldstein and
Sela, PRL 120, 200602 (2018); Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019)); the
massive forms those of :mod:`mps.theory.massive` (Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

from mps.pipeline.plots.charges import draw_joint_sectors, draw_variance_by_charge
from mps.pipeline.plots.common import DPI, PLOTS, STYLE, RunFiles, load_table, renyi_columns
from mps.pipeline.plots.history import draw_sweeps
from mps.pipeline.plots.massive import (
    draw_massive_distribution,
    draw_massive_moments,
    draw_massive_sector_entropies,
)
from mps.pipeline.plots.moments import draw_charged_moments
from mps.pipeline.plots.profiles import draw_charge_variance, draw_entropy_profile
from mps.pipeline.plots.sectors import draw_charge_distribution, draw_sector_entropies

# file name -> drawer; a drawer returns the path it wrote, or None when its data are absent
FIGURES = (
    ("entropy_profile.png", draw_entropy_profile),
    ("charge_variance.png", draw_charge_variance),
    ("sector_entropies.png", draw_sector_entropies),
    ("charge_distribution.png", draw_charge_distribution),
    ("charged_moments.png", draw_charged_moments),
    ("sweeps.png", draw_sweeps),
    ("variance_by_charge.png", draw_variance_by_charge),
    ("joint_sectors.png", draw_joint_sectors),
    ("massive_moments.png", draw_massive_moments),
    ("massive_sector_entropies.png", draw_massive_sector_entropies),
    ("massive_distribution.png", draw_massive_distribution),
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
        for name, draw in FIGURES:
            path = draw(run, out_dir / name)
            if path is not None:
                written.append(path)
    return written


__all__ = ["DPI", "FIGURES", "PLOTS", "RunFiles", "draw_all", "load_table", "renyi_columns"]
