"""The tree keeps its shape: imports point down the layers (import-linter contracts in
pyproject.toml), the lint rules hold (ruff), and no module grows much beyond one sitting."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
LINT_IMPORTS = ("import sys; from importlinter.cli import lint_imports; "
                "sys.exit(lint_imports(no_cache=True, no_logo=True))")


def _lint_imports(root: Path) -> subprocess.CompletedProcess:
    """import-linter on the packages under ``root`` (its own directory first on sys.path)."""
    return subprocess.run([sys.executable, "-c", LINT_IMPORTS], cwd=root, capture_output=True, text=True,
                          timeout=300)


def test_imports_point_down_the_layers():
    res = _lint_imports(REPO)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "0 broken" in res.stdout


@pytest.mark.parametrize("module, bad_import", [
    ("mps/blocks/charges.py", "import mps.pipeline.schema"),      # lowest layer reaching the top
    ("mps/solver/krylov.py", "from mps.analysis import resolved"),  # solver reaching analysis
    ("mps/blocks/charges.py", "import mps.blocks.tensor"),         # inside the block-sparse layer
    ("mps/theory/fieldtheory.py", "import models"),                # theory reaching the models
])
def test_an_upward_import_breaks_a_contract(tmp_path, module, bad_import):
    for name in ("mps", "models"):
        shutil.copytree(REPO / name, tmp_path / name, ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(REPO / "pyproject.toml", tmp_path)
    target = tmp_path / module
    target.write_text(target.read_text() + f"\n{bad_import}  # scratch: must be refused\n")
    res = _lint_imports(tmp_path)
    assert res.returncode != 0 and "BROKEN" in res.stdout, res.stdout + res.stderr


def test_ruff_rules_hold():
    res = subprocess.run([sys.executable, "-m", "ruff", "check", "--no-cache", "."], cwd=REPO,
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stdout + res.stderr


def test_modules_fit_one_sitting():
    # Common practice (DEVELOPERS.md): modules short enough to read in one sitting, about 400 lines.
    long = {str(p.relative_to(REPO)): n for p in [*REPO.glob("mps/**/*.py"), *REPO.glob("models/**/*.py")]
            if (n := len(p.read_text().splitlines())) > 420}
    assert not long, long
