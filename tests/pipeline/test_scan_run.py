"""``chargewise scan``: points on a local process pool and on a real Dask cluster, failure isolation,
interrupted and killed scans picked up again, bad axes refused before any point runs.

The reference for a scan point is the same config run on its own (``chargewise run``): a scan must
not change what a point computes. Chains are small xxz chains (exact answers are checked elsewhere;
here the tables of the two ways of running must agree)."""

from __future__ import annotations

import copy
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import yaml

from mps.pipeline.cli import main
from mps.pipeline.rundir import read_table
from mps.pipeline.runner import run
from mps.pipeline.scan_run import scan

BASE = {
    "name": "study",
    "model": {"family": "xxz", "sites": 10, "couplings": {"J": 1.0, "Delta": 0.5}, "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 16, "sweeps": 6}], "seed": 3},
    "analysis": {"renyi": [1, 2]},
    "output": {"plots": False},
}
TABLES = ("entropies.csv", "sectors.csv", "moments.csv")


def write_scan(tmp_path: Path, scan_section: dict, name="scan.yaml", **changes) -> Path:
    data = copy.deepcopy(BASE)
    data["output"]["dir"] = str(tmp_path / "out")
    for key, value in changes.items():
        data[key] = value
    data["scan"] = scan_section
    path = tmp_path / name
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def scan_table(directory: Path) -> dict[str, dict[str, str]]:
    header, rows = read_table(directory / "scan.csv")
    return {row[0]: dict(zip(header, row)) for row in rows}


def numeric_table(path: Path) -> np.ndarray:
    header, rows = read_table(path)
    return np.array([[float(c) if c else np.nan for c in row] for row in rows])


def assert_same_tables(a: Path, b: Path) -> None:
    """Two run directories of one chain: energies to 1e-10, every table cell to 1e-8 (both runs
    converge to energy_tol 1e-9; they differ only by rounding in different BLAS thread counts)."""
    ea, eb = (json.loads((d / "summary.json").read_text())["energy"] for d in (a, b))
    assert abs(ea - eb) < 1e-10
    for name in TABLES:
        ta, tb = numeric_table(a / name), numeric_table(b / name)
        assert ta.shape == tb.shape
        np.testing.assert_allclose(ta, tb, atol=1e-8, rtol=0, equal_nan=True)


GRID = {"grid": {"model.couplings.Delta": [0.3, 0.9], "model.sites": [8, 10]}, "warm_start": False}


def test_two_worker_local_scan_equals_separate_runs(tmp_path):
    config = write_scan(tmp_path, GRID)
    assert scan(str(config), workers=2) == 0
    out = tmp_path / "out"
    rows = scan_table(out)
    assert len(rows) == 4 and {r["status"] for r in rows.values()} == {"done"}
    assert list(rows["Delta=0.3,sites=8"])[:3] == ["point", "model.couplings.Delta", "model.sites"]
    for name, row in rows.items():
        point = yaml.safe_load((out / name / "config.yaml").read_text())
        point["output"]["dir"] = str(tmp_path / "alone" / name)
        alone = tmp_path / f"{name}.yaml"
        alone.write_text(yaml.safe_dump(point))
        assert run(str(alone)) == 0
        assert_same_tables(out / name, tmp_path / "alone" / name)
        assert float(row["energy"]) == json.loads((out / name / "summary.json").read_text())["energy"]
        assert float(row["model.couplings.Delta"]) == point["model"]["couplings"]["Delta"]


def test_dask_cluster_gives_the_same_results(tmp_path):
    distributed = pytest.importorskip("distributed")   # in the project's test extra; CI installs it
    config = write_scan(tmp_path, GRID)
    local = write_scan(tmp_path, GRID, name="local.yaml", output={"dir": str(tmp_path / "local"), "plots": False})
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        assert scan(str(config), scheduler=cluster.scheduler_address) == 0
    assert scan(str(local), workers=2) == 0
    rows = scan_table(tmp_path / "out")
    assert len(rows) == 4 and {r["status"] for r in rows.values()} == {"done"}
    for name in rows:
        assert_same_tables(tmp_path / "out" / name, tmp_path / "local" / name)


SKEWED = {  # a chain written in the config whose skew term is not Hermitian unless skew = 0
    "family": "written", "basis": "spin-half", "sites": 8, "couplings": {"J": 1.0, "skew": 0.0},
    "charge": {"Sz": 0},
    "terms": [{"product": "S^+(j) S^-(j+1)", "coef": "0.5*J", "add_conjugate": True},
              {"product": "S^z(j) S^z(j+1)", "coef": "J"},
              {"product": "S^+(j) S^-(j+1)", "coef": "skew"}],
}


def test_invalid_point_is_isolated_and_retried(tmp_path, capsys):
    config = write_scan(tmp_path, {"grid": {"model.couplings.skew": [0.0, 0.5],
                                            "model.couplings.J": [1.0, 2.0]}}, model=SKEWED)
    assert main(["scan", str(config), "--workers", "2"]) == 1
    rows = scan_table(tmp_path / "out")
    assert {n: r["status"] for n, r in rows.items()} == {
        "skew=0,J=1": "done", "skew=0,J=2": "done", "skew=0.5,J=1": "failed", "skew=0.5,J=2": "failed"}
    assert "not Hermitian" in rows["skew=0.5,J=1"]["error"] and "\n" not in rows["skew=0.5,J=1"]["error"]
    assert rows["skew=0,J=2"]["energy"] and not rows["skew=0.5,J=2"]["energy"]
    err = capsys.readouterr().err
    assert "point skew=0.5,J=1: failed: model.terms[2]" in err and "2 failed" in err
    done = {n: (tmp_path / "out" / n / "summary.json").stat().st_mtime_ns for n in ("skew=0,J=1", "skew=0,J=2")}
    assert main(["scan", str(config), "--workers", "2"]) == 1          # again: finished points are skipped
    assert {n: (tmp_path / "out" / n / "summary.json").stat().st_mtime_ns for n in done} == done
    assert "2 already done" in capsys.readouterr().err


@pytest.mark.parametrize("scan_section, key", [
    ({"grid": {"model.couplings.Dleta": [0.5, 1.0]}}, "scan.grid.model.couplings.Dleta"),
    ({"grid": {"model.couplings.Delta": []}}, "scan.grid.model.couplings.Delta"),
    ({"paired": {"model.couplings.Delta": [0.5, 1.0], "model.sites": [8]}}, "scan.paired.model.sites"),
])
def test_bad_axis_exits_2_before_any_point(tmp_path, capsys, scan_section, key):
    config = write_scan(tmp_path, scan_section)
    assert main(["scan", str(config)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and err.startswith(f"chargewise: {key}:")
    assert not (tmp_path / "out").exists()


def test_run_and_check_know_a_scan_config(tmp_path, capsys):
    config = write_scan(tmp_path, GRID)
    assert main(["run", str(config)]) == 2
    assert "chargewise scan" in capsys.readouterr().err
    assert main(["check", str(config)]) == 0
    out = capsys.readouterr().out
    assert "4 points" in out and "Delta=0.9,sites=10" in out


def _start(config: Path, workers: int) -> subprocess.Popen:
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "mps", "scan", str(config), "--workers", str(workers)],
                            stderr=subprocess.PIPE, text=True, env=env, start_new_session=True)


def _wait_for(predicate, proc, seconds=120.0):
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if predicate():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.05)
    return False


LONG = {"grid": {"model.couplings.Delta": [0.2, 0.4, 0.6, 0.8]}, "warm_start": False}
LONG_SOLVER = {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 24, "sweeps": 6}], "seed": 3, "energy_tol": 1e-12}


def _statuses(out: Path) -> dict[str, str]:
    try:
        return {n: r["status"] for n, r in scan_table(out).items()}
    except (OSError, IndexError):
        return {}


def _long_scan(tmp_path: Path, workers: int) -> tuple[Path, Path, subprocess.Popen]:
    """A scan of four 24-site points long enough to be caught mid-way, started in its own process group."""
    config = write_scan(tmp_path, LONG, model=dict(BASE["model"], sites=24), solver=LONG_SOLVER)
    return config, tmp_path / "out", _start(config, workers)


@pytest.mark.slow
def test_killed_scan_is_completed_without_redoing_points(tmp_path):
    config, out, proc = _long_scan(tmp_path, workers=1)
    # kill the driver and its workers (one process group) once a point is done and the next has a checkpoint
    started = _wait_for(lambda: "done" in _statuses(out).values()
                        and any((out / n / "state.h5").exists() and not (out / n / "summary.json").exists()
                                for n in ("Delta=0.4", "Delta=0.6")), proc)
    assert started, proc.stderr.read() if proc.poll() is not None else "no point finished in time"
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    finished = {n: (out / n / "summary.json").stat().st_mtime_ns
                for n, s in _statuses(out).items() if s == "done"}
    assert finished
    assert main(["scan", str(config), "--workers", "1"]) == 0
    rows = scan_table(out)
    assert {r["status"] for r in rows.values()} == {"done"}
    assert {n: (out / n / "summary.json").stat().st_mtime_ns for n in finished} == finished
    resumed = [n for n in rows if "resuming after sweep" in (out / n / "run.log").read_text()]
    assert resumed, "the interrupted point should continue from its checkpoint"


@pytest.mark.slow
def test_ctrl_c_stops_all_points_after_a_checkpoint(tmp_path):
    config, out, proc = _long_scan(tmp_path, workers=2)
    assert _wait_for(lambda: sum((out / n / "state.h5").exists() for n in ("Delta=0.2", "Delta=0.4")) == 2, proc)
    os.killpg(proc.pid, signal.SIGINT)          # what a terminal sends to the whole foreground group
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err
    assert "stopping: every running point checkpoints" in err and "continue with: chargewise scan" in err
    statuses = _statuses(out)
    assert "stopped" in statuses.values() and "running" not in statuses.values()
    assert main(["scan", str(config), "--workers", "2"]) == 0
    assert set(_statuses(out).values()) == {"done"}


@pytest.mark.slow
def test_sigterm_to_the_driver_stops_every_point_resumably(tmp_path):
    # a batch scheduler may signal the driver alone: the stop file carries the request to the workers
    config, out, proc = _long_scan(tmp_path, workers=2)
    assert _wait_for(lambda: sum((out / n / "state.h5").exists() for n in ("Delta=0.2", "Delta=0.4")) == 2, proc)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err
    assert "SIGTERM: stopping: every running point checkpoints" in err and "Traceback" not in err
    statuses = _statuses(out)
    assert "stopped" in statuses.values() and "running" not in statuses.values()
    assert main(["scan", str(config), "--workers", "2"]) == 0
    assert set(_statuses(out).values()) == {"done"}
