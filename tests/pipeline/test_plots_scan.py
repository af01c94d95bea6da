"""Figures of a parameter scan (mps.pipeline.plots.scan).

A real scan directory comes from three exact free-fermion runs with a staggered potential (gapped:
a gap 2 mu_stag opens in the single-particle spectrum, standard band theory); its scan.csv is written
here from each point's summary.json, comparison.json and entropies.csv (the driver's own writer is
not used). The xxz scans are synthetic rows (they test the drawing, not the physics). Figures are
checked through their artists (theory curves carry a ``gid``); PNGs are rendered once.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from mps.pipeline.plots.scan import axis_figure, draw_scan, massive_figure, read_scan
from mps.pipeline.rundir import read_table, write_table
from mps.pipeline.runner import run
from mps.pipeline.scan_table import HEADLINE_COLUMNS
from mps.theory.fieldtheory import luttinger_bethe_ansatz
from mps.theory.massive import number_entropy_scaling

MU_STAG = (0.3, 0.5, 0.8)
KEY = "model.couplings.mu_stag"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def _lines(fig, gid: str) -> list:
    return [line for ax in fig.axes for line in ax.get_lines() if line.get_gid() == gid]


def _panel(fig, column: str):
    """The axes whose title carries the gid of a headline column (None when absent)."""
    hits = [ax for ax in fig.axes if ax.get_visible() and ax.title.get_gid() == column]
    return hits[0] if hits else None


def _central_number_entropy(point: Path, sites: int) -> float:
    header, rows = read_table(point / "entropies.csv")
    col = header.index("S_number")
    return next(float(r[col]) for r in rows if int(r[0]) == sites // 2)


def _headline_row(point: Path, sites: int) -> dict:
    """The scan.csv cells of one finished point, from its run directory's files."""
    summary = json.loads((point / "summary.json").read_text())
    comp = json.loads((point / "comparison.json").read_text())
    regime = comp["regime"]["verdict"]
    return {
        "status": "done", "error": "", "energy": summary["energy"], "energy_per_site": summary["energy_per_site"],
        "variance": summary["variance"], "sweeps": summary["sweeps"], "warm_from": "", "seconds": summary["seconds"],
        "regime": regime,
        "central_charge": comp["central_charge"]["value"] if regime == "critical" else None,
        "luttinger": comp["luttinger"]["value"] if regime == "critical" else None,
        "correlation_length": comp["correlation_length"]["xi"],
        "xi_field": (comp.get("massive") or {}).get("xi_field"),
        "number_entropy": _central_number_entropy(point, sites),
        "equipartition_spread": comp["equipartition"]["by_renyi"]["1"]["spread"],
        "directory": point.name,
    }


def _write_csv(scan: Path, keys: list[str], rows: list[tuple[str, list, dict]]) -> None:
    columns = ["point", *keys, *HEADLINE_COLUMNS]
    write_table(scan / "scan.csv", columns,
                [[name, *values, *(head.get(c) for c in HEADLINE_COLUMNS)] for name, values, head in rows])


@pytest.fixture(scope="module")
def fermion_scan(tmp_path_factory) -> Path:
    """<tmp>/scan with three exact points, scan.yaml and scan.csv."""
    base = tmp_path_factory.mktemp("scan-plots")
    scan = base / "scan"
    scan.mkdir()
    spec = {"name": "stag", "model": {"family": "fermions", "sites": 48, "couplings": {"t": 1},
                                      "charge": {"N": 24}},
            "solver": {"method": "exact"}, "output": {"dir": str(scan), "plots": False},
            "scan": {"grid": {KEY: list(MU_STAG)}}}
    (scan / "scan.yaml").write_text(yaml.safe_dump(spec))
    rows = []
    for mu in MU_STAG:
        name = f"mu_stag={mu}"
        cfg = {"name": f"stag-{name}", "model": dict(spec["model"], couplings={"t": 1, "mu_stag": mu}),
               "solver": {"method": "exact"}, "output": {"dir": str(scan / name), "plots": False}}
        path = base / f"{name}.yaml"
        path.write_text(yaml.safe_dump(cfg))
        assert run(str(path)) == 0
        rows.append((name, [mu], _headline_row(scan / name, 48)))
    _write_csv(scan, [KEY], rows)
    return scan


def test_fermion_scan_figures(fermion_scan):
    files, notes = draw_scan(fermion_scan)
    names = {p.name for p in files}
    assert names == {"scan_mu_stag.png", "scan_massive.png"}, (names, notes)
    for path in files:
        assert path.parent == fermion_scan / "plots"
        assert path.read_bytes()[:8] == PNG_MAGIC and path.stat().st_size > 10_000
    assert notes == []

    table = read_scan(fermion_scan)
    assert table.axes == [KEY] and len(table.rows) == 3
    # every point is gapped (staggered potential opens a gap 2 mu_stag; standard band theory)
    assert all(row["regime"] == "gapped" for row in table.rows)

    fig = massive_figure(table)
    xi = np.sort(table.numbers("xi_field"))
    data = _lines(fig, "data:number_entropy")[0]
    np.testing.assert_array_equal(data.get_xdata(), xi)
    np.testing.assert_allclose(data.get_ydata(), table.numbers("number_entropy")[np.argsort(table.numbers("xi_field"))])
    assert all(ax.get_xscale() == "log" for ax in fig.axes)
    for field in ("dirac", "scalar"):
        (curve,) = _lines(fig, f"theory_{field}")
        x, y = np.asarray(curve.get_xdata()), np.asarray(curve.get_ydata())
        assert x.min() == pytest.approx(xi.min()) and x.max() == pytest.approx(xi.max())
        # leading massive-field S_number: Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073,
        # ladder form of mps.theory.massive (the curve must be that function at its own x values)
        np.testing.assert_allclose(y, [number_entropy_scaling(field, v) for v in x], rtol=1e-13)

    fig = axis_figure(table, KEY)
    # panels: exactly the headline quantities with a finite value (gapped: no c, no K)
    for column in ("energy_per_site", "correlation_length", "number_entropy", "equipartition_spread"):
        ax = _panel(fig, column)
        (line,) = [ln for ln in ax.get_lines() if ln.get_gid() == f"data:{column}"]
        np.testing.assert_array_equal(line.get_xdata(), MU_STAG)
        np.testing.assert_allclose(line.get_ydata(), table.numbers(column))
    assert _panel(fig, "central_charge") is None and _panel(fig, "luttinger") is None
    assert not _lines(fig, "theory_luttinger") and not _lines(fig, "theory_central_charge")


XXZ_DELTA = (-0.5, 0.0, 0.5)


def _xxz_scan(root: Path, couplings: dict, charge: dict | None = None, sites=(16, 24)) -> Path:
    """Synthetic xxz scan: grid Delta x sites, solver.seed paired with Delta, all points critical."""
    scan = root
    scan.mkdir()
    paired = {"model.couplings.Delta": list(XXZ_DELTA), "solver.seed": [1, 2, 3]}
    (scan / "scan.yaml").write_text(yaml.safe_dump({"name": "xxz-synthetic", "scan": {
        "grid": {"model.sites": list(sites)}, "paired": paired}}))
    rows = []
    for sites_value in sites:
        for seed, delta in enumerate(XXZ_DELTA, start=1):
            name = f"sites={sites_value},Delta={delta},seed={seed}"
            model = {"family": "xxz", "sites": sites_value,
                     "couplings": dict({"J": 1.0, "Delta": delta, "h": 0.0, "h_stag": 0.0, "dimer": 0.0},
                                       **couplings), "charge": charge or {"Sz": 0}}
            (scan / name).mkdir()
            (scan / name / "config.yaml").write_text(yaml.safe_dump({"name": name, "model": model}))
            head = {"status": "done", "regime": "critical", "energy_per_site": -0.3 - 0.1 * delta,
                    "central_charge": 1.0 + 0.01 * seed, "luttinger": 1.0 - 0.3 * delta + 0.01 * sites_value,
                    "number_entropy": 0.5 + 0.01 * seed, "directory": name}
            rows.append((name, [sites_value, delta, seed], head))
    rows.append(("failed", [32, 0.9, 4], {"status": "failed", "error": "boom", "luttinger": 9.0}))
    _write_csv(scan, ["model.sites", "model.couplings.Delta", "solver.seed"], rows)
    return scan


def test_xxz_luttinger_theory(tmp_path):
    table = read_scan(_xxz_scan(tmp_path / "plain", {}))
    assert len(table.rows) == 6                       # the failed row is left out
    fig = axis_figure(table, "model.couplings.Delta")
    (curve,) = _lines(fig, "theory_luttinger")
    x, y = np.asarray(curve.get_xdata()), np.asarray(curve.get_ydata())
    assert x.min() == pytest.approx(-0.5) and x.max() == pytest.approx(0.5)
    # Bethe ansatz K(Delta) for J = 1: Luther and Peschel, PRB 12, 3908 (1975)
    np.testing.assert_allclose(y, [luttinger_bethe_ansatz(v) for v in x], rtol=1e-14)
    # K = 3/4 at Delta = 1/2 (same source; DESIGN.md section 5), the right end of the curve
    assert y[np.argmax(x)] == pytest.approx(0.75, rel=1e-12)
    # c = 1 reference line: Calabrese and Cardy, J. Stat. Mech. P06002 (2004)
    (c_line,) = _lines(fig, "theory_central_charge")
    assert set(c_line.get_ydata()) == {1.0}
    # one data line per value of sites (seed is paired with Delta and does not split lines)
    k_data = [ln for ln in _panel(fig, "luttinger").get_lines() if ln.get_gid() == "data:luttinger"]
    assert sorted(ln.get_label() for ln in k_data) == ["sites = 16", "sites = 24"]
    for ln in k_data:
        np.testing.assert_array_equal(ln.get_xdata(), XXZ_DELTA)
    # every scanned key is a numeric axis here (the paired seed too); no gapped point, no massive figure
    assert all(table.numeric_axis(key) for key in table.axes)
    assert massive_figure(table) is None


@pytest.mark.parametrize("couplings, charge", [({"h_stag": 0.2}, None), ({"dimer": 0.1}, None),
                                               ({}, {"Sz": 1})])
def test_xxz_luttinger_theory_absent(tmp_path, couplings, charge):
    table = read_scan(_xxz_scan(tmp_path / "scan", couplings, charge))
    fig = axis_figure(table, "model.couplings.Delta")
    assert _panel(fig, "luttinger") is not None
    assert not _lines(fig, "theory_luttinger")


def test_no_done_rows(tmp_path):
    scan = tmp_path / "scan"
    scan.mkdir()
    _write_csv(scan, [KEY], [("mu_stag=0.3", [0.3], {"status": "failed", "error": "x"}),
                             ("mu_stag=0.5", [0.5], {"status": "pending"})])
    files, notes = draw_scan(scan)
    assert files == [] and len(notes) == 1 and "done" in notes[0]
    assert not (scan / "plots").exists()


def test_missing_values_are_not_panels(tmp_path):
    """A column empty for every finished point gives no panel; a non-numeric key no figure."""
    scan = tmp_path / "scan"
    scan.mkdir()
    rows = [(f"p{i}", [0.1 * i, f"[{i}, 2]"], {"status": "done", "energy_per_site": -0.1 * i, "regime": "empty"})
            for i in range(1, 4)]
    _write_csv(scan, ["model.couplings.mu", "solver.stages"], rows)
    table = read_scan(scan)
    fig = axis_figure(table, "model.couplings.mu")
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.title.get_gid() for ax in visible] == ["energy_per_site"]
    assert not table.numeric_axis("solver.stages") and math.isnan(table.numbers("solver.stages")[0])
