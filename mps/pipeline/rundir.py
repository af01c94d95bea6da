"""The run directory: its file names, an exclusive lock, and atomic writes of tables and JSON.

Every file is written to a temporary name and renamed into place, so readers never see half a
table. A lock file (created with O_EXCL, holding the owner's PID) keeps two processes from
writing one run directory; a lock left by a process that no longer exists is taken over.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from pathlib import Path

from mps.pipeline.errors import InputError

CONFIG = "config.yaml"
CHECKPOINT = "state.h5"
SWEEPS = "sweeps.csv"
SUMMARY = "summary.json"
LOCK = ".lock"


def write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` atomically (temporary file, flush, fsync, rename)."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    with open(tmp, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return repr(value)
    return str(value)


def write_table(path: Path, columns: list[str], rows: list[list]) -> None:
    """CSV with a header row; NaN and None become empty cells, floats keep full precision."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for row in rows:   # the common float cell inline (tables of long exact runs hold millions)
        w.writerow([repr(v) if type(v) is float and v == v else _cell(v) for v in row])
    write_text(path, buf.getvalue())


def read_table(path: Path) -> tuple[list[str], list[list[str]]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def write_json(path: Path, data: dict) -> None:
    def clean(x):
        if isinstance(x, float) and not math.isfinite(x):
            return None
        if isinstance(x, dict):
            return {k: clean(v) for k, v in x.items()}
        if isinstance(x, (list, tuple)):
            return [clean(v) for v in x]
        return x
    write_text(path, json.dumps(clean(data), indent=2) + "\n")


def _alive(pid: int) -> bool:
    """Is process ``pid`` running? A zombie (killed, not yet reaped: common in containers whose
    first process does not reap orphans) counts as dead."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


class RunLock:
    """Exclusive lock on a run directory for the lifetime of a ``with`` block."""

    def __init__(self, directory: Path):
        self.path = Path(directory) / LOCK

    def __enter__(self) -> "RunLock":
        for _ in range(2):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                try:
                    pid = int(self.path.read_text().strip() or "0")
                except (OSError, ValueError):
                    pid = 0
                if pid and _alive(pid) and pid != os.getpid():
                    raise InputError(f"{self.path.parent}: another chargewise process (pid {pid}) "
                                     "is writing this run directory") from None
                self.path.unlink(missing_ok=True)   # stale lock of a dead process
                continue
            with os.fdopen(fd, "w") as fh:
                fh.write(str(os.getpid()))
            return self
        raise InputError(f"{self.path.parent}: cannot take the run-directory lock")

    def __exit__(self, *exc) -> None:
        self.path.unlink(missing_ok=True)
