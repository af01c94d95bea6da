"""scan.csv: one row per point with its scanned values, its status and the headline figures.

The headline figures are read from the point's run directory: energy, energy per site, variance
and sweeps from summary.json; regime, central charge and K (critical chains only, as the run's
own comparison reports them), the charge correlation length xi and the field correlation length
of the massive comparison from comparison.json; the number entropy at the central cut
(cut L/2) from entropies.csv; the equipartition spread of S_1(q) at the comparison's cut. Values
a point does not have stay empty cells, never a made-up number.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from mps.pipeline.rundir import read_table, write_table
from mps.pipeline.scan_point import warm_record

HEADLINE_COLUMNS = ["status", "error", "energy", "energy_per_site", "variance", "sweeps", "warm_from", "seconds",
                    "regime", "central_charge", "luttinger", "correlation_length", "xi_field", "number_entropy",
                    "equipartition_spread", "directory"]
TABLE = "scan.csv"


def _json(path: Path) -> dict:
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def _get(data: dict, *keys):
    for key in keys:
        if not isinstance(data, dict):
            return None
        data = data.get(key)
    return data if isinstance(data, (int, float)) and not isinstance(data, bool) else None


def _central(directory: Path, sites: int | None, column: str) -> float | None:
    path = directory / "entropies.csv"
    if not sites or not path.is_file():
        return None
    header, rows = read_table(path)
    if column not in header:
        return None
    for row in rows:
        if row[0] == str(sites // 2):
            cell = row[header.index(column)]
            return float(cell) if cell else None
    return None


def headline(directory: Path) -> dict:
    """The headline figures of one finished run directory (missing values: None)."""
    summary, comparison = _json(directory / "summary.json"), _json(directory / "comparison.json")
    sites = _get(summary, "sites")
    regime = (comparison.get("regime") or {}).get("verdict") if isinstance(comparison.get("regime"), dict) else None
    return {
        "energy": _get(summary, "energy"), "energy_per_site": _get(summary, "energy_per_site"),
        "variance": _get(summary, "variance"), "sweeps": _get(summary, "sweeps"),
        "seconds": _get(summary, "seconds"),
        "regime": regime,
        "central_charge": _get(comparison, "central_charge", "value"),
        "luttinger": _get(comparison, "luttinger", "value"),
        "correlation_length": _get(comparison, "correlation_length", "xi"),
        "xi_field": _get(comparison, "massive", "xi_field"),
        "number_entropy": _central(directory, int(sites) if sites else None, "S_number"),
        "equipartition_spread": _get(comparison, "equipartition", "by_renyi", "1", "spread"),
    }


def scan_row(name: str, values: dict, status: str, error: str, seconds: float | None,
             directory: Path) -> list:
    """One row of scan.csv, in the column order of :func:`columns`."""
    figures = headline(directory) if status == "done" else {}
    figures.update(status=status, error=error, warm_from=warm_record(directory), directory=str(directory))
    if seconds is not None:   # this invocation's wall time; else the run's own from summary.json
        figures["seconds"] = seconds
    return [name, *(_cell(v) for v in values.values()), *(figures.get(c) for c in HEADLINE_COLUMNS)]


def columns(keys: list[str]) -> list[str]:
    return ["point", *keys, *HEADLINE_COLUMNS]


def write_scan_table(path: Path, keys: list[str], rows: list[list]) -> None:
    write_table(path, columns(keys), rows)


def _cell(value):
    if isinstance(value, (dict, list)):
        return json.dumps(value, separators=(",", ":"))
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value
