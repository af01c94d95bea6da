"""The sweeps on the lattice complex scalar against the exact Gaussian engine, end to end.

Source: the exact lattice Gaussian engine (mps.theory.scalar; harmonic-chain method of Peschel and
Eisler, J. Phys. A 42, 504003 (2009), from memory), itself checked against exact diagonalisation
with scipy.sparse in tests/theory/test_scalar.py. The solver works in a truncated space (nmax
quanta per species and site), so its p(q) can differ from the exact one by about the weight the
cutoff leaves in the top occupation (summary.json ``cutoff_weight``): the tolerance is that weight.
Measured at L = 24, m = 1: max |p(q) - exact| / cutoff_weight = 0.28 at nmax 2 (weight 7.1e-4)
and 0.50 at nmax 3 (weight 1.5e-5); the bound is a rule of thumb (common practice), not derived.
"""

from __future__ import annotations

import json
import math

from mps.pipeline.runner import run

CONFIG = """\
name: scalar-24
model: {family: complex-scalar, sites: 24, nmax: 2, couplings: {m: 1.0}}
solver:
  stages: [{bond: 16, sweeps: 2}, {bond: 32, sweeps: 4}]
  discard: 1.0e-12
  energy_tol: 1.0e-10
analysis: {renyi: [1, 2], flux_points: 17}
output: {plots: false}
"""


def test_solver_p_of_q_within_the_cutoff_weight_of_the_exact_engine(tmp_path):
    path = tmp_path / "scalar.yaml"
    path.write_text(CONFIG)
    out = tmp_path / "run"
    assert run(str(path), str(out)) == 0
    summary = json.loads((out / "summary.json").read_text())
    comp = json.loads((out / "comparison.json").read_text())
    weight = summary["cutoff_weight"]
    assert 0 < weight < 1e-3
    dev = comp["exact"]["max_deviation"]["probability"]["value"]
    assert dev <= weight, (dev, weight)
    # sum rules and charge conjugation p(q) = p(-q) on every cut (exact identities)
    rules = comp["sum_rules"]
    assert rules["normalisation"]["value"] < 1e-12 and rules["entropy_split"]["value"] < 1e-10
    assert rules["conjugation"]["value"] < 1e-8   # the solver's state, converged to variance ~1e-7
    assert comp["regime"]["verdict"] == "gapped" and math.isfinite(comp["regime"]["xi"])
    assert comp["massive"]["flux"]["1"]["ladder"]["verdict"] == "scalar"
