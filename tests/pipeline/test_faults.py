"""Runs under faults: a full disk, non-finite numbers, an energy that rises, a stop before the
first checkpoint. Each ends with one line and a usable run directory (DESIGN.md section 7)."""

from __future__ import annotations

import errno
import math
import os
import stat

import numpy as np
import pytest
import yaml

from mps.pipeline import cli, runner
from mps.pipeline.checkpoint import load_checkpoint
from mps.pipeline.errors import StorageError
from mps.pipeline.rundir import read_table, write_text
from mps.solver import sweep
from mps.solver.krylov import EigenResult
from mps.solver.sweep import NumericalError, SectorSweeper, rise_allowance

CONFIG = {
    "name": "faulty-ring-free-12",
    "model": {"family": "xxz", "sites": 12, "couplings": {"J": 1.0, "Delta": 0.7}, "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 24, "sweeps": 6}], "discard": 1e-12,
               "energy_tol": 1e-11, "seed": 3},
    "output": {"plots": False},
}


def _config(tmp_path):
    path = tmp_path / "chain.yaml"
    path.write_text(yaml.safe_dump(CONFIG))
    return path


def _one_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert "Traceback" not in "\n".join(err)
    return err[-1]


def test_a_failed_table_write_keeps_the_previous_file_and_leaves_no_temporary(tmp_path, monkeypatch):
    path = tmp_path / "entropies.csv"
    write_text(path, "cut,S_1\n1,0.5\n")

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(StorageError, match=r"cannot write .*entropies.csv \(No space left on device\)"):
        write_text(path, "cut,S_1\n1,0.6\n")
    assert path.read_text() == "cut,S_1\n1,0.5\n"
    assert [p.name for p in tmp_path.iterdir()] == ["entropies.csv"]


@pytest.mark.parametrize("failing_write", [3, 6])   # a checkpoint write, then a table write
def test_disk_full_during_a_run_stops_with_one_line_and_resumes_once_space_is_back(
        tmp_path, monkeypatch, capsys, failing_write):
    # every file of a run is fsync'ed before its rename: from the n-th file on, that fails as on
    # a full disk (a directory's fsync still works: it needs no new blocks)
    real, calls = os.fsync, []

    def fsync(fd):
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            return real(fd)
        calls.append(fd)
        if len(calls) >= failing_write:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(fd)

    out = tmp_path / "run"
    monkeypatch.setattr(os, "fsync", fsync)
    assert cli.main(["run", str(_config(tmp_path)), "--out", str(out)]) == 1
    line = _one_line(capsys)
    assert "No space left on device" in line and "kept" in line
    _, progress, _, _ = load_checkpoint(out / "state.h5")      # the last good checkpoint verifies
    assert 1 <= progress.sweep < 8
    assert not [p for p in out.iterdir() if ".tmp-" in p.name]
    monkeypatch.setattr(os, "fsync", real)                       # space is back
    assert cli.main(["resume", str(out)]) == 0
    assert load_checkpoint(out / "state.h5")[1].converged


def test_a_non_finite_eigenvalue_stops_the_run_and_keeps_the_last_checkpoint(tmp_path, monkeypatch, capsys):
    real, calls = sweep.lowest_eigenpair, []

    def poisoned(*args, **kwargs):
        calls.append(1)
        res = real(*args, **kwargs)
        return EigenResult(math.nan, res.vector, res.residual, res.applications) if len(calls) == 40 else res

    monkeypatch.setattr(sweep, "lowest_eigenpair", poisoned)
    out = tmp_path / "run"
    assert cli.main(["run", str(_config(tmp_path)), "--out", str(out)]) == 1
    line = _one_line(capsys)
    # 22 bond steps per sweep on 12 sites: the 40th solve is step 18 of sweep 2
    assert "non-finite" in line and "bond step 18 of sweep 2" in line and "checkpoint of sweep 1" in line
    state, progress, _, _ = load_checkpoint(out / "state.h5")
    assert progress.sweep == 1 and all(np.isfinite(t.data).all() for t in state.tensors)


def test_non_finite_schmidt_values_raise(monkeypatch):
    search = SectorSweeper.__new__(SectorSweeper)
    with pytest.raises(NumericalError, match="norm nan"):
        search._record(3, [(0,)], [np.array([np.nan, 0.1])])
    with pytest.raises(NumericalError, match="norm 0.0"):
        search._record(3, [(0,)], [np.zeros(2)])


def test_rise_allowance_follows_the_truncation():
    # common practice: energy errors of a truncated sweep are of order (discarded weight) x (energy scale)
    assert rise_allowance(-5.0, 0.0, 12, 1e-11) == pytest.approx(1e-11 + 5e-12)
    assert rise_allowance(-5.0, 1e-8, 12, 1e-11) == pytest.approx(1e-11 + 1.2e-6 + 5e-12)
    assert rise_allowance(-500.0, 1e-8, 12, 0.0) == pytest.approx(5e-5 + 5e-10)


def test_an_energy_that_rises_is_a_warning_in_sweeps_csv(tmp_path, monkeypatch, capsys):
    real = SectorSweeper._sweep

    def rising(self, stage, on_bond, should_stop):
        energy, worst, seconds = real(self, stage, on_bond, should_stop)
        return (energy + 1e-3 if self.progress.sweep == 2 else energy), worst, seconds

    monkeypatch.setattr(SectorSweeper, "_sweep", rising)
    out = tmp_path / "run"
    assert cli.main(["run", str(_config(tmp_path)), "--out", str(out)]) == 0
    header, rows = read_table(out / "sweeps.csv")
    warnings = {int(r[0]): r[header.index("warning")] for r in rows}
    assert warnings[3].startswith("the energy rose by") and "in sweep 3" in warnings[3]
    assert not any(w for k, w in warnings.items() if k != 3)
    assert "warning: the energy rose by" in capsys.readouterr().err


def test_resume_before_the_first_checkpoint_starts_again(tmp_path, capsys):
    out = tmp_path / "run"
    out.mkdir()
    reference = tmp_path / "whole"
    assert runner.run(str(_config(tmp_path)), str(reference)) == 0
    (out / "config.yaml").write_text((reference / "config.yaml").read_text().replace(str(reference), str(out)))
    assert cli.main(["resume", str(out)]) == 0
    assert "no checkpoint yet, starting the run from the beginning" in capsys.readouterr().err
    e = [load_checkpoint(d / "state.h5")[1].energy for d in (reference, out)]
    assert e[0] == e[1]
