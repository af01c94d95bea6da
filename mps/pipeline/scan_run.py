"""``chargewise scan CONFIG``: every point of a scan section run as an ordinary run directory.

The whole scan is checked before any point runs (every point's config validated; a bad axis stops
the scan with one line naming the key, exit code 2). Points then run on a local process pool or a
Dask cluster (:mod:`mps.pipeline.scan_exec`), at most as many at a time as there are workers, in
point order; along a coupling axis a point waits for the neighbour it starts from
(:func:`mps.pipeline.scan_plan.warm_sources`) and starts cold if that neighbour failed.

Reliability: the scan directory is locked against a second driver; a failing point is recorded in
scan.csv with its one-line error and the others go on (exit code 1 at the end); the same command
run again skips finished points, resumes interrupted ones from their checkpoints and retries failed
ones. The first Ctrl-C asks every running point to checkpoint at its next bond step (a stop file
the points poll, which also reaches Dask workers) and waits for them; a second Ctrl-C quits at
once, each point keeping its last checkpoint. scan.csv is rewritten atomically after every point.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass
from pathlib import Path

import yaml

from mps.pipeline.config import config_hash, load_mapping
from mps.pipeline.errors import ConfigError
from mps.pipeline.rundir import CONFIG, SUMMARY, write_text
from mps.pipeline.runlock import RunLock
from mps.pipeline.scan_exec import open_pool
from mps.pipeline.scan_plan import scan_axes, scan_points, validate_points, warm_sources, warm_start_enabled
from mps.pipeline.scan_point import PointTask
from mps.pipeline.scan_table import TABLE, scan_row, write_scan_table
from mps.pipeline.signals import EXIT_STOPPED, StopSignals

SCAN_CONFIG = "scan.yaml"
STOP = ".stop"


@dataclass
class PointRecord:
    """The driver's view of one point: pending | running | done | failed | stopped."""

    point: object
    cfg: object
    status: str = "pending"
    error: str = ""
    seconds: float | None = None

    @property
    def directory(self) -> Path:
        return Path(self.cfg.output.dir)


@dataclass
class ScanPlan:
    """A validated scan: the points with their configs, the scanned keys, the directory, warm starts."""

    name: str
    directory: Path
    keys: list[str]
    records: list[PointRecord]
    warm: bool
    axes: list
    data: dict
    plots: bool
    source: str


def plan_scan(config_path: str) -> ScanPlan:
    """Load and check the whole scan (nothing is run or written)."""
    data = load_mapping(config_path)
    if "scan" not in data:
        raise ConfigError("scan", f"{config_path} has no scan section; run a single point with "
                          f"'chargewise run {config_path}'")
    axes = scan_axes(data["scan"])
    warm = warm_start_enabled(data["scan"])
    points = scan_points(data)
    configs = validate_points(data, points, default_name=Path(config_path).stem)
    directory = Path(points[0].config["output"]["dir"]).parent
    name = str(data.get("name") or Path(config_path).stem)
    return ScanPlan(name, directory, [k for axis in axes for k in axis],
                    [PointRecord(p, c) for p, c in zip(points, configs)], warm, axes, dict(data),
                    configs[0].output.plots, str(config_path))


def describe(config_path: str) -> str:
    """What ``chargewise check`` prints for a scan config: the points and their directories."""
    plan = plan_scan(config_path)
    lines = [f"# scan {plan.name}: {len(plan.records)} points into {plan.directory}"]
    lines += [f"#   {r.point.name}" for r in plan.records]
    return "\n".join(lines) + "\n" + yaml.safe_dump(plan.data, sort_keys=False)


def scan(config_path: str, workers: int | None = None, scheduler: str | None = None, stream=None) -> int:
    plan = plan_scan(config_path)
    plan.directory.mkdir(parents=True, exist_ok=True)
    with RunLock(plan.directory, ScanProgress([], stream).say):
        write_text(plan.directory / SCAN_CONFIG, yaml.safe_dump(plan.data, sort_keys=False))
        stop_file = plan.directory / STOP
        stop_file.unlink(missing_ok=True)
        for record in plan.records:
            _previous(record)
        pool = open_pool(workers, scheduler)
        sources = warm_sources([r.point for r in plan.records], plan.axes, pool.capacity()) if plan.warm else {}
        show = ScanProgress(plan.records, stream)
        done = sum(r.status == "done" for r in plan.records)
        show.say(f"scan {plan.name}: {len(plan.records)} points ({done} already done) on {pool.where}; "
                 f"point logs in {plan.directory}/<point>/run.log")
        code = _drive(plan, sources, pool, stop_file, show)
        stop_file.unlink(missing_ok=True)
        _write(plan)
        show.finish(code, plan, _draw(plan))
    return code


def _previous(record: PointRecord) -> None:
    """A point finished by an earlier invocation is done (if its directory holds this chain)."""
    d = record.directory
    if not (d / SUMMARY).is_file():
        return
    try:
        same = config_hash(load_mapping(d / CONFIG).get("model")) == config_hash(record.cfg.model)
    except ConfigError:
        same = False
    if same:
        record.status = "done"
    else:
        record.status, record.error = "failed", (f"{d} holds a run of another chain; remove it or "
                                                 "choose another output.dir")


def _drive(plan: ScanPlan, sources: dict[int, int], pool, stop_file: Path, show: "ScanProgress") -> int:
    """Keep the pool busy until every point has ended. The first Ctrl-C or SIGTERM asks every
    running point to checkpoint at its next bond step (the stop file) and starts no new one; a
    second one leaves at once (each point keeps its last checkpoint)."""
    records = plan.records
    running: dict = {}
    notice = "stopping: every running point checkpoints at its next bond step (send it again to quit at once)"
    with StopSignals(show.say, notice) as stop:
        try:
            while True:
                if stop():
                    stop_file.touch()
                while not stop() and len(running) < pool.capacity():
                    record = _next_ready(records, sources)
                    if record is None:
                        break
                    running[pool.submit(_task(record, records, sources, stop_file))] = record
                    record.status = "running"
                if not running:
                    break
                if not _collect(running, plan, show):
                    show.tick()
                    time.sleep(0.2)
        except KeyboardInterrupt:
            pool.close(list(running), wait=False)
            for record in running.values():
                record.status = "stopped"
            return EXIT_STOPPED
    pool.close()
    if stop():
        return EXIT_STOPPED
    return 1 if any(r.status == "failed" for r in records) else 0


def _task(record: PointRecord, records: list[PointRecord], sources: dict[int, int], stop_file: Path) -> PointTask:
    """The task of a point, warm-started from its finished neighbour if it has one."""
    source = sources.get(record.point.index)
    warm = str(records[source].directory) if source is not None and records[source].status == "done" else None
    return PointTask(record.point.index, record.point.name, record.point.config, warm, str(stop_file))


def _next_ready(records: list[PointRecord], sources: dict[int, int]) -> PointRecord | None:
    """The first pending point whose warm-start source (if any) is no longer pending or running."""
    for record in records:
        source = sources.get(record.point.index)
        if record.status == "pending" and (source is None or records[source].status not in ("pending", "running")):
            return record
    return None


def _collect(running: dict, plan: ScanPlan, show: "ScanProgress") -> bool:
    finished = [f for f in running if f.done()]
    for future in finished:
        record = running.pop(future)
        try:
            outcome = future.result()
            record.status, record.error, record.seconds = outcome.status, outcome.error, outcome.seconds
        except Exception as exc:  # noqa: BLE001 -- a lost worker fails its point, not the scan
            record.status, record.error = "failed", f"worker lost ({type(exc).__name__}: {exc})".splitlines()[0]
        _write(plan)
        show.point(record)
    return bool(finished)


def _write(plan: ScanPlan) -> None:
    rows = [scan_row(r.point.name, r.point.values, r.status, r.error, r.seconds, r.directory)
            for r in plan.records]
    write_scan_table(plan.directory / TABLE, plan.keys, rows)


def _draw(plan: ScanPlan) -> tuple[list[Path], list[str]]:
    if not plan.plots:
        return [], []
    from mps.pipeline.plots.scan import draw_scan

    return draw_scan(plan.directory)


class ScanProgress:
    """One line across the points (done, failed, running, time left) and a line per finished point."""

    def __init__(self, records: list[PointRecord], stream=None):
        self.records = records
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.start = time.perf_counter()
        self.times: list[float] = []

    def status(self) -> str:
        count = {s: sum(r.status == s for r in self.records) for s in ("done", "failed", "running")}
        left = len(self.records) - count["done"] - count["failed"]
        eta = ""
        if self.times and left:
            width = max(1, count["running"])
            eta = f", about {sum(self.times) / len(self.times) * left / width:.0f} s left"
        return (f"scan: {count['done']}/{len(self.records)} done, {count['failed']} failed, "
                f"{count['running']} running | {time.perf_counter() - self.start:.0f} s{eta}")

    def tick(self) -> None:
        if self.tty:
            self.stream.write("\r\x1b[2K" + self.status())
            self.stream.flush()

    def point(self, record: PointRecord) -> None:
        if record.status == "done" and record.seconds:
            self.times.append(record.seconds)
        what = {"done": f"done in {record.seconds or 0:.1f} s", "stopped": "stopped (checkpoint kept)"}
        text = f"point {record.point.name}: " + what.get(record.status, f"failed: {record.error}")
        self.say(f"{text} | {self.status()}")

    def say(self, text: str) -> None:
        self.stream.write(("\r\x1b[2K" if self.tty else "") + text + "\n")
        self.stream.flush()

    def finish(self, code: int, plan: ScanPlan, drawn: tuple[list[Path], list[str]]) -> None:
        records = plan.records
        failed = [r for r in records if r.status == "failed"]
        parts = [f"scan {plan.name}: {sum(r.status == 'done' for r in records)} of {len(records)} points done"]
        if failed:
            parts.append(f"{len(failed)} failed (errors in {TABLE})")
        if code == EXIT_STOPPED:
            parts.append(f"stopped; continue with: chargewise scan {plan.source}")
        elif failed:
            parts.append("the same command again retries them")
        files, notes = drawn
        parts.append(f"table {plan.directory / TABLE}" + (f", {len(files)} plots" if files else ""))
        self.say("; ".join(parts + notes))
