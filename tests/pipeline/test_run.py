"""End-to-end: ``chargewise run`` / ``resume`` on small chains, checkpoints and refusals.

Reference for the energies: exact diagonalisation with scipy.sparse (tests/reference_ed.py).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import pytest
import yaml

from mps.pipeline import runner
from mps.pipeline.checkpoint import CheckpointError, load_checkpoint
from mps.pipeline.errors import InputError
from mps.solver.sweep import SectorSweeper

import reference_ed as ed

CONFIG = {
    "name": "dimerised-staggered-12",
    "model": {"family": "xxz", "sites": 12, "couplings": {"J": 1.0, "Delta": 0.8, "h_stag": 0.2,
                                                          "dimer": 0.1},
              "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 24, "sweeps": 2}, {"bond": 64, "sweeps": 6}],
               "discard": 1e-14, "energy_tol": 1e-12, "seed": 7},
    "analysis": {"renyi": [1, 2, "inf"]},
}


def write_config(tmp_path: Path, **changes) -> Path:
    cfg = json.loads(json.dumps(CONFIG))
    for key, value in changes.items():
        cfg[key] = value
    path = tmp_path / "chain.yaml"
    path.write_text(yaml.safe_dump(cfg))
    return path


def cli(*args, **kw):
    return subprocess.run([sys.executable, "-m", "mps", *map(str, args)], capture_output=True,
                          text=True, **kw)


def exact_energy() -> float:
    # Source: exact diagonalisation with scipy.sparse in the sector S^z = 0.
    c = CONFIG["model"]["couplings"]
    h, _ = ed.xxz_sector(12, 6, J=c["J"], Delta=c["Delta"], h_stag=c["h_stag"], dimer=c["dimer"])
    return ed.ground_state(h)[0]


def summary(directory: Path) -> dict:
    return json.loads((directory / "summary.json").read_text())


def test_run_writes_the_run_directory_and_matches_exact_diagonalisation(tmp_path):
    out = tmp_path / "run"
    res = cli("run", write_config(tmp_path), "--out", out)
    assert res.returncode == 0, res.stderr
    for name in ("config.yaml", "state.h5", "sweeps.csv", "summary.json"):
        assert (out / name).is_file()
    s = summary(out)
    for key in ("energy", "energy_per_site", "variance", "converged", "sweeps", "max_bond",
                "truncation", "seconds", "version"):
        assert key in s
    assert s["energy"] == pytest.approx(exact_energy(), abs=1e-9)
    assert s["converged"] is True
    header = (out / "sweeps.csv").read_text().splitlines()[0]
    assert header == "sweep,stage,bond,energy,delta_energy,truncation,max_entropy,seconds,warning"
    again = cli("run", write_config(tmp_path), "--out", out)
    assert again.returncode == 2 and "resume" in again.stderr and "Traceback" not in again.stderr


def test_interrupted_run_resumes_to_the_same_energy(tmp_path, monkeypatch):
    cfg = write_config(tmp_path)
    assert runner.run(str(cfg), str(tmp_path / "whole")) == 0
    original = SectorSweeper.run

    def interrupted(self, on_bond=None, should_stop=None):
        for k, rec in enumerate(original(self, on_bond, should_stop)):
            yield rec
            if k == 2:
                raise KeyboardInterrupt

    monkeypatch.setattr(SectorSweeper, "run", interrupted)
    assert runner.run(str(cfg), str(tmp_path / "cut")) == 3   # stopped, resumable
    _, progress, _, _ = load_checkpoint(tmp_path / "cut" / "state.h5")
    assert progress.sweep == 3
    monkeypatch.setattr(SectorSweeper, "run", original)
    assert runner.resume(str(tmp_path / "cut")) == 0
    a, b = summary(tmp_path / "whole"), summary(tmp_path / "cut")
    assert b["energy"] == pytest.approx(a["energy"], abs=1e-10)
    assert b["sweeps"] == a["sweeps"]


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_ctrl_c_or_sigterm_keeps_last_checkpoint_and_says_how_to_resume(tmp_path, sig):
    # SIGTERM is what batch schedulers send at the wall-time limit: handled like the first Ctrl-C
    cfg = dict(CONFIG)
    cfg["model"] = dict(CONFIG["model"], sites=24)
    cfg["solver"] = dict(CONFIG["solver"], stages=[{"bond": 16, "sweeps": 2}, {"bond": 48, "sweeps": 30}],
                         energy_tol=1e-15)
    path = tmp_path / "long.yaml"
    path.write_text(yaml.safe_dump(cfg))
    out = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-m", "mps", "run", str(path), "--out", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 120
    while time.time() < deadline and not (out / "sweeps.csv").exists():
        time.sleep(0.2)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err
    assert "saved a checkpoint after bond step" in err and "chargewise resume" in err
    assert "Traceback" not in err
    state, progress, _, _ = load_checkpoint(out / "state.h5")
    assert progress.sweep >= 1 and progress.step > 0 and state.sites == 24
    assert not (out / ".lock").exists()
    res = cli("resume", out, timeout=600)
    assert res.returncode == 0, res.stderr


def test_a_sweep_stopped_half_way_resumes_exactly(tmp_path):
    # A search stopped after any bond step, checkpointed, reloaded and continued reproduces the
    # uninterrupted search (same random numbers, same environments).
    import numpy as np

    from mps.pipeline.checkpoint import save_checkpoint
    from mps.solver.sweep import Stage, SweepSettings, SweepStopped

    from chains import solve

    settings = SweepSettings((Stage(8, 2, 1e-4), Stage(32, 4, 0.0)), discard=1e-14, energy_tol=1e-13)
    couplings = CONFIG["model"]["couplings"]
    _, whole = solve("xxz", 12, couplings, {"Sz": 0}, settings, seed=11)
    mpo, _ = solve("xxz", 12, couplings, {"Sz": 0}, SweepSettings((Stage(2, 1),)), seed=11)
    from mps.chain.state import random_state
    rng = np.random.default_rng(11)
    search = SectorSweeper(mpo, random_state(mpo.phys, 12, (0,), 16, rng), settings, rng)
    calls = iter(range(10**6))
    with pytest.raises(SweepStopped):
        for _ in search.run(should_stop=lambda: next(calls) == 30):
            pass
    assert search.progress.step == 10 and search.progress.sweep == 1   # 21 checks per 22-step sweep
    save_checkpoint(tmp_path / "s.h5", search.state, search.progress, rng.bit_generator.state, "m", "s")
    state, progress, rng_state, _ = load_checkpoint(tmp_path / "s.h5")
    rng2 = np.random.default_rng()
    rng2.bit_generator.state = rng_state
    again = SectorSweeper(mpo, state, settings, rng2, progress)
    for _ in again.run():
        pass
    assert again.progress.sweep == whole.progress.sweep
    assert again.progress.energy == pytest.approx(whole.progress.energy, abs=1e-12)


def test_resume_refuses_a_changed_model(tmp_path):
    out = tmp_path / "run"
    assert cli("run", write_config(tmp_path), "--out", out).returncode == 0
    cfg = yaml.safe_load((out / "config.yaml").read_text())
    cfg["model"]["couplings"]["Delta"] = 0.5
    (out / "config.yaml").write_text(yaml.safe_dump(cfg))
    before = (out / "state.h5").read_bytes()
    res = cli("resume", out)
    assert res.returncode == 2
    assert "model" in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert (out / "state.h5").read_bytes() == before


def test_resume_with_an_extended_solver_section_continues(tmp_path):
    out = tmp_path / "run"
    short = dict(CONFIG["solver"], stages=[{"bond": 8, "sweeps": 2}])
    assert cli("run", write_config(tmp_path, solver=short), "--out", out).returncode == 0
    coarse = summary(out)["energy"]
    cfg = yaml.safe_load((out / "config.yaml").read_text())
    cfg["solver"]["stages"].append({"bond": 64, "sweeps": 6, "admix": 0.0})
    (out / "config.yaml").write_text(yaml.safe_dump(cfg))
    res = cli("resume", out)
    assert res.returncode == 0, res.stderr
    fine = summary(out)["energy"]
    assert fine < coarse
    assert fine == pytest.approx(exact_energy(), abs=1e-9)


def test_corrupted_and_foreign_checkpoints_are_refused(tmp_path):
    out = tmp_path / "run"
    assert cli("run", write_config(tmp_path), "--out", out).returncode == 0
    with h5py.File(out / "state.h5", "r+") as f:
        f["sites/3/data"][0] += 1e-3
    with pytest.raises(CheckpointError, match="corrupted"):
        load_checkpoint(out / "state.h5")
    res = cli("resume", out)
    assert res.returncode == 2 and "corrupted" in res.stderr
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["x"] = [1, 2, 3]
    with pytest.raises(CheckpointError, match="not a chargewise checkpoint"):
        load_checkpoint(foreign)
    (tmp_path / "junk.h5").write_bytes(b"not hdf5 at all")
    with pytest.raises(CheckpointError):
        load_checkpoint(tmp_path / "junk.h5")


def test_a_live_lock_refuses_a_second_writer(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / ".lock").write_text(str(os.getppid()))
    with pytest.raises(InputError, match="another chargewise process"):
        runner.run(str(write_config(tmp_path)), str(out))
    (out / ".lock").write_text("999999999")  # a dead process: stale lock is taken over
    assert runner.run(str(write_config(tmp_path)), str(out)) == 0


def test_non_hermitian_or_non_conserving_chains_never_start(tmp_path):
    res = cli("run", write_config(tmp_path, model={**CONFIG["model"], "charge": {"Sz": 0.5}}),
              "--out", tmp_path / "x")
    assert res.returncode == 2 and "model.charge" in res.stderr
    assert not (tmp_path / "x" / "state.h5").exists()


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("finished")
    out = tmp / "run"
    res = cli("run", write_config(tmp), "--out", out)
    assert res.returncode == 0, res.stderr
    return out


def test_run_writes_tables_comparison_and_plots(finished_run):
    for name in ("entropies.csv", "sectors.csv", "moments.csv", "spectrum.csv", "comparison.json"):
        assert (finished_run / name).is_file(), name
    plots = sorted(p.name for p in (finished_run / "plots").glob("*.png"))
    assert "entropy_profile.png" in plots and "charge_distribution.png" in plots


def test_analyze_recomputes_requested_renyi_indices_and_cuts(finished_run):
    res = cli("analyze", finished_run, "--renyi", "1,0.5,inf", "--cuts", "3,6")
    assert res.returncode == 0, res.stderr
    rows = (finished_run / "entropies.csv").read_text().splitlines()
    assert rows[0].startswith("cut,S_1,S_0.5,S_inf,charge_mean")
    assert [r.split(",")[0] for r in rows[1:]] == ["3", "6"]
    bad = cli("analyze", finished_run, "--cuts", "40")
    assert bad.returncode == 2 and "Traceback" not in bad.stderr


def test_compare_redoes_fits_and_plots(finished_run):
    (finished_run / "comparison.json").unlink()
    res = cli("compare", finished_run)
    assert res.returncode == 0, res.stderr
    report = json.loads((finished_run / "comparison.json").read_text())
    assert "central_charge" in report and "luttinger" in report


@pytest.mark.parametrize("path", sorted((Path(__file__).parents[2] / "configs").glob("*.yaml")),
                         ids=lambda p: p.stem)
def test_every_shipped_config_validates(path):
    res = cli("check", path)
    assert res.returncode == 0, res.stderr


def test_fermion_chain_from_a_product_state_matches_exact_diagonalisation(tmp_path):
    # Source: exact diagonalisation with scipy.sparse (t-V chain, N = 4 of 10 sites).
    couplings = {"t": 1.0, "V": 0.8, "mu": 0.1, "mu_stag": 0.2, "dimer": 0.1}
    cfg = {"name": "tv", "model": {"family": "fermions", "sites": 10, "couplings": couplings,
                                   "charge": {"N": 4}},
           "solver": {"stages": [{"bond": 8, "sweeps": 2, "admix": 1e-4}, {"bond": 40, "sweeps": 6}],
                      "discard": 1e-14, "energy_tol": 1e-12, "init": "product"},
           "analysis": {"renyi": [1, 2]}, "output": {"plots": False}}
    path = tmp_path / "tv.yaml"
    path.write_text(yaml.safe_dump(cfg))
    out = tmp_path / "run"
    res = cli("run", path, "--out", out)
    assert res.returncode == 0, res.stderr
    h, _ = ed.fermion_sector(10, 4, **couplings)
    assert summary(out)["energy"] == pytest.approx(ed.ground_state(h)[0], abs=1e-9)
    assert not (out / "plots").exists()
    charges = {row.split(",")[1] for row in (out / "sectors.csv").read_text().splitlines()[1:]}
    assert charges <= {"0", "1", "2", "3", "4"}
