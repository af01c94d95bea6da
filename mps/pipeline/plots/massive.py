"""Gapped chains: the run against the massive Dirac fermion and the massive complex scalar, and which
theory forms each regime supports in the other figures.

The three figures are drawn only when comparison.json has a ``massive`` section (written for chains
whose regime verdict is ``gapped``, :mod:`mps.pipeline.massive_report`); otherwise they are skipped:

- ``massive_moments.png``: -log|Z_n(alpha)/Z_n(0)| at the massive cut against alpha, one panel per
  finite Renyi index, with the fitted Dirac and scalar ladders (equally spaced entanglement levels
  of spacing eps; :func:`mps.theory.massive.log_moment_ladder`) and, when present, the ladders
  fitted to the free lattice chains of the same correlation length (thin lines);
- ``massive_sector_entropies.png``: S_n(q) - S_n against q - <q> with each field's ladder prediction
  (exact for an equally spaced spectrum: flat for the Dirac ladder, a q-dependence ~ n eps^2 q^2/8
  for the scalar);
- ``massive_distribution.png``: p(q) against q - <q> on a log scale with both ladders' p(q): a discrete
  Gaussian (Dirac) and, for small eps, the sech law (eps/2pi) sech(eps q/2) (scalar).

Forms: Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073 (massive free fields; equation numbers
not checked), in the ladder form derived in :mod:`mps.theory.massive` (corner transfer matrix:
Peschel, Kaulke and Legeza, Ann. Phys. (Leipzig) 8, 153 (1999), from memory). The ladder counts
elementary charges; predicted charges are drawn on the run's charge lattice (times its spacing).

:class:`RegimeView` tells the other drawers which forms they may draw: the Luttinger-liquid forms
(Calabrese-Cardy growth, K log l variance, Gaussian p(q) and moments, leading-order S_n(q)) only
when the verdict is ``critical`` or when comparison.json predates the regime decision (verdict
absent or ``unchecked``: drawn as before); otherwise a note with the shortened reason, and in the
gapped regime a pointer to the massive figures. Theory artists carry a ``gid`` (``critical-fit``,
``massive:dirac``, ``massive:free-scalar``, ``regime-note``, ...) so that their presence can be checked.
"""

from __future__ import annotations

import math
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MultipleLocator

from mps.pipeline.plots.common import (
    RunFiles,
    central_totals,
    charge_spacing,
    colour,
    lookup,
    n_tex,
    save,
)
from mps.theory.massive import log_moment_ladder

FIELDS = (("dirac", "Dirac", "--"), ("scalar", "complex scalar", ":"))
FIELD_COLOURS = {"dirac": colour(0), "scalar": colour(1)}
VERDICT_NAMES = {"dirac": "follows the Dirac ladder", "scalar": "follows the scalar ladder",
                 "neither": "fits neither ladder"}
MAX_PANELS = 4                 # Renyi indices drawn in massive_moments.png (the first four finite ones)
RARE_SECTOR = 1e-10            # sectors rarer than this are left out of the S_n(q) figure
P_FLOOR = 1e-12                # lower end of the p(q) axis (exact engines resolve p down to ~1e-300)
NOTE_STYLE = dict(fontsize=8.8, color="0.2", va="top", ha="left",
                  bbox=dict(facecolor="white", edgecolor="0.6", alpha=0.92, boxstyle="round,pad=0.35"))


# ----------------------------------------------------------------------------- regime of a run
@dataclass(frozen=True)
class RegimeView:
    """The regime entry of comparison.json as the figures need it.

    ``verdict``: critical, gapped, undecided, unchecked or None (no comparison.json, or one written
    before the regime decision); ``massive``: whether the massive figures are drawn.
    """

    verdict: str | None
    reason: str | None
    xi: float | None
    massive: bool

    @classmethod
    def of(cls, run: RunFiles) -> "RegimeView":
        regime = lookup(run.comparison, "regime")
        verdict = lookup(regime, "verdict")
        reason = lookup(regime, "reason")
        xi = lookup(regime, "xi")
        return cls(verdict if isinstance(verdict, str) else None, reason if isinstance(reason, str) else None,
                   float(xi) if isinstance(xi, (int, float)) and math.isfinite(xi) else None,
                   isinstance(lookup(run.comparison, "massive"), dict))

    @property
    def critical(self) -> bool:
        """Whether the Luttinger-liquid forms may be drawn (critical, or a regime never decided)."""
        return self.verdict in (None, "critical", "unchecked")

    def note(self, massive_figure: str | None = None, width: int = 56, max_lines: int = 5) -> str | None:
        """Why no critical form is drawn (None when it is): the shortened reason, and in the gapped
        regime with a massive section a pointer to ``massive_figure``."""
        if self.critical:
            return None
        if self.verdict == "gapped" and self.massive and massive_figure:
            xi = f" (correlation length {self.xi:.3g} sites)" if self.xi is not None else ""
            text = (f"gapped chain{xi}: area law, the Luttinger-liquid forms do not apply; "
                    f"see {massive_figure} for the massive-field comparison")
        else:
            text = self.reason or f"regime {self.verdict}: no critical fit"
        return shorten(text, width, max_lines)


def shorten(text: str, width: int = 56, max_lines: int = 5) -> str:
    """``text`` wrapped to ``width`` columns, cut to ``max_lines`` (ending in '...'), '$' escaped."""
    return textwrap.fill(text.replace("$", r"\$"), width=width, max_lines=max_lines, placeholder=" ...")


def note_box(ax, text: str, where: tuple[float, float] = (0.02, 0.97)) -> None:
    """``text`` in a box at the top left of ``ax``, with headroom added above the data for it."""
    lines = text.count("\n") + 1
    frac = min(0.65, 0.075 * lines + 0.06)
    lo, hi = ax.get_ylim()
    if ax.get_yscale() == "log":
        llo, lhi = np.log10(lo), np.log10(hi)
        ax.set_ylim(lo, 10 ** (lhi + (lhi - llo) * frac / (1 - frac)))
    else:
        ax.set_ylim(lo, hi + (hi - lo) * frac / (1 - frac))
    ax.text(*where, text, transform=ax.transAxes, gid="regime-note", zorder=6, **NOTE_STYLE)


def positive(entry) -> bool:
    """Whether a fit dict holds a positive fitted value (c and K are never shown when <= 0)."""
    value = lookup(entry, "value")
    return isinstance(value, (int, float)) and math.isfinite(value) and value > 0


# ----------------------------------------------------------------------------- helpers
def _section(run: RunFiles) -> dict | None:
    sec = lookup(run.comparison, "massive")
    return sec if isinstance(sec, dict) and isinstance(sec.get("cut"), (int, float)) else None


def _finite_labels(sec: dict) -> list[tuple[str, float]]:
    """(label, n) of the Renyi indices of the flux fits, sorted by n."""
    out = []
    for label in sec.get("flux") or {}:
        try:
            n = float(label)
        except ValueError:
            continue
        if math.isfinite(n) and n > 0:
            out.append((label, n))
    return sorted(out, key=lambda item: item[1])


def _ladder(fit, field: str) -> tuple[float, float] | None:
    """(eps, offset) of a field's ladder fit, or None when absent."""
    eps = lookup(fit, f"eps_{field}")
    if not isinstance(eps, (int, float)) or not (math.isfinite(eps) and eps > 0):
        return None
    offset = lookup(fit, "offset_dirac") if field == "dirac" else 0.5
    return float(eps), float(offset) if isinstance(offset, (int, float)) else 0.5


def _integer_ticks(ax, values: np.ndarray, spacing: float) -> None:
    """Ticks at multiples of the charge spacing on a q - <q> axis when there are few."""
    v = values[np.isfinite(values)]
    if v.size and spacing > 0 and np.ptp(v) / spacing <= 14:
        ax.xaxis.set_major_locator(MultipleLocator(spacing))


def _padded(values: np.ndarray, spacing: float) -> tuple[float, float]:
    return float(values.min()) - 0.6 * spacing, float(values.max()) + 0.6 * spacing


def _massive_sectors(run: RunFiles):
    """(section, q - <q>, p, rows of sectors.csv, totals of entropies.csv, predicted shapes) at the
    massive cut, or None without a massive section or sector tables."""
    sec, table = _section(run), run.sectors
    if sec is None or table is None or "charge" not in table:
        return None
    cut = int(sec["cut"])
    rows = table["cut"] == cut
    totals = central_totals(run, cut)
    if not rows.any() or not totals:
        return None
    table = {k: v[rows] for k, v in table.items()}
    q, p = table["charge"], table["probability"]
    mean = totals.get("charge_mean", float(np.sum(q * p) / np.sum(p)))
    predicted = sec.get("predicted") if isinstance(sec.get("predicted"), dict) else {}
    return sec, q - mean, p, table, totals, predicted


def _title(run: RunFiles, sec: dict, what: str) -> str:
    xi = sec.get("xi")
    xi_text = f", charge correlation length $\\xi = {xi:.3g}$ sites" if isinstance(xi, (int, float)) else ""
    return run.title(what) + f"\ncut $\\ell = {int(sec['cut'])}${xi_text}"


# ----------------------------------------------------------------------------- figures
def massive_moments_figure(run: RunFiles) -> Figure | None:
    """-log|Z_n(alpha)/Z_n(0)| against alpha per n, with the fitted Dirac and scalar ladders."""
    sec, mom = _section(run), run.moments
    if sec is None or mom is None:
        return None
    cut = int(sec["cut"])
    rows = mom["cut"] == cut
    panels = [(label, n) for label, n in _finite_labels(sec) if np.any(rows & (mom["n"] == n))][:MAX_PANELS]
    if not panels:
        return None
    fig = Figure(figsize=(1.6 + 3.7 * len(panels), 5.0), layout="constrained")
    axes = fig.subplots(1, len(panels), squeeze=False)[0]
    free = sec.get("free_reference") if isinstance(sec.get("free_reference"), dict) else None
    for ax, (label, n) in zip(axes, panels):
        sel = rows & (mom["n"] == n)
        order = np.argsort(mom["alpha"][sel])
        a = mom["alpha"][sel][order]
        z = (mom["re"][sel] + 1j * mom["im"][sel])[order]
        with np.errstate(divide="ignore"):
            ax.plot(a, -np.log(np.abs(z)), "o", ms=4.2, mfc="none", mew=0.8, color="0.15", zorder=2)
        aa = np.linspace(a.min(), a.max(), 400)
        fit = lookup(sec, "flux", label, "ladder")
        lines = []
        for field, name, ls in FIELDS:
            col = FIELD_COLOURS[field]
            par = _ladder(fit, field)
            if par is not None:
                ax.plot(aa, -log_moment_ladder(field, aa, n, *par).real, color=col, ls=ls, lw=1.6,
                        gid=f"massive:{field}", zorder=3)
                rel = lookup(fit, f"rel_{field}")
                rel_text = f", residual {rel:.1e}" if isinstance(rel, (int, float)) else ""
                lines.append(f"{name}: $\\epsilon = {par[0]:.3g}${rel_text}")
            ref = _ladder(lookup(free, field, "flux", label, "ladder"), field)
            if ref is not None:
                ax.plot(aa, -log_moment_ladder(field, aa, n, *ref).real, color=col, lw=0.7, alpha=0.8,
                        gid=f"massive:free-{field}", zorder=1)
        verdict = VERDICT_NAMES.get(lookup(fit, "verdict"), "no ladder fit")
        ax.set_title(f"$n = {n_tex(n)}$: {verdict}")
        if lines:
            ax.text(0.5, 0.97, "ladder fits (relative residual)\n" + "\n".join(lines), transform=ax.transAxes,
                    fontsize=8.5, va="top", ha="center", color="0.2",
                    bbox=dict(facecolor="white", edgecolor="0.7", alpha=0.9))
            lo, hi = ax.get_ylim()
            ax.set_ylim(lo, hi + 0.45 * (hi - lo))     # room for the box above the peak at |alpha| = pi
        ax.set_xticks(np.pi * np.array([-1, -0.5, 0, 0.5, 1]), [r"$-\pi$", r"$-\pi/2$", "0", r"$\pi/2$", r"$\pi$"])
        ax.set_xlabel(r"flux $\alpha$")
    axes[0].set_ylabel(r"$-\log|Z_n(\alpha)/Z_n(0)|$")
    handles = [Line2D([], [], ls="none", marker="o", ms=4.2, mfc="none", color="0.15")]
    labels = ["data"]
    for field, name, ls in FIELDS:
        handles.append(Line2D([], [], color=FIELD_COLOURS[field], ls=ls, lw=1.5))
        labels.append(f"{name} ladder fitted to the data")
    if free is not None:
        for field, name, _ in FIELDS:
            handles.append(Line2D([], [], color=FIELD_COLOURS[field], lw=0.7))
            labels.append(f"free {name}, same $\\xi$ (exact, {free.get('sites', '?')} sites)")
    fig.legend(handles, labels, loc="outside lower center", ncol=3, frameon=False)
    fig.suptitle(_title(run, sec, "charged moments against the massive fields"))
    return fig


def massive_sector_entropies_figure(run: RunFiles) -> Figure | None:
    """S_n(q) - S_n against q - <q> with each field's ladder prediction."""
    got = _massive_sectors(run)
    if got is None:
        return None
    sec, dq, p, table, totals, predicted = got
    threshold = lookup(sec, "equipartition", "threshold")
    threshold = float(threshold) if isinstance(threshold, (int, float)) else 1e-3
    spacing = charge_spacing(table["charge"])
    labels = [(label, n) for label, n in _finite_labels(sec) if f"S_{label}" in table and f"S_{label}" in totals]
    if not labels:
        return None
    fig = Figure(figsize=(8.6, 6.0), layout="constrained")
    ax = fig.subplots()
    drawn = dq[p > RARE_SECTOR]
    span = (drawn.min(initial=0.0), drawn.max(initial=0.0))
    shown = []
    notes = []
    for k, (label, n) in enumerate(labels):
        col = colour(k + 2)
        shift = table[f"S_{label}"] - totals[f"S_{label}"]
        ok = np.isfinite(shift) & (p > RARE_SECTOR)
        strong = ok & (p >= threshold)
        ax.plot(dq[strong], shift[strong], "o", ms=6, color=col, zorder=3)
        ax.plot(dq[ok & ~strong], shift[ok & ~strong], "o", ms=6, mfc="none", color=col, alpha=0.6, zorder=3)
        shown.extend(shift[strong])
        for field, _, ls in FIELDS:
            pred = predicted.get(field)
            values = lookup(pred, "entropy_shift", label)
            if not isinstance(values, list):
                continue
            qp = np.asarray(pred["charges"], dtype=float) * spacing
            sp = np.asarray([np.nan if v is None else v for v in values], dtype=float)
            inside = np.isfinite(sp) & (qp >= span[0] - spacing) & (qp <= span[1] + spacing)
            ax.plot(qp[inside], sp[inside], ls=ls, marker="d" if field == "dirac" else "s", ms=4, mfc="none",
                    color=col, lw=1.2, gid=f"massive:{field}", zorder=2)
            shown.extend(sp[inside])
        curv = lookup(sec, "equipartition", "by_renyi", label)
        if isinstance(lookup(curv, "curvature"), (int, float)):
            pd, ps = lookup(curv, "predicted", "dirac"), lookup(curv, "predicted", "scalar")
            fmt = [f"{v:.3g}" if isinstance(v, (int, float)) else "-" for v in (pd, ps)]
            notes.append(f"$n = {n_tex(n)}$: {curv['curvature']:.2g} (Dirac {fmt[0]}, scalar {fmt[1]})")
    values = np.asarray(shown, dtype=float)
    values = values[np.isfinite(values)]
    if values.size:
        lo, hi = values.min(), values.max()
        pad = 0.1 * max(hi - lo, 0.02)
        ax.set_ylim(lo - pad, hi + (4.5 if notes else 1.0) * pad)
    if notes:
        ax.text(0.02, 0.97, "curvature $k$ of $S_n(q) - S_n = s_0 + k\\,(q - \\langle q\\rangle)^2$: measured\n"
                "(leading order for small $\\epsilon$: Dirac 0, scalar $n\\epsilon^2/8$)\n" + "\n".join(notes), transform=ax.transAxes, fontsize=8.8, va="top",
                bbox=dict(facecolor="white", edgecolor="0.7", alpha=0.9))
    _integer_ticks(ax, dq[p > RARE_SECTOR], spacing)
    ax.set(xlabel=rf"$q - \langle q\rangle$ (${run.charge_tex}$)", ylabel=r"$S_n(q) - S_n$")
    handles = [Line2D([], [], ls="none", marker="o", ms=6, color=colour(k + 2)) for k in range(len(labels))]
    names = [f"$n = {n_tex(n)}$" for _, n in labels]
    for field, name, ls in FIELDS:
        if field in predicted:
            handles.append(Line2D([], [], color="0.3", ls=ls, marker="d" if field == "dirac" else "s", mfc="none"))
            names.append(f"{name} ladder, $\\epsilon = {predicted[field].get('eps', math.nan):.3g}$")
    handles.append(Line2D([], [], ls="none", marker="o", mfc="none", color="0.4"))
    names.append(f"open: $p(q) < {threshold:g}$")
    fig.legend(handles, names, loc="outside lower center", ncol=min(4, len(handles)), frameon=False)
    fig.suptitle(_title(run, sec, "charge-resolved entropies against the massive fields"))
    return fig


def massive_distribution_figure(run: RunFiles) -> Figure | None:
    """p(q) against q - <q> (log scale) with both fields' ladder p(q) and number entropies."""
    got = _massive_sectors(run)
    if got is None:
        return None
    sec, dq, p, table, _, predicted = got
    keep = p > 0
    if not keep.any():
        return None
    spacing = charge_spacing(table["charge"])
    fig = Figure(figsize=(8.6, 5.8), layout="constrained")
    ax = fig.subplots()
    s_num = -float(np.sum(p[keep] * np.log(p[keep])))
    ax.plot(dq[keep], p[keep], "o", ms=6, color="0.15", zorder=3, label=f"data, $S_{{\\rm number}} = {s_num:.4f}$")
    floor = max(float(p[keep].min()), P_FLOOR)
    hidden = int(np.sum(keep & (p < P_FLOOR)))
    for field, name, ls in FIELDS:
        pred = predicted.get(field)
        if not isinstance(pred, dict) or not isinstance(pred.get("probability"), list):
            continue
        qp = np.asarray(pred["charges"], dtype=float) * spacing
        pp = np.asarray([np.nan if v is None else v for v in pred["probability"]], dtype=float)
        sn = pred.get("number_entropy")
        sn_text = f", $S_{{\\rm number}} = {sn:.4f}$" if isinstance(sn, (int, float)) else ""
        ax.plot(qp, pp, ls=ls, marker="d" if field == "dirac" else "s", ms=5, mfc="none", lw=1.2,
                color=FIELD_COLOURS[field], gid=f"massive:{field}", zorder=2,
                label=f"{name} ladder, $\\epsilon = {pred.get('eps', math.nan):.3g}${sn_text}")
    ax.set_yscale("log")
    ax.set_ylim(floor / 10, 3.0)
    ax.set_xlim(*_padded(dq[keep & (p >= floor)], spacing))
    if hidden:
        ax.plot([], [], ls="none", label=f"{hidden} rarer sectors ($p < 10^{{{math.log10(P_FLOOR):.0f}}}$) off scale")
    _integer_ticks(ax, dq[keep & (p >= floor)], spacing)
    ax.set(xlabel=rf"$q - \langle q\rangle$ (${run.charge_tex}$)", ylabel=r"$p(q)$")
    fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncol=1, frameon=False)
    fig.suptitle(_title(run, sec, "charge distribution against the massive fields"))
    return fig


def draw_massive_moments(run: RunFiles, path: Path) -> Path | None:
    """massive_moments.png (None, nothing written, when the run has no massive section)."""
    fig = massive_moments_figure(run)
    return None if fig is None else save(fig, path)


def draw_massive_sector_entropies(run: RunFiles, path: Path) -> Path | None:
    """massive_sector_entropies.png (None when the run has no massive section)."""
    fig = massive_sector_entropies_figure(run)
    return None if fig is None else save(fig, path)


def draw_massive_distribution(run: RunFiles, path: Path) -> Path | None:
    """massive_distribution.png (None when the run has no massive section)."""
    fig = massive_distribution_figure(run)
    return None if fig is None else save(fig, path)
