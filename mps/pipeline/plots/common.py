"""What every figure shares: the look (style, palette), reading the run directory's tables and
files into :class:`RunFiles`, and small helpers for axes, labels and saving.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MultipleLocator

from mps.pipeline.errors import ConfigError
from mps.pipeline.rundir import read_table, storage_error
from mps.pipeline.yaml_input import read_yaml_file

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
CHARGE_TEX = {"Sz": r"{S^z_A}", "N": r"{N_A}", "Q": r"{Q_A}"}


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
        data = read_yaml_file(path)
    except ConfigError:
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


def label_of(n: float) -> str:
    """Column / JSON label of a Renyi index: '1', '2', 'inf', '0.5'."""
    return "inf" if math.isinf(n) else (str(int(n)) if float(n).is_integer() else repr(float(n)))


def n_tex(n: float) -> str:
    return r"\infty" if math.isinf(n) else f"{n:g}"


def colour(k: int) -> str:
    return PALETTE[k % len(PALETTE)]


def nearest_cut(cuts: np.ndarray, sites: int | None) -> int:
    target = (sites or (np.nanmax(cuts) + 1)) / 2
    uniq = np.unique(cuts)
    return int(uniq[np.argmin(np.abs(uniq - target))])


def fit_entry(entry) -> dict | None:
    """A fit dict from comparison.json if it holds numbers, else None."""
    if not isinstance(entry, dict):
        return None
    keys = ("value", "const", "alternating", "exponent", "window")
    if any(entry.get(k) is None for k in keys):
        return None
    return entry


def lookup(data: dict | None, *path):
    for key in path:
        if not isinstance(data, dict):
            return None
        data = data.get(key)
    return data


def charge_ticks(ax, charges: np.ndarray, spacing: float) -> None:
    """Ticks on the charge lattice (half-integers included) when there are few enough sectors."""
    q = np.unique(charges[np.isfinite(charges)])
    if q.size and spacing > 0 and (q.max() - q.min()) / spacing <= 14:
        ax.xaxis.set_major_locator(MultipleLocator(spacing, offset=float(q[0] % spacing)))


def charge_spacing(charges: np.ndarray) -> float:
    q = np.unique(charges[np.isfinite(charges)])
    return float(np.min(np.diff(q))) if q.size > 1 else 1.0


def save(fig: Figure, path: Path) -> Path:
    """Render with the Agg canvas to a temporary name and rename, so readers never see half a PNG."""
    FigureCanvasAgg(fig)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        fig.savefig(tmp, dpi=DPI, format="png")
        os.replace(tmp, path)
    except OSError as exc:
        raise storage_error(path, exc) from None
    finally:
        tmp.unlink(missing_ok=True)
    return path


def central_sectors(run: RunFiles) -> tuple[int, Table] | None:
    """Rows of the central cut of a table resolved by one charge (None when jointly resolved)."""
    sec = run.sectors
    if sec is None or "charge" not in sec:
        return None
    cut = nearest_cut(sec["cut"], run.sites)
    rows = sec["cut"] == cut
    return cut, {k: v[rows] for k, v in sec.items()}


def central_totals(run: RunFiles, cut: int) -> dict[str, float] | None:
    ent = run.entropies
    if ent is None:
        return None
    rows = np.flatnonzero(ent["cut"] == cut)
    return {k: float(v[rows[0]]) for k, v in ent.items()} if rows.size else None
