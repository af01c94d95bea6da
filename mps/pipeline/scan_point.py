"""One point of a scan, as a worker process or a Dask worker runs it.

:func:`run_point` takes a plain :class:`PointTask` (picklable: the point's validated config mapping,
not live objects) and returns a :class:`PointOutcome`; it never raises, so one failing point never
stops a scan: bad input, a refused operator, a damaged checkpoint or an internal error become a
``failed`` outcome with a one-line error. A point whose directory holds a checkpoint is resumed from
it; a point with a warm-start source begins from that neighbour's converged state and runs only the
last stage of its schedule. The run's own progress lines go to ``<point>/run.log``. A stop file in
the scan directory is the scan-wide stop request: every running point checkpoints at its next bond
step and returns ``stopped`` (the first Ctrl-C of a single run does the same).

BLAS threads are limited per point so that N points on N cores do not oversubscribe: to
``blas_threads``, or on a Dask worker to the cores divided by the worker's task threads.
"""

from __future__ import annotations

import json
import os
import signal
import time
from dataclasses import dataclass, replace
from pathlib import Path

from threadpoolctl import threadpool_limits

from mps.pipeline.errors import InputError, RunFailure
from mps.pipeline.rundir import CHECKPOINT, SUMMARY, write_json

LOG = "run.log"
WARM = "warm_start.json"


@dataclass(frozen=True)
class PointTask:
    """What a worker needs for one point: index, name, the validated config mapping, the run
    directory of the neighbour to start from (or None), the scan's stop file and the BLAS threads
    (None: decided on the worker)."""

    index: int
    name: str
    config: dict
    warm_from: str | None
    stop_file: str
    blas_threads: int | None = None


@dataclass(frozen=True)
class PointOutcome:
    """done | failed | stopped, the one-line error of a failed point, and the wall seconds."""

    index: int
    status: str
    error: str = ""
    seconds: float = 0.0


def ignore_interrupts() -> None:
    """Process-pool initializer: an idle worker ignores Ctrl-C and SIGTERM (the scan driver
    decides); a running point installs its own handlers for the duration of the run."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)


def run_point(task: PointTask) -> PointOutcome:
    """Run, resume or warm-start one point; never raises."""
    t0 = time.perf_counter()
    try:
        with threadpool_limits(task.blas_threads or _worker_blas_threads()):
            code = _run(task)
        status = "done" if code == 0 else "stopped"
        return PointOutcome(task.index, status, seconds=time.perf_counter() - t0)
    except (InputError, RunFailure) as exc:
        error = " ".join(str(exc).split())
    except KeyboardInterrupt:
        return PointOutcome(task.index, "stopped", seconds=time.perf_counter() - t0)
    except Exception as exc:  # noqa: BLE001 -- isolate the point: one line, the scan goes on
        lines = str(exc).strip().splitlines()
        error = f"internal error ({type(exc).__name__}{': ' + lines[0] if lines else ''})"
    return PointOutcome(task.index, "failed", error, time.perf_counter() - t0)


def _run(task: PointTask) -> int:
    from mps.pipeline.config import parse_config
    from mps.pipeline.runner import resume, run_config

    cfg = parse_config(task.config, default_name=task.name)
    directory = Path(cfg.output.dir)
    if (directory / SUMMARY).is_file():
        return 0
    directory.mkdir(parents=True, exist_ok=True)

    def stop() -> bool:
        return os.path.exists(task.stop_file)

    with open(directory / LOG, "a", encoding="utf-8") as log:
        if (directory / CHECKPOINT).is_file() and cfg.solver.method == "sweeps":
            return resume(str(directory), stream=log, stop=stop)
        initial, note = None, None
        if task.warm_from is not None and cfg.solver.method == "sweeps":
            initial = warm_state(Path(task.warm_from), cfg)
            if initial is not None:
                cfg = replace(cfg, solver=replace(cfg.solver, stages=cfg.solver.stages[-1:]))
                note = {"warm_from": Path(task.warm_from).name}
                write_json(directory / WARM, {"from": Path(task.warm_from).name})
        return run_config(cfg, stream=log, stop=stop, initial=initial, note=note)


def warm_state(source: Path, cfg):
    """The converged state of a finished neighbour if it fits this point (same sites and target
    charge; the local space is the same along a coupling axis), else None (start cold)."""
    from mps.pipeline.checkpoint import CheckpointError, load_checkpoint

    try:
        state, progress, _, _ = load_checkpoint(source / CHECKPOINT)
    except CheckpointError:
        return None
    if state.sites != cfg.model.sites or tuple(state.total_charge) != tuple(cfg.model.integer_charge()):
        return None
    return state


def warm_record(directory: Path) -> str:
    """Name of the neighbour a point started from ('' for a cold start)."""
    try:
        return str(json.loads((directory / WARM).read_text()).get("from", ""))
    except (OSError, ValueError, AttributeError):
        return ""


def _worker_blas_threads() -> int:
    """Cores per concurrently running point: on a Dask worker cores / its task threads, else all cores."""
    cores = os.cpu_count() or 1
    try:
        from distributed import get_worker

        worker = get_worker()
        threads = getattr(getattr(worker, "state", None), "nthreads", None) or worker.nthreads
    except (ImportError, ValueError, AttributeError):
        return cores
    return max(1, cores // max(1, int(threads)))
