"""Figures of a parameter scan: the headline figures of every point against each scanned key, and the
gapped points against the massive free fields, drawn from ``<scan_dir>/scan.csv`` into
``<scan_dir>/plots/``.

- ``scan_<key>.png`` for every scanned key whose values are numbers (at least two distinct ones among
  the finished points): one panel per headline quantity with a finite value, one line per
  combination of the other scanned keys (keys paired with the drawn one in ``scan.yaml`` vary with
  it and do not split lines). Theory: the Luttinger parameter of the xxz chain against
  ``model.couplings.Delta``, K = pi/(2 (pi - arccos(Delta/J))) (Bethe ansatz; Luther and Peschel,
  PRB 12, 3908 (1975); :func:`mps.theory.fieldtheory.luttinger_bethe_ansatz`), for points in zero
  field (h = h_stag = dimer = 0) at S^z = 0 and -1 < Delta/J <= 1 only; and c = 1 for the xxz and
  spinless-fermion chains (Luttinger liquid; Calabrese and Cardy, J. Stat. Mech. P06002 (2004)).
- ``scan_massive.png``: S_number at the central cut against the field correlation length
  xi_field = 2 xi of the gapped points, with the leading predictions (1/2) log(2 pi e/eps) (Dirac,
  Gaussian p(q)) and log(4 pi/eps) (complex scalar, sech-law p(q)), eps = 2 pi^2/log xi
  (:func:`mps.theory.massive.number_entropy_scaling`; Murciano, Di Giulio and Calabrese, JHEP 08
  (2020) 073, in the ladder form of :mod:`mps.theory.massive`); and the spread of S_1(q) over the
  well-weighted sectors against xi_field, which the Dirac ladder predicts to vanish (exact
  equipartition) and the scalar ladder to grow like q^2/log^2 xi at small q
  (:func:`mps.theory.massive.equipartition_breaking`).

Only rows with status ``done`` are drawn. As in the run figures (:mod:`mps.pipeline.plots`), every
figure is a bare :class:`~matplotlib.figure.Figure` rendered by the Agg canvas (never pyplot), styled
through ``matplotlib.rc_context``; theory artists carry a ``gid`` (``theory_luttinger``,
``theory_central_charge``, ``theory_dirac``, ``theory_scalar``) so that tests find them without pixels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import LogFormatter

from mps.pipeline.plots.common import COUPLING_TEX, PLOTS, STYLE, _number, _yaml, colour, save
from mps.pipeline.rundir import read_table
from mps.theory.fieldtheory import luttinger_bethe_ansatz
from mps.theory.massive import number_entropy_scaling

# the columns of scan.csv after the scanned keys (the driver imports this list: one definition)
# (column, panel title, axis label) of the panels of scan_<key>.png, in this order
QUANTITIES = (
    ("energy_per_site", "energy per site", r"$E_0/L$"),
    ("central_charge", "central charge", r"$c$"),
    ("luttinger", "Luttinger parameter", r"$K$"),
    ("correlation_length", "charge correlation length", r"$\xi$ (sites)"),
    ("number_entropy", "number entropy (central cut)", r"$S_{\rm number}$"),
    ("equipartition_spread", "equipartition: spread of $S_1(q)$ (central cut)", r"spread of $S_1(q)$"),
)
DELTA_KEY = "model.couplings.Delta"
LUTTINGER_FAMILIES = ("xxz", "fermions")          # c = 1 chains (Luttinger liquids when critical)
ZERO_COUPLINGS = ("h", "h_stag", "dimer")           # the Bethe-ansatz K holds only when these vanish
CURVE_POINTS = 200
THEORY_STYLE = dict(color="0.15", lw=1.1, ls="--", zorder=1)


@dataclass(frozen=True)
class ScanTable:
    """The finished points of a scan: the scanned keys (columns between ``point`` and ``status``),
    the ``done`` rows as column -> cell text, each point's ``model`` mapping (read from its
    config.yaml; empty when unreadable) and the groups of keys that vary together (``paired``)."""

    directory: Path
    name: str
    axes: list[str]
    rows: list[dict[str, str]]
    models: list[dict]
    tied: dict[str, frozenset[str]]

    def numbers(self, column: str) -> np.ndarray:
        """A column as floats (empty or non-numeric cells NaN)."""
        return np.array([_number(row.get(column, "")) for row in self.rows], dtype=float)

    def numeric_axis(self, key: str) -> bool:
        """Whether every finished point has a finite number for ``key``, with >= 2 distinct values."""
        x = self.numbers(key)
        return bool(x.size) and bool(np.all(np.isfinite(x))) and np.unique(x).size >= 2


def read_scan(directory: str | Path) -> ScanTable | None:
    """scan.csv (done rows only), scan.yaml and the points' config.yaml; None without scan.csv."""
    d = Path(directory)
    if not (d / "scan.csv").is_file():
        return None
    header, cells = read_table(d / "scan.csv")
    end = header.index("status") if "status" in header else len(header)
    axes = header[1:end]
    rows = [dict(zip(header, row)) for row in cells]
    rows = [row for row in rows if row.get("status") == "done"]
    spec = _yaml(d / "scan.yaml") or {}
    paired = spec.get("scan", {}).get("paired") if isinstance(spec.get("scan"), dict) else None
    paired = list(paired) if isinstance(paired, dict) else []
    tied = {key: frozenset(paired) - {key} if key in paired else frozenset() for key in axes}
    models = []
    for row in rows:
        point = d / row.get("point", "")
        if not (point / "config.yaml").is_file() and row.get("directory"):
            point = d / row["directory"]
        model = (_yaml(point / "config.yaml") or {}).get("model")
        models.append(model if isinstance(model, dict) else {})
    return ScanTable(d, str(spec.get("name") or d.name), axes, rows, models, tied)


def short(key: str) -> str:
    return key.rsplit(".", 1)[-1]


def _axis_label(key: str) -> str:
    tex = COUPLING_TEX.get(short(key))
    return f"${tex}$  ({key})" if tex else key


def _groups(table: ScanTable, key: str) -> list[tuple[str, np.ndarray]]:
    """(legend label, row indices) per combination of the other scanned keys that vary among the
    finished points (keys paired with ``key`` excluded); one unlabelled group when none vary."""
    others = [k for k in table.axes if k != key and k not in table.tied[key]
              and len({row.get(k, "") for row in table.rows}) > 1]
    combos: dict[tuple, list[int]] = {}
    for i, row in enumerate(table.rows):
        combos.setdefault(tuple(row.get(k, "") for k in others), []).append(i)
    return [(", ".join(f"{short(k)} = {v}" for k, v in zip(others, combo)), np.array(idx))
            for combo, idx in combos.items()]


def _float(value, default: float = math.nan) -> float:
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else default


def _bethe_ansatz_j(model: dict) -> float | None:
    """J of an xxz point for which the Bethe-ansatz K applies (zero fields and dimerisation, S^z = 0),
    else None. Missing couplings take the family defaults (zero; J = 1)."""
    couplings = model.get("couplings") if isinstance(model.get("couplings"), dict) else {}
    charge = model.get("charge") if isinstance(model.get("charge"), dict) else {}
    if model.get("family") != "xxz" or set(charge) != {"Sz"} or _float(charge["Sz"]) != 0.0:
        return None
    if any(_float(couplings.get(name, 0.0)) != 0.0 for name in ZERO_COUPLINGS):
        return None
    J = _float(couplings.get("J", 1.0))
    return J if J > 0 else None


def _draw_luttinger_theory(ax, table: ScanTable, x: np.ndarray) -> None:
    """K(Delta/J) over the scanned Delta range inside -1 < Delta/J <= 1, one curve per J."""
    by_j: dict[float, list[float]] = {}
    for xi, model in zip(x, table.models):
        J = _bethe_ansatz_j(model)
        if J is not None and -J < xi <= J:
            by_j.setdefault(J, []).append(float(xi))
    for k, (J, deltas) in enumerate(sorted(by_j.items())):
        if max(deltas) <= min(deltas):
            continue
        grid = np.linspace(min(deltas), max(deltas), CURVE_POINTS)
        label = "Bethe ansatz $K$ (Luther and Peschel 1975)" + (f", $J = {J:g}$" if len(by_j) > 1 else "")
        ax.plot(grid, [luttinger_bethe_ansatz(v / J) for v in grid], gid="theory_luttinger", label=label,
                **dict(THEORY_STYLE, ls=("--", ":", "-.")[k % 3]))


def axis_figure(table: ScanTable, key: str) -> Figure | None:
    """The headline quantities against the scanned ``key``; None when none has a finite value."""
    x = table.numbers(key)
    panels = [(col, title, label) for col, title, label in QUANTITIES if np.any(np.isfinite(table.numbers(col)))]
    if not panels or not np.all(np.isfinite(x)):
        return None
    ncols = min(3, len(panels))
    nrows = -(-len(panels) // ncols)
    fig = Figure(figsize=(0.6 + 4.3 * ncols, 0.9 + 3.4 * nrows), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
    groups = _groups(table, key)
    for ax, (col, title, label) in zip(axes, panels):
        y = table.numbers(col)
        for k, (name, idx) in enumerate(groups):
            idx = idx[np.isfinite(y[idx])]
            if not idx.size:
                continue
            order = idx[np.argsort(x[idx])]
            ax.plot(x[order], y[order], "o-", ms=4.5, color=colour(k), label=name or "_data", gid=f"data:{col}")
        if col == "luttinger" and key == DELTA_KEY:
            _draw_luttinger_theory(ax, table, x)
        if col == "central_charge" and any(
                m.get("family") in LUTTINGER_FAMILIES for m, c in zip(table.models, y) if math.isfinite(c)):
            ax.axhline(1.0, gid="theory_central_charge", label="$c = 1$ (Calabrese and Cardy 2004)",
                       **THEORY_STYLE)
        ax.set_ylabel(label)
        ax.set_xlabel(_axis_label(key))
        ax.set_title(title, gid=col)
        theory = [h for h in ax.get_lines() if str(h.get_gid()).startswith("theory_")]
        if theory:
            ax.legend(handles=theory, loc="best")
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    if len(groups) > 1:                               # one legend for the lines of all panels
        handles = [Line2D([], [], marker="o", ms=4.5, color=colour(k)) for k in range(len(groups))]
        fig.legend(handles, [name for name, _ in groups], loc="outside lower center",
                   ncol=min(4, len(groups)), frameon=False)
    fig.suptitle(f"{table.name}: {len(table.rows)} finished points against {key}")
    return fig


def massive_rows(table: ScanTable) -> np.ndarray:
    """Indices of the finished gapped points with a finite field correlation length."""
    xi = table.numbers("xi_field")
    gapped = np.array([row.get("regime") == "gapped" for row in table.rows], dtype=bool)
    return np.flatnonzero(gapped & np.isfinite(xi)) if xi.size else np.array([], dtype=int)


def massive_figure(table: ScanTable) -> Figure | None:
    """S_number and the equipartition spread of the gapped points against xi_field (log axis), with
    the leading Dirac and scalar S_number; None with fewer than two such points."""
    rows = massive_rows(table)
    if rows.size < 2:
        return None
    xi = table.numbers("xi_field")[rows]
    order = np.argsort(xi)
    xi = xi[order]
    fig = Figure(figsize=(11.4, 5.0), layout="constrained")
    left, right = fig.subplots(1, 2)
    s = table.numbers("number_entropy")[rows][order]
    left.plot(xi, s, "o", ms=5.5, color="0.15", label="scan points", gid="data:number_entropy")
    lo, hi = max(float(xi.min()), 1.0 + 1e-9), float(xi.max())
    if hi > lo:
        grid = np.geomspace(lo, hi, CURVE_POINTS)
        for field, name, ls, k in (("dirac", "Dirac (Gaussian $p(q)$)", "--", 0),
                                   ("scalar", "complex scalar (sech law)", ":", 1)):
            left.plot(grid, [number_entropy_scaling(field, v) for v in grid], ls=ls, color=colour(k),
                      gid=f"theory_{field}", label=f"leading {name}")
    left.set_title("number entropy at the central cut against the\n"
                   "leading massive-field forms (Murciano, Di Giulio and Calabrese 2020)")
    left.set_ylabel(r"$S_{\rm number}$")
    spread = table.numbers("equipartition_spread")[rows][order]
    right.plot(xi, spread, "o", ms=5.5, color="0.15", gid="data:equipartition_spread")
    right.set_title("spread of $S_1(q)$ over the well-weighted sectors\n"
                    "Dirac ladder: exact equipartition (no spread);\n"
                    r"complex scalar: breaking $\propto q^2/\log^2\xi$ at small $q$")
    right.set_ylabel(r"spread of $S_1(q)$")
    for ax in (left, right):
        ax.set_xscale("log")
        for axis_ticks in (ax.xaxis.set_major_formatter, ax.xaxis.set_minor_formatter):
            axis_ticks(LogFormatter(labelOnlyBase=False))     # plain 2, 3, 5 rather than 3 x 10^0
        ax.set_xlabel(r"field correlation length $\xi_{\rm field} = 2\xi$ (sites)")
    left.legend(loc="best")
    fig.suptitle(f"{table.name}: {rows.size} gapped points")
    return fig


def _file_names(keys: list[str]) -> dict[str, str]:
    """scan_<last part>.png, the whole dotted key when two keys share their last part."""
    shorts = [short(k) for k in keys]
    return {k: f"scan_{s if shorts.count(s) == 1 else k.replace('.', '_')}.png" for k, s in zip(keys, shorts)}


def draw_scan(directory: str | Path) -> tuple[list[Path], list[str]]:
    """Draw the scan figures into ``<directory>/plots/``; return (files written, one-line notes on the
    figures not drawn and why)."""
    if not Path(directory).is_dir():
        raise FileNotFoundError(f"{directory}: no such scan directory")
    table = read_scan(directory)
    if table is None:
        return [], ["no scan.csv: nothing drawn"]
    if not table.rows:
        return [], ["no finished point (status done) in scan.csv: nothing drawn"]
    figures, notes = [], []
    names = _file_names(table.axes)
    with matplotlib.rc_context(STYLE):
        for key in table.axes:
            if not table.numeric_axis(key):
                notes.append(f"{names[key]}: {key} does not take two or more numeric values")
                continue
            fig = axis_figure(table, key)
            if fig is None:
                notes.append(f"{names[key]}: no headline quantity has a finite value")
            else:
                figures.append((names[key], fig))
        fig = massive_figure(table)
        if fig is None:
            notes.append("scan_massive.png: fewer than 2 gapped points with a correlation length")
        else:
            figures.append(("scan_massive.png", fig))
        out = table.directory / PLOTS
        if figures:
            out.mkdir(exist_ok=True)
        written = [save(fig, out / name) for name, fig in figures]
    return written, notes
