"""A chain written in YAML that spells out the xxz family gives the same run as the family itself.

Source: the two configs describe the same Hamiltonian (DESIGN.md section 3, xxz with every
coupling switched on), so energies and every table must agree to the solver's accuracy; the
check drives the ``chargewise`` command end to end.
"""

from __future__ import annotations

import json

import numpy as np
import yaml

from mps.pipeline.cli import main
from mps.pipeline.rundir import read_table

L = 12
SOLVER = {"stages": [{"bond": 16, "sweeps": 2}, {"bond": 64, "sweeps": 6}], "discard": 1e-14,
          "energy_tol": 1e-12, "seed": 5}
COUPLINGS = {"J": 1.0, "Delta": 0.7, "h": 0.05, "h_stag": 0.2, "dimer": 0.15}
FAMILY = {"family": "xxz", "sites": L, "couplings": COUPLINGS, "charge": {"Sz": 1}}
WRITTEN = {
    "family": "written", "basis": "spin-half", "sites": L, "charge": {"Sz": 1},
    "couplings": {"J": 1.0, "Delta_J": 0.7, "h": 0.05, "h_stag": 0.2},
    "terms": [
        {"product": "S^+(j) S^-(j+1)", "coef": {"value": "0.5*J", "dimer": 0.15}, "add_conjugate": True},
        {"product": "S^z(j) S^z(j+1)", "coef": {"value": "Delta_J", "dimer": 0.15}},
        {"product": "S^z(j)", "coef": {"value": "h", "stagger": "h_stag"}},
    ],
}


def run(tmp_path, name, model):
    path = tmp_path / f"{name}.yaml"
    out = tmp_path / name
    path.write_text(yaml.safe_dump({"name": name, "model": model, "solver": SOLVER,
                                    "output": {"dir": str(out), "plots": False}}))
    assert main(["run", str(path)]) == 0
    return out


def numeric(path):
    header, rows = read_table(path)
    return header, np.array([[float(c) if c not in ("", "inf") else np.inf for c in r] for r in rows])


def test_xxz_written_out_matches_the_family(tmp_path):
    a, b = run(tmp_path, "family", FAMILY), run(tmp_path, "written", WRITTEN)
    ea = json.loads((a / "summary.json").read_text())["energy"]
    eb = json.loads((b / "summary.json").read_text())["energy"]
    assert abs(ea - eb) < 1e-10
    for table in ("entropies.csv", "sectors.csv", "moments.csv"):
        ha, ta = numeric(a / table)
        hb, tb = numeric(b / table)
        assert ha == hb and ta.shape == tb.shape, table
        np.testing.assert_allclose(ta, tb, atol=1e-7, err_msg=table)
