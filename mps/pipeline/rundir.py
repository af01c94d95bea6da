"""The run directory: its file names and atomic writes of tables and JSON (the lock: runlock).

Every file is written to a temporary name, flushed, fsync'ed and renamed into place, so readers
never see half a table and a writer killed at any moment leaves the previous file. A write that
fails (disk full, directory not writable) removes its temporary file and raises
:class:`~mps.pipeline.errors.StorageError` naming the file; the previous version stays.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from pathlib import Path

from mps.pipeline.errors import StorageError

CONFIG = "config.yaml"
CHECKPOINT = "state.h5"
SWEEPS = "sweeps.csv"
SUMMARY = "summary.json"


def write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` atomically (temporary file, flush, fsync, rename)."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        raise storage_error(path, exc) from None
    finally:
        tmp.unlink(missing_ok=True)


def storage_error(path: Path, exc: OSError) -> StorageError:
    """The one-line error of a failed write of ``path``."""
    reason = exc.strerror or str(exc) or type(exc).__name__
    return StorageError(f"cannot write {path} ({reason}); the previous version of the file is kept")


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
