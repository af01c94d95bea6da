"""Checks of the comparison stage (mps/pipeline/comparison.py): solver against the exact free-fermion engine,
Bethe-ansatz Luttinger parameters, and comparison.json in a run directory.

References: exact lattice free fermions from the correlation matrix (Peschel, J. Phys. A 36, L205
(2003); product formula of Bonsignori, Ruggiero and Calabrese, J. Phys. A 52, 475302 (2019)) as
implemented in mps/theory/freefermions.py, itself checked against exact diagonalisation with scipy.sparse
in tests/test_freefermions.py; K = pi/(2(pi - arccos Delta)) (Bethe ansatz; Luther and Peschel,
PRB 12, 3908 (1975)); c = 1 for the xxz chain (Calabrese and Cardy, J. Stat. Mech. (2004) P06002).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import yaml

from models import get_family
from mps.analysis.entanglement import default_alphas, resolve_cut
from mps.pipeline import runner
from mps.pipeline.comparison import (
    COMPARISON,
    bethe_ansatz_luttinger,
    compare_run,
    deviations,
    write_comparison,
)
from mps.pipeline.config import parse_config
from mps.pipeline.rundir import read_table
from mps.theory.fieldtheory import luttinger_bethe_ansatz
from mps.theory.freefermions import resolve_all_cuts

from chains import solve

RENYI = (1.0, 2.0, 3.0, math.inf)
TOP_KEYS = {"name", "family", "sites", "couplings", "charge", "renyi", "version", "window",
            "central_charge", "luttinger", "luttinger_by_charge", "equipartition", "charged_moments",
            "correlation_length", "regime", "exact", "method", "massive", "sum_rules"}


def config(family: str, sites: int, couplings: dict, charge: dict, stages, **solver) -> dict:
    return {"name": f"{family}-{sites}", "model": {"family": family, "sites": sites, "couplings": couplings,
                                                   "charge": charge},
            "solver": {"stages": [{"bond": b, "sweeps": s, "admix": z} for b, s, z in stages], **solver},
            "analysis": {"renyi": [1, 2, 3, "inf"]}}


# ----------------------------------------------------------------------------- free dimerised chain
FREE = config("fermions", 64, {"t": 1.0, "dimer": 0.3, "V": 0.0}, {"N": 32},
              [(32, 2, 1e-5), (64, 4, 0.0)], discard=1e-14, energy_tol=1e-12)


@pytest.fixture(scope="module")
def free_dimerised():
    """(cfg, state) of the dimerised free chain of 64 sites at half filling (~15 s of sweeps)."""
    cfg = parse_config(FREE)
    settings = runner.sweep_settings(cfg)
    _, search = solve(cfg.model.family, cfg.model.sites, cfg.model.couplings, cfg.model.charge, settings)
    return cfg, search.state


def _exact_records(cfg, cuts, alphas):
    h, unit, offset = get_family(cfg.model.family).single_particle(cfg.model.sites, cfg.model.couplings)
    return resolve_all_cuts(h, int(cfg.model.charge["N"]), cuts, RENYI, alphas, unit, offset)


def test_solver_matches_exact_free_fermions(free_dimerised):
    # exact lattice free fermions (Peschel 2003; Bonsignori, Ruggiero and Calabrese 2019):
    # p(q) to 1e-6 in every sector, S_n(q) to 1e-5 where the exact p(q) > 1e-6, every cut
    cfg, state = free_dimerised
    alphas = default_alphas(17)
    cuts = list(range(1, cfg.model.sites))
    exact = _exact_records(cfg, cuts, alphas)
    solver = [resolve_cut(state.spectra[c].as_dict(), c, RENYI, alphas, (1.0,)) for c in cuts]
    worst_p = worst_s = 0.0
    for s, e in zip(solver, exact):
        ps, pe = dict(zip(s.charges, s.probability)), dict(zip(e.charges, e.probability))
        worst_p = max(worst_p, max(abs(ps.get(q, 0.0) - pe.get(q, 0.0)) for q in set(ps) | set(pe)))
        for i in range(len(RENYI)):
            ss = dict(zip(s.charges, s.sector_entropy[i]))
            for q, p, v in zip(e.charges, e.probability, e.sector_entropy[i]):
                if p > 1e-6:
                    assert q in ss and np.isfinite(ss[q]), (s.cut, q)
                    worst_s = max(worst_s, abs(ss[q] - v))
    assert worst_p < 1e-6
    assert worst_s < 1e-5
    # the comparison stage reports the same maxima (its own bookkeeping of the two record lists)
    rep = deviations(solver, exact, rare=1e-6)
    assert rep["max_deviation"]["probability"]["value"] == pytest.approx(worst_p, rel=1e-12, abs=1e-300)
    assert rep["max_deviation"]["sector_entropy"]["value"] == pytest.approx(worst_s, rel=1e-12, abs=1e-300)
    assert rep["missing_sectors"] == 0


def test_compare_run_on_free_chain(free_dimerised):
    # compare_run on the same state: the exact section holds the deviations above (same tolerances),
    # and the fits of the exact data sit next to the solver's (same lattice answer within 1e-5)
    cfg, state = free_dimerised
    rep = compare_run(cfg, state)
    assert set(rep) == TOP_KEYS
    ex = rep["exact"]
    assert ex["n_particles"] == 32 and ex["missing_sectors"] == 0
    dev = ex["max_deviation"]
    assert dev["probability"]["value"] < 1e-6
    assert dev["sector_entropy"]["value"] < 1e-5
    assert dev["entropy"]["value"] < 1e-5
    assert dev["moments"]["value"] < 1e-6     # finite n; Z_n(alpha)/Z_n(0) is a p-weighted mean of phases
    for n in ("1", "2", "3", "inf"):
        assert ex["central_charge"]["by_renyi"][n]["value"] == pytest.approx(
            rep["central_charge"]["by_renyi"][n]["value"], abs=1e-4)
    assert rep["luttinger"]["bethe_ansatz"] is None           # dimerised: not the uniform chain
    mid = rep["equipartition"]
    assert mid["cut"] == 32 and set(mid["by_renyi"]) == {"1", "2", "3", "inf"}
    assert len(mid["per_cut"]["cut"]) == 63


def test_gapped_chain_withholds_central_charge_and_luttinger(free_dimerised):
    # The dimerised free chain is gapped (single-particle gap ~ 4 t dimer; exact, standard), so its
    # entropy saturates (area law; Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073): the
    # headline c and K are withheld with the reason, the raw fits stay for reference.
    cfg, state = free_dimerised
    rep = compare_run(cfg, state)
    assert rep["regime"]["verdict"] == "gapped" and rep["regime"]["xi"] < rep["window"][0]
    assert rep["central_charge"]["value"] is None and "area law" in rep["central_charge"]["reason"]
    assert rep["luttinger"]["value"] is None
    assert rep["central_charge"]["by_renyi"]["1"]["value"] is not None


def test_correlations_of_massive_free_chain(free_dimerised):
    # Wick's theorem for the exact connected density correlations (delta_ij C_ii - |C_ij|^2, Peschel
    # 2003); the dimerised chain is gapped, so the correlation length is finite
    cfg, state = free_dimerised
    rep = compare_run(cfg, state)
    assert rep["exact"]["max_deviation"]["charge_correlations"]["value"] < 1e-6
    xi = rep["correlation_length"]
    assert xi["exponential"] and 0 < xi["xi"] < cfg.model.sites / 4
    assert xi["window_start_over_xi"] == pytest.approx(8 / xi["xi"], rel=1e-12)


# ----------------------------------------------------------------------------- Bethe ansatz
@pytest.mark.parametrize("family, couplings, charge, delta", [
    ("xxz", {"J": 1.0, "Delta": 0.5}, {"Sz": 0}, 0.5),
    ("xxz", {"J": -1.0, "Delta": 0.5}, {"Sz": 0}, -0.5),           # sublattice rotation: Delta -> -Delta
    ("fermions", {"t": 1.0, "V": 1.0}, {"N": 6}, 0.5),             # Jordan-Wigner: Delta = V/(2t)
    ("fermions", {"t": -0.5, "V": 0.5}, {"N": 6}, 0.5),
    ("xxz", {"J": 1.0, "Delta": 0.5, "h_stag": 0.1}, {"Sz": 0}, None),
    ("xxz", {"J": 1.0, "Delta": 0.5}, {"Sz": 1}, None),
    ("xxz", {"J": 1.0, "Delta": 1.5}, {"Sz": 0}, None),            # gapped Neel phase
    ("fermions", {"t": 1.0, "V": 1.0}, {"N": 5}, None),
])
def test_bethe_ansatz_luttinger_of_config(family, couplings, charge, delta):
    # K = pi/(2(pi - arccos Delta)) (Luther and Peschel 1975) for uniform zero-field chains at zero
    # magnetisation; the xxz <-> t-V map of DESIGN.md section 5 (hopping J/2, V = J Delta)
    cfg = parse_config(config(family, 12, couplings, charge, [(8, 1, 0.0)]))
    got = bethe_ansatz_luttinger(cfg)
    if delta is None:
        assert got is None
    else:
        assert got == pytest.approx(math.pi / (2 * (math.pi - math.acos(delta))), rel=1e-14)


# ----------------------------------------------------------------------------- run directory
@pytest.mark.parametrize("delta", [0.0, 0.5])
def test_write_comparison_in_run_directory(tmp_path, delta):
    # a finished run of 12 sites: comparison.json with the documented keys; the XX chain (Delta = 0)
    # is quadratic and gets the exact tables, with the columns of entropies.csv and sectors.csv
    raw = config("xxz", 12, {"J": 1.0, "Delta": delta}, {"Sz": 0}, [(8, 2, 1e-5), (32, 4, 0.0)],
                 discard=1e-14, energy_tol=1e-12)
    raw["output"] = {"dir": str(tmp_path / "run"), "plots": False}
    path = tmp_path / "chain.yaml"
    path.write_text(yaml.safe_dump(raw))
    assert runner.run(str(path)) == 0
    cfg, state, _ = runner.load_run(tmp_path / "run")
    rep = write_comparison(tmp_path / "run", cfg, state)
    stored = json.loads((tmp_path / "run" / COMPARISON).read_text())
    assert set(stored) == TOP_KEYS
    assert stored["window"] == [2, 10]
    assert stored["luttinger"]["bethe_ansatz"] == pytest.approx(luttinger_bethe_ansatz(delta), rel=1e-14)
    for key in ("value", "const", "alternating", "exponent", "residual_rms", "window", "points"):
        assert key in stored["central_charge"]["by_renyi"]["1"] and key in stored["luttinger"]["fit"]
    assert set(stored["charged_moments"]["by_renyi"]) == {"1", "2", "3"}
    assert stored["central_charge"]["value"] == pytest.approx(rep["central_charge"]["value"], rel=1e-15)
    exact_files = [tmp_path / "run" / f for f in ("exact_entropies.csv", "exact_sectors.csv")]
    if delta == 0.0:
        assert stored["exact"]["max_deviation"]["probability"]["value"] < 1e-6
        for name, f in zip(("entropies.csv", "sectors.csv"), exact_files):
            mine, _ = read_table(tmp_path / "run" / name)
            theirs, rows = read_table(f)
            assert theirs == mine and len(rows) > 0
    else:
        assert stored["exact"] is None
        assert not any(f.exists() for f in exact_files)


# ----------------------------------------------------------------------------- interacting chain
@pytest.mark.slow
def test_xxz_luttinger_and_central_charge_from_solver():
    # xxz, Delta = 0.5, 128 sites, S^z = 0: fitted K within 5 % of the Bethe-ansatz 3/4 (Luther and
    # Peschel 1975) and fitted c within 5 % of 1 (Calabrese and Cardy 2004). About 3-4 minutes.
    cfg = parse_config(config("xxz", 128, {"J": 1.0, "Delta": 0.5}, {"Sz": 0},
                              [(32, 4, 1e-5), (96, 6, 0.0)], discard=1e-10, energy_tol=1e-9))
    settings = runner.sweep_settings(cfg)
    _, search = solve("xxz", 128, cfg.model.couplings, cfg.model.charge, settings)
    rep = compare_run(cfg, search.state)
    assert rep["luttinger"]["bethe_ansatz"] == pytest.approx(0.75, rel=1e-14)
    assert rep["luttinger"]["value"] == pytest.approx(0.75, rel=0.05)
    assert rep["central_charge"]["value"] == pytest.approx(1.0, rel=0.05)
    assert rep["regime"]["verdict"] == "critical"
