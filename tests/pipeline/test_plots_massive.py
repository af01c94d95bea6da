"""Figures of gapped chains (massive-field comparison) and the regime gate of the critical figures.

Run directories come from the exact engines (``solver: {method: exact}``) on 64 sites: free fermions
with a staggered potential (gapped: a gap 2 mu_stag opens in the single-particle spectrum, standard
band theory), the same chain without it (critical free fermions, c = 1: Calabrese and Cardy, J. Stat.
Mech. P06002 (2004)) and the massive complex scalar (gapped, mass m). The figures are checked
through their artists (theory curves carry a ``gid``), never by comparing pixels; PNGs are
rendered only for the massive figures of the gapped chain, to check the files themselves.
"""

from __future__ import annotations

import json
import shutil
import struct
from pathlib import Path

import matplotlib
import numpy as np
import pytest
import yaml

from mps.pipeline.plots import DPI, FIGURES, RunFiles, draw_all, moments, profiles, sectors
from mps.pipeline.plots import massive as massive_plots
from mps.pipeline.runner import run

MASSIVE = {"massive_moments.png", "massive_sector_entropies.png", "massive_distribution.png"}
STANDARD = {"entropy_profile.png", "charge_variance.png", "sector_entropies.png", "charge_distribution.png",
            "charged_moments.png"}
# the figures whose theory forms are Luttinger-liquid (critical) forms
CRITICAL_BUILDERS = {
    "entropy_profile.png": profiles.entropy_profile_figure,
    "charge_variance.png": profiles.charge_variance_figure,
    "charged_moments.png": moments.charged_moments_figure,
    "sector_entropies.png": sectors.sector_entropies_figure,
    "charge_distribution.png": sectors.charge_distribution_figure,
}
MODELS = {
    "gapped": {"family": "fermions", "sites": 64, "couplings": {"t": 1, "mu_stag": 0.6}, "charge": {"N": 32}},
    "critical": {"family": "fermions", "sites": 64, "couplings": {"t": 1}, "charge": {"N": 32}},
    "scalar": {"family": "complex-scalar", "sites": 64, "couplings": {"m": 0.3}},
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, Path]:
    """Finished exact runs (tables and comparison.json, no plots) of the three chains."""
    base = tmp_path_factory.mktemp("massive-plots")
    out = {}
    for name, model in MODELS.items():
        cfg = {"name": name, "model": model, "solver": {"method": "exact"},
               "analysis": {"renyi": [1, 2, "inf"], "flux_points": 33}, "output": {"plots": False}}
        path = base / f"{name}.yaml"
        path.write_text(yaml.safe_dump(cfg))
        assert run(str(path), str(base / name)) == 0
        out[name] = base / name
    return out


def _copy(src: Path, dst: Path, edit=None) -> Path:
    """A copy of a run directory, with comparison.json passed through ``edit`` (a dict -> None function)."""
    shutil.copytree(src, dst)
    if edit is not None:
        report = json.loads((dst / "comparison.json").read_text())
        edit(report)
        (dst / "comparison.json").write_text(json.dumps(report))
    return dst


def _gids(fig) -> list[str]:
    return [a.get_gid() for a in fig.findobj() if a.get_gid()]


def _notes(fig) -> list[str]:
    return [a.get_text() for a in fig.findobj() if a.get_gid() == "regime-note"]


@pytest.fixture
def built(monkeypatch):
    """draw_all without rendering: each module's ``save`` records the Figure (name -> Figure)."""
    figures = {}

    def record(fig, path):
        figures[path.name] = fig
        return path

    for module in (profiles, moments, sectors, massive_plots):
        monkeypatch.setattr(module, "save", record)

    def build(directory: Path) -> dict:
        figures.clear()
        written = draw_all(directory)
        assert {p.name for p in written} == set(figures)
        return dict(figures)
    return build


def _png_size(path: Path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n", f"{path.name} is not a PNG"
    return struct.unpack(">II", head[16:24])


def test_regimes_of_the_fixture_chains(runs):
    # staggered potential: gapped (band theory); uniform hopping: critical (Calabrese and Cardy 2004)
    verdicts = {name: json.loads((d / "comparison.json").read_text())["regime"]["verdict"] for name, d in runs.items()}
    assert verdicts == {"gapped": "gapped", "critical": "critical", "scalar": "gapped"}
    assert {name for name, _ in FIGURES} >= MASSIVE


def test_massive_pngs_of_a_gapped_chain(runs, tmp_path):
    d = _copy(runs["gapped"], tmp_path / "run")
    frun = RunFiles.read(d)
    (d / "plots").mkdir()
    for name, draw in FIGURES:
        if name not in MASSIVE:
            continue
        path = draw(frun, d / "plots" / name)
        assert path == d / "plots" / name and path.stat().st_size > 10_000, name
        width, height = _png_size(path)
        assert width >= 6 * DPI and height >= 4 * DPI, (name, width, height)
        assert np.std(matplotlib.image.imread(path)[..., :3]) > 0.05, f"{name} is blank"
    assert not list((d / "plots").glob(".*tmp*"))


def test_critical_chain_has_no_massive_figures_and_keeps_its_fits(runs, built):
    figs = built(runs["critical"])
    assert set(figs) == STANDARD            # no massive section: the massive figures are skipped
    for name in STANDARD:
        assert "critical-fit" in _gids(figs[name]), name
        assert _notes(figs[name]) == [], name
    texts = [t.get_text() for t in figs["entropy_profile.png"].legends[0].get_texts()]
    assert any("c = 0.9" in t for t in texts)   # free fermions: c = 1 (Calabrese and Cardy 2004)


@pytest.mark.parametrize("name", ["gapped", "scalar"])
def test_gapped_chains_draw_massive_figures_without_critical_forms(runs, built, name):
    figs = built(runs[name])
    assert set(figs) == STANDARD | MASSIVE
    for fig_name in STANDARD:
        fig = figs[fig_name]
        assert "critical-fit" not in _gids(fig), fig_name
        notes = _notes(fig)
        assert len(notes) == 1, fig_name
        if fig_name == "entropy_profile.png":   # the regime reason, shortened
            assert notes[0].startswith("gapped: charge correlations decay")
        else:                                   # a pointer to the massive figure
            assert "massive_" in notes[0] and ".png" in notes[0], notes[0]
    for fig_name in MASSIVE:
        gids = _gids(figs[fig_name])
        assert "massive:dirac" in gids and "massive:scalar" in gids, fig_name
    # the free chains of the same correlation length, one thin line per field and Renyi index
    moments_gids = _gids(figs["massive_moments.png"])
    assert moments_gids.count("massive:free-dirac") == moments_gids.count("massive:free-scalar") == 2


@pytest.mark.parametrize("name, field", [("gapped", "dirac"), ("scalar", "scalar")])
def test_fitted_ladder_curve_runs_through_the_data(runs, name, field):
    # The exact free-field chains have equally spaced entanglement levels (corner transfer matrix:
    # Peschel, Kaulke and Legeza, Ann. Phys. (Leipzig) 8, 153 (1999), from memory), so the fitted ladder
    # of the matching field reproduces -log|Z_n(alpha)/Z_n(0)| and p(q) (fit residual ~1e-9,
    # mps.pipeline.massive_report); the drawn curves must use the fitted eps and offset.
    frun = RunFiles.read(runs[name])
    fig = massive_plots.massive_moments_figure(frun)
    cut = frun.comparison["massive"]["cut"]
    mom = frun.moments
    for ax, n in zip(fig.axes, (1.0, 2.0)):
        sel = (mom["cut"] == cut) & (mom["n"] == n)
        a = mom["alpha"][sel]
        y = -np.log(np.abs(mom["re"][sel] + 1j * mom["im"][sel]))
        (line,) = [ln for ln in ax.lines if ln.get_gid() == f"massive:{field}"]
        curve = np.interp(a, line.get_xdata(), line.get_ydata())
        assert np.max(np.abs(curve - y)) < 1e-4 * np.max(y), (name, n)
    dist = massive_plots.massive_distribution_figure(frun)
    (line,) = [ln for ln in dist.axes[0].lines if ln.get_gid() == f"massive:{field}"]
    (data,) = [ln for ln in dist.axes[0].lines if ln.get_label().startswith("data")]
    predicted = dict(zip(np.round(line.get_xdata(), 6), line.get_ydata()))
    checked = 0
    for dq, p in zip(data.get_xdata(), data.get_ydata()):
        if p > 1e-6:
            assert predicted[round(dq, 6)] == pytest.approx(p, rel=1e-5), (name, dq)
            checked += 1
    assert checked >= 3


def test_older_runs_without_massive_section(runs, built, tmp_path):
    d = _copy(runs["gapped"], tmp_path / "run", edit=lambda r: r.pop("massive"))
    figs = built(d)
    assert set(figs) == STANDARD             # massive figures skipped, the rest drawn
    for fig_name in STANDARD:
        assert "critical-fit" not in _gids(figs[fig_name])
        notes = _notes(figs[fig_name])
        assert len(notes) == 1 and "massive_" not in notes[0]   # no pointer to figures that do not exist


def test_comparison_before_the_regime_decision_draws_as_before(runs, built, tmp_path):
    def strip(report):
        report.pop("regime")
        report.pop("massive")
    figs = built(_copy(runs["critical"], tmp_path / "run", edit=strip))
    for name in STANDARD:
        assert "critical-fit" in _gids(figs[name]) and _notes(figs[name]) == [], name


def test_undecided_regime_prints_the_reason(runs, tmp_path):
    reason = ("undecided: charge correlations decay exponentially with xi = 40 sites, beyond the window "
              "start; the entropy fits c/6 log l_eff poorly (c = 0.31, residual 0.012 against a growth of 0.09 "
              "over cuts 8..56); neither the critical nor the massive figures are reported; "
              "a longer chain or a wider fit window may decide")

    def undecided(report):
        report["regime"].update(verdict="undecided", reason=reason)
    frun = RunFiles.read(_copy(runs["critical"], tmp_path / "run", edit=undecided))
    for name, build in CRITICAL_BUILDERS.items():
        fig = build(frun)
        assert "critical-fit" not in _gids(fig), name
        (note,) = _notes(fig)
        assert note.startswith("undecided: charge correlations") and note.endswith("...")   # shortened
        assert max(len(line) for line in note.splitlines()) <= 56 and note.count("\n") < 5


def test_negative_fits_are_never_shown(runs, tmp_path):
    # an older comparison.json (no regime) with a negative c for n = 2 and a negative K
    def negative(report):
        report.pop("regime")
        report["central_charge"]["by_renyi"]["2"]["value"] = -0.3
        report["luttinger"]["value"] = report["luttinger"]["fit"]["value"] = -0.2
    frun = RunFiles.read(_copy(runs["critical"], tmp_path / "run", edit=negative))
    fig = profiles.entropy_profile_figure(frun)
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert not any("-0.3" in t for t in texts) and any("c = 0.9" in t for t in texts)
    ax1 = fig.axes[0]
    # the positive fits (n = 1, inf) with two parity branches each; none for n = 2
    assert sum(ln.get_gid() == "critical-fit" for ln in ax1.lines) == 4
    assert "n = 2" in _notes(fig)[0]
    var = profiles.charge_variance_figure(frun)
    assert "critical-fit" not in _gids(var)
    assert "K fitted as -0.2" in _notes(var)[0]
