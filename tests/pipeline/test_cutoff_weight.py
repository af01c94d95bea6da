"""The weight a boson chain leaves at its occupation cutoff, reported in summary.json."""

from __future__ import annotations

import json

import numpy as np
import yaml

from mps.pipeline.cli import main

import reference_sites as ref


def test_cutoff_weight_matches_exact_diagonalisation(tmp_path, capsys):
    # Source: exact diagonalisation with scipy.sparse (tests/reference_sites.py): the largest
    # probability, over sites, of finding nmax bosons on a site. Weak repulsion at unit filling
    # with nmax = 2 leaves a sizeable weight there, so the run also warns.
    L, nmax, couplings = 6, 2, {"t": 1.0, "U": 0.5}
    cfg = {"name": "b", "model": {"family": "bosons", "sites": L, "nmax": nmax, "couplings": couplings},
           "solver": {"stages": [{"bond": 16, "sweeps": 2}, {"bond": 64, "sweeps": 4}], "discard": 1e-14},
           "output": {"dir": str(tmp_path / "run"), "plots": False}}
    (tmp_path / "c.yaml").write_text(yaml.safe_dump(cfg))
    assert main(["run", str(tmp_path / "c.yaml")]) == 0
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    H, charges = ref.bosons(L, nmax, **couplings)
    _, vec, index = ref.sector_ground_state(H, charges, (float(L),))
    digits = (index[:, None] // (nmax + 1) ** np.arange(L - 1, -1, -1)) % (nmax + 1)   # site 0 slowest
    top = (np.abs(vec) ** 2) @ (digits == nmax)
    assert abs(summary["cutoff_weight"] - top.max()) < 1e-8
    assert abs(top[summary["cutoff_weight_site"]] - top.max()) < 1e-8   # the site where it is largest
    assert "raise model.nmax" in capsys.readouterr().err
