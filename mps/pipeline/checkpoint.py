"""HDF5 checkpoints of a ground-state search: written atomically, verified on reading.

A checkpoint holds every site tensor (flat data plus the charges, sizes and flows of its legs),
the Schmidt values of every bond with their charge labels, the search position (sweep, stage,
sweeps done in the stage, energies, convergence flag, sweep history), the random generator state
and the hashes of the config sections it belongs to. It is written to a temporary file, flushed,
fsync'ed and renamed over the old one, so a run killed at any moment leaves the previous or the
new checkpoint; if the operating system refuses a step (disk full, quota, read-only directory)
the temporary file is removed, the previous checkpoint stays and :class:`StorageError` says why.

Reading treats the file as hostile (:mod:`mps.pipeline.checkpoint_read`: every layer is checked
before use, only numeric arrays and two text attributes are read, nothing is unpickled); every
problem is a one-line :class:`CheckpointError`.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import math
import os
from dataclasses import asdict
from pathlib import Path

import h5py
import numpy as np

from mps.chain.state import ChainState
from mps.pipeline.checkpoint_read import FORMAT, FORMAT_VERSION, HOSTILE, Refused, line, read_file, state_from
from mps.pipeline.errors import InputError, StorageError
from mps.solver.sweep import Progress, SweepRecord


class CheckpointError(InputError):
    """A checkpoint that cannot be used (missing, foreign, corrupted, other model)."""


# ----------------------------------------------------------------------------- writing
def _payload(state: ChainState) -> dict[str, np.ndarray]:
    """Every array to store, keyed by its HDF5 path."""
    out: dict[str, np.ndarray] = {}
    for j, t in enumerate(state.tensors):
        out[f"sites/{j}/data"] = t.data
        out[f"sites/{j}/flows"] = np.array([leg.flow for leg in t.legs], dtype=np.int64)
        out[f"sites/{j}/charge"] = np.asarray(t.charge, dtype=np.int64)
        for i, leg in enumerate(t.legs):
            out[f"sites/{j}/leg{i}_charges"] = leg.charge_array
            out[f"sites/{j}/leg{i}_sizes"] = np.asarray(leg.sizes, dtype=np.int64)
    for b, spec in enumerate(state.spectra):
        if spec is None:
            continue
        out[f"spectra/{b}/charges"] = np.array(spec.charges, dtype=np.int64)
        out[f"spectra/{b}/sizes"] = np.array([len(v) for v in spec.values], dtype=np.int64)
        out[f"spectra/{b}/values"] = np.concatenate(spec.values) if spec.values else np.zeros(0)
    return out


def _checksum(arrays: dict[str, np.ndarray], meta: dict) -> str:
    h = hashlib.sha256()
    h.update(json.dumps(meta, sort_keys=True).encode())
    for key in sorted(arrays):
        a = np.ascontiguousarray(arrays[key])
        h.update(f"{key}{a.dtype}{a.shape}".encode())
        h.update(a.tobytes())
    return h.hexdigest()


class _RecordingFile:
    """The temporary file as h5py's file-object driver sees it, remembering the first refusal of
    the operating system: h5py re-raises it, but may report a repeat of it on close as SystemError."""

    def __init__(self, fh) -> None:
        self.fh, self.error = fh, None

    def __getattr__(self, method: str):
        call = getattr(self.fh, method)

        def recorded(*args):
            try:
                return call(*args)
            except OSError as exc:
                self.error = self.error or exc
                raise
        return recorded


def save_checkpoint(path: str | os.PathLike, state: ChainState, progress: Progress,
                    rng_state: dict, model_hash: str, solver_hash: str) -> None:
    """Write the checkpoint atomically (temporary file, flush, fsync, rename).

    Raises :class:`StorageError` naming the file and the reason when the operating system refuses
    any step (ENOSPC, EDQUOT, EFBIG, EACCES, EROFS, EIO, ...): the temporary file is removed and the
    previous checkpoint, if any, is left byte for byte as it was.
    """
    path = Path(path)
    arrays = _payload(state)
    meta = {"format": FORMAT, "format_version": FORMAT_VERSION, "model_hash": model_hash,
            "solver_hash": solver_hash, "sites": state.sites, "center": state.center,
            **asdict(progress), "rng_state": rng_state}
    meta_text = json.dumps(meta)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    sink = _RecordingFile(None)
    try:
        with open(tmp, "wb") as fh:
            sink.fh = fh
            with h5py.File(sink, "w") as f:
                f.attrs["meta"] = meta_text
                f.attrs["checksum"] = _checksum(arrays, json.loads(meta_text))
                for key, arr in arrays.items():
                    f.create_dataset(key, data=arr)
            if sink.error is not None:  # a refusal h5py swallowed must not replace a good checkpoint
                raise sink.error
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except Exception as exc:
        cause = sink.error or exc
        if not isinstance(cause, OSError) or cause.errno is None:
            raise
        kept = "the previous checkpoint is kept" if path.exists() else "no checkpoint was saved"
        raise StorageError(f"{path}: could not write the checkpoint ({line(cause.strerror or cause)}); "
                           f"{kept}") from exc
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)
    _sync_directory(path)


def _sync_directory(path: Path) -> None:
    """Make the rename durable; file systems that cannot sync a directory are left as they are."""
    try:
        fd = os.open(path.parent, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError as exc:
        if exc.errno not in (errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
            raise StorageError(f"{path}: the checkpoint was written but its directory could not be synced "
                               f"({line(exc.strerror or exc)}); it may not survive a crash") from exc


# ----------------------------------------------------------------------------- reading
def load_checkpoint(path: str | os.PathLike) -> tuple[ChainState, Progress, dict, dict]:
    """Read and verify a checkpoint; returns (state, progress, rng_state, meta).

    Any damaged, foreign or hostile file raises :class:`CheckpointError` with one line naming it.
    """
    path = Path(path)
    if not path.is_file():
        raise CheckpointError(f"{path}: no checkpoint found")
    meta, stored, arrays = _guarded(path, "unreadable checkpoint", read_file, path)
    if _guarded(path, "unreadable checkpoint", _checksum, arrays, meta) != stored:
        raise CheckpointError(f"{path}: checksum mismatch, the checkpoint is corrupted")
    state = _guarded(path, "inconsistent checkpoint", state_from, arrays, meta)
    progress = Progress(meta["sweep"], meta["stage"], meta["in_stage"], _number(meta["energy"]),
                        meta["converged"], [SweepRecord(**r) for r in meta["history"]], meta["step"],
                        float(meta["step_truncation"]), _number(meta["step_energy"]),
                        float(meta["step_seconds"]))
    return state, progress, meta["rng_state"], meta


def _guarded(path: Path, what: str, step, *args):
    """``step(*args)``, turning a refusal or whatever damaged input provokes into CheckpointError."""
    try:
        return step(*args)
    except Refused as exc:
        raise CheckpointError(f"{path}: {line(exc)}") from None
    except HOSTILE as exc:
        raise CheckpointError(f"{path}: {what} ({type(exc).__name__}: {line(exc)})") from None


def _number(x) -> float:
    return math.nan if x is None else float(x)
