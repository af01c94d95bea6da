"""Kill campaign: a run SIGKILLed at many random moments always resumes to the uninterrupted result.

The run is killed (SIGKILL, nothing of ours runs) at random times during the sweeps, the moment a
temporary file of a checkpoint, table or plot write is seen (so mid-write), after a few
checkpoints of the killed process (most of them taken inside sweeps), and while plots are drawn; after each kill the run directory must hold only whole files (a checkpoint that passes its
checksum, tables that parse row by row, complete PNGs), and ``chargewise resume`` (``run`` when
not even the config was written) continues. Each finished run must match an uninterrupted run of
the same config: energy to 1e-10 and every table to 1e-10, as the design asks (DESIGN.md section
7). Reference: the uninterrupted run itself, with the same code and seed. Checkpoints are also
taken inside sweeps (every 0.01 s), so resumes start from the middle of sweeps as well; the
"sweep" kills make sure of it (at 0.05 s and random kill times, faster sweeps once gave none).
"""

from __future__ import annotations

import csv
import json
import math
import os
import random
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from mps.pipeline.checkpoint import load_checkpoint

pytestmark = pytest.mark.slow

KILLS = 32
CONFIG = {
    "name": "kill-campaign",
    "model": {"family": "xxz", "sites": 28, "couplings": {"J": 1.0, "Delta": 0.5}, "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 8, "sweeps": 2}, {"bond": 24, "sweeps": 2}, {"bond": 40, "sweeps": 8}],
               "discard": 1e-12, "energy_tol": 1e-15, "seed": 5},   # every sweep of every stage runs
    "analysis": {"renyi": [1, 2]},
    # checkpoints inside sweeps too, so that kills also resume from the middle of a sweep
    "output": {"checkpoint_seconds": 0.01},
}
TABLES = ("entropies.csv", "sectors.csv", "moments.csv", "spectrum.csv", "sweeps.csv")
TEMPORARY = re.compile(r"^\..+\.tmp-\d+$")
PNG_END = b"IEND\xaeB`\x82"


def _start(verb: str, target: Path, config: Path, log: Path) -> subprocess.Popen:
    args = ["run", str(config), "--out", str(target)] if verb == "run" else ["resume", str(target)]
    with open(log, "a") as fh:
        return subprocess.Popen([sys.executable, "-m", "mps", *args], stdout=fh, stderr=fh)


def _temporaries(out: Path) -> list[str]:
    names = []
    for folder in (out, out / "plots"):
        try:
            names += [e.name for e in os.scandir(folder) if TEMPORARY.match(e.name)]
        except FileNotFoundError:
            pass
    return names


def _stamp(path: Path):
    """Identity of the file now at ``path`` (atomic replacement gives a new inode), or None."""
    try:
        st = path.stat()
    except FileNotFoundError:
        return None
    return st.st_ino, st.st_mtime_ns


def _wait_and_kill(proc: subprocess.Popen, out: Path, mode: str, rng: random.Random) -> bool:
    """Kill ``proc`` at a moment chosen by ``mode``; False if it finished first."""
    end = time.monotonic() + 60
    if mode == "time":
        end = time.monotonic() + rng.uniform(0.3, 4.0)
        while time.monotonic() < end and proc.poll() is None:
            time.sleep(0.005)
    elif mode == "write":          # mid-write: the moment a temporary file shows up
        wanted, seen, left_over = rng.randint(1, 4), set(), set(_temporaries(out))
        while time.monotonic() < end and proc.poll() is None:
            seen.update(set(_temporaries(out)) - left_over)
            if len(seen) >= wanted:
                break
    elif mode == "sweep":          # after a few checkpoints of this process: most are taken inside sweeps
        wanted, seen, last = rng.randint(2, 6), 0, _stamp(out / "state.h5")
        while time.monotonic() < end and proc.poll() is None and seen < wanted:
            now = _stamp(out / "state.h5")
            seen, last = seen + (now != last and now is not None), now
            time.sleep(0.001)
    else:                          # while plotting
        wanted = rng.randint(0, 5)
        while time.monotonic() < end and proc.poll() is None:
            plots = out / "plots"
            if plots.is_dir() and sum(1 for p in plots.iterdir() if p.suffix == ".png") >= wanted:
                break
            time.sleep(0.002)
    if proc.poll() is not None:
        return False
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    return True


def _check_whole_files(out: Path) -> None:
    """Nothing half written: the checkpoint verifies, every table parses, every PNG is complete."""
    if (out / "state.h5").exists():
        load_checkpoint(out / "state.h5")   # raises on a checksum mismatch or a torn file
    for path in out.glob("*.csv"):
        with open(path, newline="") as fh:
            rows = list(csv.reader(fh))
        assert rows and all(len(r) == len(rows[0]) for r in rows), f"torn table {path.name}"
    for path in out.glob("*.json"):
        json.loads(path.read_text())
    for path in (out / "plots").glob("*.png") if (out / "plots").is_dir() else ():
        data = path.read_bytes()
        assert data.startswith(b"\x89PNG") and data.endswith(PNG_END), f"torn plot {path.name}"
    if (out / "config.yaml").exists():
        yaml.safe_load((out / "config.yaml").read_text())


def _read(path: Path) -> tuple[list[str], list[list[str]]]:
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def _same_tables(a: Path, b: Path) -> None:
    for name in TABLES:
        head_a, rows_a = _read(a / name)
        head_b, rows_b = _read(b / name)
        assert head_a == head_b and len(rows_a) == len(rows_b), name
        skip = {head_a.index("seconds")} if "seconds" in head_a else set()
        for ra, rb in zip(rows_a, rows_b):
            for k, (x, y) in enumerate(zip(ra, rb)):
                if k in skip or x == y:
                    continue
                assert math.isclose(float(x), float(y), rel_tol=0, abs_tol=1e-10), (name, head_a[k], x, y)


def test_runs_killed_at_random_moments_resume_to_the_uninterrupted_result(tmp_path):
    config = tmp_path / "chain.yaml"
    config.write_text(yaml.safe_dump(CONFIG))
    reference = tmp_path / "reference"
    proc = _start("run", reference, config, tmp_path / "reference.log")
    assert proc.wait(timeout=600) == 0, (tmp_path / "reference.log").read_text()
    expected = json.loads((reference / "summary.json").read_text())

    rng = random.Random(20261204)
    kills, campaign, modes = 0, 0, ("time", "write", "sweep", "plots")
    takeovers, mid_sweep, by_mode = 0, 0, dict.fromkeys(modes, 0)
    while kills < KILLS:
        campaign += 1
        out, log = tmp_path / f"killed-{campaign}", tmp_path / f"killed-{campaign}.log"
        for attempt in range(200):
            verb = "resume" if (out / "config.yaml").exists() else "run"
            proc = _start(verb, out, config, log)
            mode = modes[kills % len(modes)]
            if _wait_and_kill(proc, out, mode, rng):
                kills += 1
                by_mode[mode] += 1
                _check_whole_files(out)
                continue
            assert proc.returncode == 0, log.read_text()[-2000:]
            break
        else:
            pytest.fail("the run never finished")
        text = log.read_text()
        assert "Traceback" not in text
        takeovers += text.count("taking over the lock")
        mid_sweep += len(re.findall(r"resuming after sweep \d+, bond step", text))
        got = json.loads((out / "summary.json").read_text())
        assert got["energy"] == pytest.approx(expected["energy"], abs=1e-10)
        assert got["converged"] == expected["converged"] and got["sweeps"] == expected["sweeps"]
        _same_tables(reference, out)
        _check_whole_files(out)
        assert not _temporaries(out)
    assert takeovers > 0   # killed holders leave their lock file; the next process takes it over
    assert min(by_mode.values()) >= KILLS // len(modes), by_mode
    assert mid_sweep > 0   # some resumes started inside a sweep
