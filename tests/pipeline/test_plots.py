"""Figures of a run directory: every PNG is drawn when its data exist, skipped quietly otherwise."""

from __future__ import annotations

import json
import shutil
import struct
import sys
from pathlib import Path

import matplotlib
import numpy as np
import pytest

from mps.pipeline.comparison import write_comparison
from mps.pipeline.plots import DPI, draw_all, load_table, renyi_columns
from mps.pipeline.runner import load_run, run

ALL = {"entropy_profile.png", "charge_variance.png", "sector_entropies.png", "charge_distribution.png",
       "charged_moments.png", "sweeps.png"}

# A small quadratic chain (xxz at Delta = 0), so that the comparison stage also writes the exact
# free-fermion tables that the figures overlay.
CONFIG = """\
name: plot-test-chain
model:
  family: xxz
  sites: 12
  couplings: {J: 1.0, Delta: 0.0, h_stag: 0.2}
  charge: {Sz: 0}
solver:
  stages: [{bond: 8, sweeps: 1}, {bond: 24, sweeps: 2}]
  discard: 1.0e-12
  seed: 2
analysis:
  renyi: [1, 2, inf]
"""


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> Path:
    """A finished run directory with comparison.json and the exact tables."""
    base = tmp_path_factory.mktemp("plots")
    cfg_path = base / "chain.yaml"
    cfg_path.write_text(CONFIG)
    out = base / "run"
    assert run(str(cfg_path), str(out)) == 0
    cfg, state, _ = load_run(out)
    write_comparison(out, cfg, state)
    return out


def _copy(src: Path, dst: Path, drop: tuple[str, ...] = ()) -> Path:
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("plots"))
    for name in drop:
        (dst / name).unlink()
    return dst


def _png_size(path: Path) -> tuple[int, int]:
    """(width, height) from the IHDR chunk of a PNG file."""
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n", f"{path.name} is not a PNG"
    return struct.unpack(">II", head[16:24])


def _check_pngs(paths: list[Path], expected: set[str]) -> None:
    assert {p.name for p in paths} == expected
    for p in paths:
        assert p.is_file() and p.stat().st_size > 10_000, p
        width, height = _png_size(p)
        assert width >= 6 * DPI and height >= 4 * DPI, (p.name, width, height)
        pixels = matplotlib.image.imread(p)
        assert np.std(pixels[..., :3]) > 0.05, f"{p.name} is blank"


# the fixture chain (staggered field) is gapped: comparison.json has a massive section
MASSIVE = {"massive_moments.png", "massive_sector_entropies.png", "massive_distribution.png"}


def test_all_figures_of_a_finished_run(finished, tmp_path):
    d = _copy(finished, tmp_path / "run")
    assert (d / "comparison.json").is_file() and (d / "exact_sectors.csv").is_file()
    paths = draw_all(d)
    _check_pngs(paths, ALL | MASSIVE)
    assert all(p.parent == d / "plots" for p in paths)
    assert not list((d / "plots").glob(".*tmp*")), "temporary files left behind"


def test_without_comparison_or_exact_tables(finished, tmp_path):
    d = _copy(finished, tmp_path / "run", drop=("comparison.json", "exact_entropies.csv", "exact_sectors.csv"))
    _check_pngs(draw_all(d), ALL)


@pytest.mark.parametrize("drop, missing", [
    (("entropies.csv",), {"entropy_profile.png", "charge_variance.png", "massive_sector_entropies.png",
                          "massive_distribution.png"}),
    (("sectors.csv", "moments.csv"), {"sector_entropies.png", "charge_distribution.png", "charged_moments.png"}
     | MASSIVE),
    (("sweeps.csv", "config.yaml", "summary.json"), {"sweeps.png"}),
], ids=["no-entropies", "no-sectors-or-moments", "no-sweeps-config-summary"])
def test_missing_tables_are_skipped_quietly(finished, tmp_path, drop, missing, capsys):
    d = _copy(finished, tmp_path / "run", drop=drop)
    _check_pngs(draw_all(d), (ALL | MASSIVE) - missing)
    out = capsys.readouterr()
    assert out.out == "" and out.err == ""


def test_empty_directory_and_broken_comparison(tmp_path, finished):
    assert draw_all(tmp_path) == []
    d = _copy(finished, tmp_path / "run")
    (d / "comparison.json").write_text("{not json")
    _check_pngs(draw_all(d), ALL)
    # fits that failed are recorded as {"value": null, "error": ...}: no curve, no exception
    report = {"window": [2, 10], "central_charge": {"value": None, "by_renyi": {"1": {"value": None, "error": "x"}}},
              "luttinger": {"value": None, "fit": {"value": None, "error": "x"}, "bethe_ansatz": None},
              "equipartition": None, "charged_moments": {"by_renyi": {"1": {"sigma_sq": None}}}}
    (d / "comparison.json").write_text(json.dumps(report))
    _check_pngs(draw_all(d), ALL)
    with pytest.raises(FileNotFoundError):
        draw_all(tmp_path / "no-such-run")


def test_no_global_matplotlib_state_changes(finished, tmp_path):
    d = _copy(finished, tmp_path / "run")
    before = dict(matplotlib.rcParams)
    backend = matplotlib.get_backend()
    had_pyplot = "matplotlib.pyplot" in sys.modules
    draw_all(d)
    assert dict(matplotlib.rcParams) == before
    assert matplotlib.get_backend() == backend
    if not had_pyplot:
        assert "matplotlib.pyplot" not in sys.modules


def test_table_reader_and_renyi_columns(finished):
    ent = load_table(finished / "entropies.csv")
    assert [label for label, _ in renyi_columns(ent)] == ["1", "2", "inf"]   # S_number, S_config excluded
    moments = load_table(finished / "moments.csv")
    assert set(np.unique(moments["n"])) == {1.0, 2.0, np.inf}
    assert load_table(finished / "absent.csv") is None


def test_plotted_gaussian_is_normalised_on_the_charge_lattice():
    # A narrow Gaussian (sigma^2 << spacing^2) must still be a probability distribution on the
    # lattice, as in comparison.json's distances (exact: normalisation).
    import numpy as np

    from mps.pipeline.plots.sectors import _lattice_gaussian

    for var, spacing, mean in ((0.059, 1.0, 0.0), (0.3, 1.0, 0.2), (2.5, 1.0, -0.5), (0.02, 1.0, 0.5)):
        lattice = np.arange(-30, 31) * spacing + (mean % spacing)
        g = _lattice_gaussian(lattice, mean, var, spacing)
        assert g.sum() == pytest.approx(1.0, abs=1e-12)
        assert g.max() <= 1.0
