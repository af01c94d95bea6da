"""``solver: {method: exact}``: quadratic chains through the exact engines, end to end via the command.

Sources: exact diagonalisation with scipy.sparse (tests/reference_ed.py, a reference library) for
the energies, p(q), S_n(q) and charged moments of small chains; the regime verdicts are checked on
chains whose regime is known exactly (uniform hopping: critical free fermions; a staggered potential
opens a gap 2 mu_stag in the single-particle spectrum, standard band theory).
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

import reference_ed as ed


def cli(*args):
    return subprocess.run([sys.executable, "-m", "mps", *map(str, args)], capture_output=True, text=True)


def write(tmp_path: Path, model: dict, **extra) -> Path:
    cfg = {"name": "exact", "model": model, "solver": {"method": "exact"},
           "analysis": {"renyi": [1, 2, "inf"], "flux_points": 17}, **extra}
    path = tmp_path / "chain.yaml"
    path.write_text(yaml.safe_dump(cfg))
    return path


def rows(path: Path) -> list[dict]:
    with open(path) as fh:
        return [{k: float(v) if v else float("nan") for k, v in r.items()} for r in csv.DictReader(fh)]


def run(tmp_path: Path, model: dict, **extra) -> Path:
    out = tmp_path / "run"
    res = cli("run", write(tmp_path, model, **extra), "--out", out)
    assert res.returncode == 0, res.stderr
    return out


def test_xx_chain_in_a_field_matches_exact_diagonalisation(tmp_path):
    # xxz at Delta = 0 with uniform and staggered fields: the Jordan-Wigner constant enters the energy.
    L, c = 10, {"J": 1.0, "Delta": 0.0, "h": 0.15, "h_stag": 0.4, "dimer": 0.1}
    out = run(tmp_path, {"family": "xxz", "sites": L, "couplings": c, "charge": {"Sz": 0}})
    summary = json.loads((out / "summary.json").read_text())
    H, basis = ed.xxz_sector(L, L // 2, **c)   # exact diagonalisation with scipy.sparse
    e0, vec = ed.ground_state(H)
    assert summary["method"] == "exact" and abs(summary["energy"] - e0) < 1e-10
    assert not (out / "state.h5").exists()
    sectors = rows(out / "sectors.csv")
    for cut in range(1, L):
        ref = ed.resolved_from_schmidt(ed.schmidt_by_sector(vec, basis, L, cut, 1.0, -0.5), [1, 2, np.inf],
                                       np.zeros(1))
        mine = {r["charge"]: r for r in sectors if r["cut"] == cut}
        for q, p, s in zip(ref["charges"], ref["probability"], ref["sector_entropy"].T):
            if p < 1e-10:
                continue
            assert abs(mine[q]["probability"] - p) < 1e-12
            if p > 1e-6:   # sector entropies of rarer sectors are round-off dominated on the ED side
                assert abs(mine[q]["S_1"] - s[0]) < 1e-8 and abs(mine[q]["S_2"] - s[1]) < 1e-8
    comp = json.loads((out / "comparison.json").read_text())
    assert comp["method"] == "exact" and comp["exact"] is None


def test_moments_table_matches_exact_diagonalisation(tmp_path):
    L, c = 8, {"t": 1.0, "mu_stag": 0.3, "dimer": 0.2}
    out = run(tmp_path, {"family": "fermions", "sites": L, "couplings": c, "charge": {"N": 4}})
    H, basis = ed.fermion_sector(L, 4, **c)   # exact diagonalisation with scipy.sparse
    _, vec = ed.ground_state(H)
    mom = rows(out / "moments.csv")
    cut = 3
    mine = sorted((r["alpha"], r["re"] + 1j * r["im"]) for r in mom if r["cut"] == cut and r["n"] == 2)
    alphas = np.array([a for a, _ in mine])
    ref = ed.resolved_from_schmidt(ed.schmidt_by_sector(vec, basis, L, cut), [2], alphas)
    assert np.max(np.abs(np.array([z for _, z in mine]) - ref["moments"][0])) < 1e-12


@pytest.mark.parametrize("couplings, verdict", [
    ({"t": 1.0}, "critical"),              # uniform hopping: a c = 1 chain
    ({"t": 1.0, "mu_stag": 0.6}, "gapped"),
])
def test_regime_of_free_chains(tmp_path, couplings, verdict):
    L = 200
    out = run(tmp_path, {"family": "fermions", "sites": L, "couplings": couplings, "charge": {"N": L // 2}},
              output={"plots": False})
    comp = json.loads((out / "comparison.json").read_text())
    assert comp["regime"]["verdict"] == verdict, comp["regime"]["reason"]
    if verdict == "critical":
        assert abs(comp["central_charge"]["value"] - 1.0) < 0.05   # c = 1 (Calabrese and Cardy 2004)
        assert comp["massive"] is None
    else:
        assert comp["central_charge"]["value"] is None and comp["luttinger"]["value"] is None
        assert comp["massive"] is not None


def test_exact_method_refuses_an_interacting_chain(tmp_path):
    path = write(tmp_path, {"family": "fermions", "sites": 8, "couplings": {"V": 0.5}, "charge": {"N": 4}})
    res = cli("run", path, "--out", tmp_path / "run")
    assert res.returncode == 2 and "solver.method" in res.stderr and "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_exact_run_has_nothing_to_resume(tmp_path):
    out = run(tmp_path, {"family": "fermions", "sites": 12, "couplings": {"mu_stag": 0.5}, "charge": {"N": 6}},
              output={"plots": False})
    res = cli("resume", out)
    assert res.returncode == 2 and "nothing to resume" in res.stderr
    assert cli("compare", out).returncode == 0
