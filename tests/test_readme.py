"""The README's Python example runs as printed (docs that drift are worse than none)."""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

README = Path(__file__).resolve().parents[1] / "README.md"


def test_python_example_runs():
    usage = README.read_text().split("## Python use", 1)[1]   # the cluster example needs a cluster
    block = re.search(r"```python\n(.*?)```", usage, flags=re.S).group(1)
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        exec(compile(block, str(README), "exec"), {})
    energy, spectrum = out.getvalue().split(" ", 1)
    # The example's chain (xxz, Delta = 0.5, 32 sites) has a negative ground-state energy
    # (exact, variational: any S^z = 0 Neel state already gives -(L-1) Delta/4 < 0), and the
    # Schmidt values of the central cut are keyed by 2 S^z_A, even integers for a block of 16 spins.
    assert float(energy) < -(32 - 1) * 0.5 / 4
    keys = [int(k) for k in re.findall(r"\((-?\d+),\)", spectrum)]
    assert keys and all(k % 2 == 0 for k in keys)


def test_written_chain_example_is_the_shipped_config():
    # The README's chain written in YAML is the model section of configs/zigzag-spin-chain.yaml,
    # which the run tests validate; so the example in the text is a config that loads.
    import yaml

    from mps.pipeline.config import load_config, parse_config

    block = next(b for b in re.findall(r"```yaml\n(.*?)```", README.read_text(), flags=re.S)
                 if "family: written" in b)
    shipped = load_config(README.parent / "configs" / "zigzag-spin-chain.yaml")
    assert parse_config(yaml.safe_load(block)).model == shipped.model
