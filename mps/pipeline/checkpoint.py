"""HDF5 checkpoints of a ground-state search: written atomically, verified on reading.

A checkpoint holds every site tensor (flat data plus the charges, sizes and flows of its legs),
the Schmidt values of every bond with their charge labels, the search position (sweep, stage,
sweeps done in the stage, last energy, convergence flag, sweep history), the random generator
state and the hash of the model section it belongs to. It is written to a temporary file,
flushed, fsync'ed and renamed over the old one, so a run killed at any moment leaves either the
previous or the new checkpoint, never a torn one. A SHA-256 checksum over all stored arrays and
attributes detects corruption; foreign or damaged files are refused with a clear message and
never overwritten. Nothing is unpickled: only numeric arrays and JSON text are stored.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import asdict
from pathlib import Path

import h5py
import numpy as np

from mps.blocks.charges import Leg
from mps.blocks.tensor import BlockTensor
from mps.chain.state import BondSpectrum, ChainState
from mps.pipeline.errors import InputError
from mps.solver.sweep import Progress, SweepRecord

FORMAT = "chargewise-checkpoint"
FORMAT_VERSION = 1


class CheckpointError(InputError):
    """A checkpoint that cannot be used (missing, foreign, corrupted, other model)."""


def _leg_arrays(leg: Leg) -> tuple[np.ndarray, np.ndarray]:
    return leg.charge_array, np.asarray(leg.sizes, dtype=np.int64)


def _payload(state: ChainState) -> dict[str, np.ndarray]:
    """Every array to store, keyed by its HDF5 path."""
    out: dict[str, np.ndarray] = {}
    for j, t in enumerate(state.tensors):
        out[f"sites/{j}/data"] = t.data
        out[f"sites/{j}/flows"] = np.array([leg.flow for leg in t.legs], dtype=np.int64)
        out[f"sites/{j}/charge"] = np.asarray(t.charge, dtype=np.int64)
        for i, leg in enumerate(t.legs):
            out[f"sites/{j}/leg{i}_charges"], out[f"sites/{j}/leg{i}_sizes"] = _leg_arrays(leg)
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
        h.update(key.encode())
        h.update(str(a.dtype).encode())
        h.update(str(a.shape).encode())
        h.update(a.tobytes())
    return h.hexdigest()


def save_checkpoint(path: str | os.PathLike, state: ChainState, progress: Progress,
                    rng_state: dict, model_hash: str, solver_hash: str) -> None:
    """Write the checkpoint atomically (temporary file, flush, fsync, rename)."""
    path = Path(path)
    arrays = _payload(state)
    meta = {
        "format": FORMAT, "format_version": FORMAT_VERSION, "model_hash": model_hash,
        "solver_hash": solver_hash, "sites": state.sites, "center": state.center,
        "sweep": progress.sweep, "stage": progress.stage, "in_stage": progress.in_stage,
        "energy": progress.energy, "converged": progress.converged, "step": progress.step,
        "step_truncation": progress.step_truncation, "step_energy": progress.step_energy,
        "step_seconds": progress.step_seconds,
        "history": [asdict(r) for r in progress.history], "rng_state": rng_state,
    }
    meta_text = json.dumps(meta)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "wb") as fh:
            with h5py.File(fh, "w") as f:
                f.attrs["meta"] = meta_text
                f.attrs["checksum"] = _checksum(arrays, json.loads(meta_text))
                for key, arr in arrays.items():
                    f.create_dataset(key, data=arr)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
        dirfd = os.open(path.parent, os.O_RDONLY)
        try:
            os.fsync(dirfd)
        finally:
            os.close(dirfd)
    finally:
        if tmp.exists():
            tmp.unlink()


def load_checkpoint(path: str | os.PathLike) -> tuple[ChainState, Progress, dict, dict]:
    """Read and verify a checkpoint; returns (state, progress, rng_state, meta)."""
    path = Path(path)
    if not path.is_file():
        raise CheckpointError(f"{path}: no checkpoint found")
    try:
        with h5py.File(path, "r") as f:
            if "meta" not in f.attrs or "checksum" not in f.attrs:
                raise CheckpointError(f"{path}: not a chargewise checkpoint")
            meta = json.loads(str(f.attrs["meta"]))
            stored = str(f.attrs["checksum"])
            arrays: dict[str, np.ndarray] = {}
            f.visititems(lambda name, obj: arrays.__setitem__(name, obj[()])
                         if isinstance(obj, h5py.Dataset) else None)
    except (OSError, ValueError, json.JSONDecodeError) as exc:
        raise CheckpointError(f"{path}: unreadable checkpoint ({exc})") from None
    if meta.get("format") != FORMAT:
        raise CheckpointError(f"{path}: not a chargewise checkpoint")
    if meta.get("format_version") != FORMAT_VERSION:
        raise CheckpointError(f"{path}: checkpoint format version {meta.get('format_version')} "
                              f"is not supported (this version reads {FORMAT_VERSION})")
    if _checksum(arrays, meta) != stored:
        raise CheckpointError(f"{path}: checksum mismatch, the checkpoint is corrupted")
    try:
        state = _state_from(arrays, meta)
    except (KeyError, ValueError) as exc:
        raise CheckpointError(f"{path}: inconsistent checkpoint ({exc})") from None
    progress = Progress(meta["sweep"], meta["stage"], meta["in_stage"], _number(meta["energy"]),
                        bool(meta["converged"]), [SweepRecord(**r) for r in meta["history"]],
                        int(meta["step"]), float(meta["step_truncation"]), _number(meta["step_energy"]),
                        float(meta["step_seconds"]))
    return state, progress, meta["rng_state"], meta


def _state_from(arrays: dict[str, np.ndarray], meta: dict) -> ChainState:
    tensors = []
    for j in range(int(meta["sites"])):
        flows = arrays[f"sites/{j}/flows"]
        legs = []
        for i, flow in enumerate(flows):
            charges = arrays[f"sites/{j}/leg{i}_charges"]
            sizes = arrays[f"sites/{j}/leg{i}_sizes"]
            legs.append(Leg(tuple(tuple(int(c) for c in row) for row in charges),
                            tuple(int(s) for s in sizes), int(flow)))
        tensors.append(BlockTensor(tuple(legs), tuple(int(c) for c in arrays[f"sites/{j}/charge"]),
                                   arrays[f"sites/{j}/data"]))
    for j in range(len(tensors) - 1):
        if not tensors[j].legs[2].is_dual_of(tensors[j + 1].legs[0]):
            raise ValueError(f"bond {j + 1} does not connect its two site tensors")
    spectra: list[BondSpectrum | None] = [None] * (len(tensors) + 1)
    for b in range(len(tensors) + 1):
        if f"spectra/{b}/charges" in arrays:
            sizes = arrays[f"spectra/{b}/sizes"]
            values = np.split(arrays[f"spectra/{b}/values"], np.cumsum(sizes)[:-1])
            spectra[b] = BondSpectrum(tuple(tuple(int(c) for c in q) for q in arrays[f"spectra/{b}/charges"]),
                                      tuple(values))
    return ChainState(tensors, int(meta["center"]), spectra)


def _number(x) -> float:
    return math.nan if x is None else float(x)
