"""Command line: verbs, dispatch to the runner, exit codes and the one-line error contract."""

from __future__ import annotations

import math
import os
import subprocess
import sys
import types
from pathlib import Path

import pytest
import yaml

from mps.pipeline import cli
from mps.pipeline.config import load_config, parse_config
from mps.pipeline.errors import ConfigError, InputError, RunFailure

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "configs" / "demo-staggered-chain.yaml"
VERBS = ("run", "resume", "analyze", "compare", "scan", "check", "bench")


def run_module(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "mps", *args],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=60,
        env={**os.environ, **(env or {})},
    )


# ----------------------------------------------------------------------------- subprocess


def test_check_demo_prints_resolved_yaml():
    proc = run_module("check", str(DEMO))
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    printed = yaml.safe_load(proc.stdout)
    assert parse_config(printed) == load_config(DEMO)
    assert printed["solver"]["lanczos_vectors"] == 24  # a default, filled in


def test_bad_config_exits_2_with_one_line(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("model: {family: xxz, sites: 33, charge: {Sz: 0}}\n", encoding="utf-8")
    proc = run_module("check", str(bad))
    assert proc.returncode == 2
    assert proc.stdout == ""
    lines = proc.stderr.splitlines()
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("chargewise: model.charge.Sz: must be one of -16.5")
    assert "Traceback" not in proc.stderr


def test_missing_config_file_exits_2(tmp_path):
    proc = run_module("check", str(tmp_path / "absent.yaml"))
    assert proc.returncode == 2
    assert proc.stderr.splitlines() == [f"chargewise: {tmp_path / 'absent.yaml'}: no such config file"]


def test_help_lists_every_verb():
    proc = run_module("--help")
    assert proc.returncode == 0
    for verb in VERBS:
        assert f"    {verb} " in proc.stdout, verb


# ----------------------------------------------------------------------------- in process


def test_usage_errors_exit_2(capsys):
    assert cli.main([]) == 2
    assert cli.main(["frobnicate"]) == 2
    assert cli.main(["check"]) == 2
    assert cli.main(["analyze", "d", "--renyi", "0"]) == 2
    assert cli.main(["analyze", "d", "--cuts", "a,b"]) == 2
    assert cli.main(["scan", "c.yaml", "--workers", "0"]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_version_and_verb_help(capsys):
    assert cli.main(["--version"]) == 0
    assert cli.main(["analyze", "--help"]) == 0
    out = capsys.readouterr().out
    assert "--renyi" in out and "--cuts" in out


@pytest.fixture
def fake_runner(monkeypatch):
    """An ``mps.pipeline.runner`` module that records its calls."""
    calls = []
    mod = types.ModuleType("mps.pipeline.runner")

    def recorder(name, result=None):
        def f(*args, **kwargs):
            calls.append((name, args, kwargs))
            return result
        return f

    for name in ("run", "resume", "analyze", "compare", "scan"):
        setattr(mod, name, recorder(name))
    mod.bench = recorder("bench", 0)
    monkeypatch.setitem(sys.modules, "mps.pipeline.runner", mod)
    return mod, calls


def test_dispatch_passes_arguments(fake_runner):
    _, calls = fake_runner
    assert cli.main(["run", "c.yaml"]) == 0
    assert cli.main(["run", "c.yaml", "--out", "elsewhere"]) == 0
    assert cli.main(["resume", "runs/x"]) == 0
    assert cli.main(["analyze", "runs/x", "--renyi", "1,2,inf", "--cuts", "1,5,9"]) == 0
    assert cli.main(["analyze", "runs/x"]) == 0
    assert cli.main(["compare", "runs/x"]) == 0
    assert cli.main(["scan", "grid.yaml", "--workers", "4", "--scheduler", "tcp://h:8786"]) == 0
    assert cli.main(["scan", "grid.yaml"]) == 0
    assert cli.main(["bench", "--quick"]) == 0
    assert cli.main(["bench"]) == 0
    assert calls == [
        ("run", ("c.yaml",), {"out": None}),
        ("run", ("c.yaml",), {"out": "elsewhere"}),
        ("resume", ("runs/x",), {}),
        ("analyze", ("runs/x",), {"renyi": [1.0, 2.0, math.inf], "cuts": [1, 5, 9]}),
        ("analyze", ("runs/x",), {"renyi": None, "cuts": None}),
        ("compare", ("runs/x",), {}),
        ("scan", ("grid.yaml", 4, "tcp://h:8786"), {}),
        ("scan", ("grid.yaml", None, None), {}),
        ("bench", (True,), {}),
        ("bench", (False,), {}),
    ]


def test_runner_exit_code_is_passed_on(fake_runner):
    mod, _ = fake_runner
    mod.compare = lambda directory: 3
    assert cli.main(["compare", "d"]) == 3


def test_verb_missing_from_runner(fake_runner, capsys):
    mod, _ = fake_runner
    del mod.bench
    assert cli.main(["bench"]) == 1
    assert capsys.readouterr().err == "chargewise: 'bench' is not available in this version\n"


def test_runner_module_missing(monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "mps.pipeline.runner", None)  # import raises ModuleNotFoundError
    assert cli.main(["resume", "d"]) == 1
    assert capsys.readouterr().err == "chargewise: 'resume' is not available in this version\n"


@pytest.mark.parametrize(
    "error, code, text",
    [
        (ConfigError("solver.seed", "must be an integer >= 0, got -1"), 2, "chargewise: solver.seed: must be"),
        (
            InputError("runs/x: not a run directory\n(no state.h5)"),
            2,
            "chargewise: runs/x: not a run directory (no state.h5)",
        ),
        (KeyboardInterrupt(), 3, "chargewise: interrupted"),   # stopped, resumable
        (
            RunFailure("runs/x/state.h5: cannot write (No space left on device)"),
            1,
            "chargewise: runs/x/state.h5: cannot write (No space left on device)",
        ),
        (
            RuntimeError("sweep diverged\nsecond line"),
            1,
            "chargewise: internal error (RuntimeError: sweep diverged)",
        ),
    ],
)
def test_errors_become_one_line_and_exit_code(fake_runner, capsys, monkeypatch, error, code, text):
    monkeypatch.delenv("CHARGEWISE_DEBUG", raising=False)
    mod, _ = fake_runner

    def boom(*args, **kwargs):
        raise error

    mod.resume = boom
    assert cli.main(["resume", "runs/x"]) == code
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and err.startswith(text), err
    assert "Traceback" not in err


def test_debug_env_shows_traceback(fake_runner, capsys, monkeypatch):
    monkeypatch.setenv("CHARGEWISE_DEBUG", "1")
    mod, _ = fake_runner

    def boom(*args, **kwargs):
        raise ValueError("bad shape")

    mod.analyze = boom
    assert cli.main(["analyze", "runs/x"]) == 1
    err = capsys.readouterr().err
    assert err.splitlines()[0] == "chargewise: internal error (ValueError: bad shape)"
    assert "Traceback" in err


def test_broken_runner_import_is_an_internal_failure(monkeypatch, capsys):
    # a runner that exists but needs a missing module must not be reported as "not available"
    real = cli.importlib.import_module

    def fake_import(name, *args, **kwargs):
        if name == "mps.pipeline.runner":
            raise ModuleNotFoundError("No module named 'not_installed'", name="not_installed")
        return real(name, *args, **kwargs)

    monkeypatch.setattr(cli.importlib, "import_module", fake_import)
    assert cli.main(["compare", "d"]) == 1
    assert "internal error (ModuleNotFoundError" in capsys.readouterr().err


def test_check_in_process(capsys):
    assert cli.main(["check", str(DEMO)]) == 0
    assert yaml.safe_load(capsys.readouterr().out)["name"] == "demo-staggered-chain"
