"""Chains with two charges through the pipeline: tables resolved by one charge or jointly, the
per-charge variances, a Luttinger parameter per charge, and the figures of both charges."""

from __future__ import annotations

import json

import numpy as np
import pytest
import yaml

from mps.pipeline.cli import main
from mps.pipeline.rundir import read_table

MODEL = {"family": "hubbard", "sites": 8, "couplings": {"t": 1.0, "U": 2.0}, "charge": {"N": 6, "Sz": 0}}
SOLVER = {"stages": [{"bond": 16, "sweeps": 2}, {"bond": 64, "sweeps": 4}], "discard": 1e-12}


def table(path):
    header, rows = read_table(path)
    return {h: np.array([float(r[i]) if r[i] != "" else np.nan for r in rows]) for i, h in enumerate(header)}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    out = {}
    for resolve in ("N", "Sz", "joint"):
        d = tmp_path_factory.mktemp(resolve)
        cfg = {"name": f"hub-{resolve}", "model": MODEL, "solver": SOLVER,
               "analysis": {"resolve": resolve, "renyi": [1, 2]}, "output": {"dir": str(d / "run")}}
        (d / "c.yaml").write_text(yaml.safe_dump(cfg))
        assert main(["run", str(d / "c.yaml")]) == 0
        out[resolve] = d / "run"
    return out


def test_sector_columns_follow_the_resolution(runs):
    for resolve, cols in (("N", ["charge"]), ("Sz", ["charge"]), ("joint", ["charge_N", "charge_Sz"])):
        header, _ = read_table(runs[resolve] / "sectors.csv")
        assert header[1:1 + len(cols)] == cols and header[1 + len(cols)] == "probability"


def test_marginals_and_variances_agree_across_resolutions(runs):
    # Exact identities: p(N) = sum_Sz p(N, Sz); the variance column of each single-charge run
    # equals the per-charge variance column every run carries; S_number of the joint p is at least
    # that of either marginal (Shannon entropy of a pair >= that of each component).
    by_n, joint = table(runs["N"] / "sectors.csv"), table(runs["joint"] / "sectors.csv")
    for cut in (2, 4, 6):
        rows = joint["cut"] == cut
        for q, p in zip(by_n["charge"][by_n["cut"] == cut], by_n["probability"][by_n["cut"] == cut]):
            assert p == pytest.approx(joint["probability"][rows & (joint["charge_N"] == q)].sum(), abs=1e-12)
    ents = {r: table(runs[r] / "entropies.csv") for r in runs}
    np.testing.assert_allclose(ents["N"]["charge_var"], ents["joint"]["charge_var_N"], atol=1e-12)
    np.testing.assert_allclose(ents["Sz"]["charge_var"], ents["joint"]["charge_var_Sz"], atol=1e-12)
    assert np.all(ents["joint"]["S_number"] >= ents["N"]["S_number"] - 1e-12)
    assert np.all(ents["joint"]["S_number"] >= ents["Sz"]["S_number"] - 1e-12)
    # S_1 = S_number + S_config holds for the joint resolution too (Wiseman and Vaccaro 2003).
    e = ents["joint"]
    np.testing.assert_allclose(e["S_1"], e["S_number"] + e["S_config"], atol=1e-10)


def test_one_luttinger_parameter_per_charge_and_figures(runs):
    rep = json.loads((runs["joint"] / "comparison.json").read_text())
    by = rep["luttinger_by_charge"]
    assert set(by) == {"N", "Sz"}
    assert by["N"]["slope"] == pytest.approx(1 / np.pi**2) and by["Sz"]["slope"] == pytest.approx(1 / (4 * np.pi**2))
    for entry in by.values():
        assert entry["regime"] in ("critical", "gapped")
        assert (entry["value"] is None) == (entry["regime"] == "gapped")
    plots = {p.name for p in (runs["joint"] / "plots").iterdir()}
    assert {"variance_by_charge.png", "joint_sectors.png", "entropy_profile.png"} <= plots
    assert "charge_distribution.png" not in plots      # drawn per resolved charge, not for joint sectors
    assert "charge_distribution.png" in {p.name for p in (runs["Sz"] / "plots").iterdir()}
