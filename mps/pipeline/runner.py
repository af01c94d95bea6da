"""What the command-line verbs do with a run directory: run, resume, analyze, compare, bench.

``run`` validates the config, builds the operator (refusing non-conserving or non-Hermitian
chains before any solving), sweeps stage by stage with a checkpoint after every sweep, then
writes the summary, the entanglement tables, comparison.json and the plots. ``resume``
continues from the last checkpoint; the solver section of the run's config.yaml may be extended
(more stages, larger bonds) but the model may not change. The first Ctrl-C finishes the current
bond and checkpoints there; a second one quits at once, keeping the last checkpoint.
"""

from __future__ import annotations

import hashlib
import json
import sys
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import numpy as np

from mps import __version__
from mps.analysis.correlations import local_expectations
from mps.chain.mpo import Mpo, OperatorError, build_mpo
from mps.chain.state import ChainState, product_state, random_state
from mps.pipeline.checkpoint import CheckpointError, load_checkpoint, save_checkpoint
from mps.pipeline.config import config_hash, load_config
from mps.pipeline.errors import InputError, RunFailure
from mps.pipeline.progress import ProgressLine
from mps.pipeline.rundir import (
    CHECKPOINT,
    CONFIG,
    SUMMARY,
    SWEEPS,
    storage_error,
    write_json,
    write_table,
    write_text,
)
from mps.pipeline.runlock import RunLock
from mps.pipeline.schema import RunConfig, dump_config
from mps.pipeline.signals import EXIT_STOPPED, StopSignals
from mps.pipeline.tables import entanglement_tables, write_tables
from mps.solver.sweep import (
    NumericalError,
    Progress,
    SectorSweeper,
    Stage,
    SweepSettings,
    SweepStopped,
    energy_and_variance,
)

SWEEP_COLUMNS = ["sweep", "stage", "bond", "energy", "delta_energy", "truncation", "max_entropy", "seconds",
                 "warning"]


# ----------------------------------------------------------------------------- helpers
def solver_hash(cfg: RunConfig) -> str:
    settings = cfg.solver.to_dict()
    if settings["method"] == "sweeps":   # the default method leaves the hash of older checkpoints unchanged
        del settings["method"]
    if settings["update"] == "auto":   # likewise the default update
        del settings["update"]
    text = json.dumps(settings, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def build_operator(cfg: RunConfig) -> Mpo:
    """The chain's MPO; a non-conserving or non-Hermitian chain is bad input (exit code 2)."""
    try:
        return build_mpo(cfg.model.space(), cfg.model.sites, cfg.model.terms())
    except OperatorError as exc:
        text = str(exc)
        raise InputError(text if text.startswith("model.") else f"model: {text}") from None


def sweep_settings(cfg: RunConfig) -> SweepSettings:
    """The solver section as the sweep engine's settings."""
    sol = cfg.solver
    return SweepSettings(tuple(Stage(s.bond, s.sweeps, s.admix) for s in sol.stages), discard=sol.discard,
                         energy_tol=sol.energy_tol, lanczos_vectors=sol.lanczos_vectors,
                         lanczos_tol=sol.lanczos_tol, lanczos_restarts=sol.lanczos_restarts, update=sol.update)


def _rng_from(state: dict | None, seed: int) -> np.random.Generator:
    rng = np.random.default_rng(seed)
    if state is not None:
        rng.bit_generator.state = state
    return rng


def _history_rows(progress: Progress) -> list[list]:
    return [[r.sweep, r.stage, r.bond, r.energy, r.delta_energy, r.truncation, r.max_entropy, r.seconds,
             r.warning] for r in progress.history]


# ----------------------------------------------------------------------------- the search
def _search(directory: Path, cfg: RunConfig, search: SectorSweeper, rng: np.random.Generator,
            show: ProgressLine, should_stop: Callable[[], bool]) -> int:
    """Sweep to the end, checkpointing after each sweep and, inside a sweep, at the first bond
    step after ``output.checkpoint_seconds``; returns 0 or EXIT_STOPPED. A non-finite
    number in the search stops it with one line (RunFailure); the last checkpoint stays."""
    mhash, shash = config_hash(cfg.model), solver_hash(cfg)
    sweep_no = search.progress.sweep + 1
    path = directory / CHECKPOINT
    last = [time.monotonic()]

    def on_bond(step, steps):
        show.bond(step, steps, sweep_no)
        if step < steps and time.monotonic() - last[0] >= cfg.output.checkpoint_seconds:
            checkpoint()   # inside a long sweep: the progress points at the next bond step

    def checkpoint():
        save_checkpoint(path, search.state, search.progress, rng.bit_generator.state, mhash, shash)
        last[0] = time.monotonic()

    try:
        for rec in search.run(on_bond=on_bond, should_stop=should_stop):
            checkpoint()
            write_table(directory / SWEEPS, SWEEP_COLUMNS, _history_rows(search.progress))
            show.sweep(rec, len(search.progress.history))
            if rec.warning:
                show.say(f"warning: {rec.warning}")
            sweep_no = rec.sweep + 1
    except SweepStopped:
        checkpoint()
        show.say(f"stopped; saved a checkpoint after bond step {search.progress.step} of sweep "
                 f"{search.progress.sweep + 1} in {path}. Continue with: chargewise resume {directory}")
        return EXIT_STOPPED
    except KeyboardInterrupt:
        show.say(f"\nstopped at once; the last checkpoint in {path} is kept. "
                 f"Continue with: chargewise resume {directory}")
        return EXIT_STOPPED
    except NumericalError as exc:
        kept = f"the checkpoint of sweep {search.progress.sweep} in {path} is kept" if path.is_file() \
            else "no checkpoint was written yet"
        raise RunFailure(f"{exc}; {kept}") from None
    # a run killed between its last checkpoint and this table resumes with no sweep left to do
    write_table(directory / SWEEPS, SWEEP_COLUMNS, _history_rows(search.progress))
    return 0


def _search_and_finish(directory: Path, cfg: RunConfig, mpo: Mpo, search: SectorSweeper,
                       rng: np.random.Generator, show: ProgressLine, stop_also: Callable[[], bool] | None,
                       earlier_seconds: float = 0.0, note: dict | None = None) -> int:
    """The search, then tables, comparison and plots. Ctrl-C or SIGTERM during the search
    checkpoints at the next bond; during the results (which ``resume`` writes again) it stops at
    once. ``stop_also`` is a further stop request (a scan's stop file)."""
    notice = "stopping after the current bond to save a checkpoint (send it again to quit now)"
    with StopSignals(show.say, notice) as signals:
        should_stop = signals if stop_also is None else (lambda: signals() or stop_also())
        t0 = time.perf_counter()
        code = _search(directory, cfg, search, rng, show, should_stop)
        if code:
            return code
        signals.at_once = True
        again = f"the search is saved in {directory / CHECKPOINT}; 'chargewise resume {directory}' writes the results"
        if should_stop():
            show.say(f"stopped before writing the results; {again}")
            return EXIT_STOPPED
        try:
            _finish(directory, cfg, mpo, search, time.perf_counter() - t0 + earlier_seconds, show, note)
        except KeyboardInterrupt:
            show.say(f"\nstopped while writing the results; {again}")
            return EXIT_STOPPED
    return 0


def _finish(directory: Path, cfg: RunConfig, mpo: Mpo, search: SectorSweeper, seconds: float,
            show: ProgressLine, note: dict | None = None) -> None:
    energy, variance = energy_and_variance(search.state, mpo)
    hist = search.progress.history
    summary = {
        "name": cfg.name, "family": cfg.model.family, "sites": cfg.model.sites,
        "energy": energy, "energy_per_site": energy / cfg.model.sites, "variance": variance,
        "converged": search.progress.converged, "sweeps": search.progress.sweep,
        "max_bond": max(search.state.bond_dims), "truncation": hist[-1].truncation if hist else 0.0,
        "seconds": seconds, "version": __version__, **(note or {}),
    }
    space = cfg.model.space()
    if space.cutoff is not None:
        top = local_expectations(search.state, np.diag(space.cutoff[mpo.basis_order]))
        summary["cutoff_weight"] = float(np.max(top))
        summary["cutoff_weight_site"] = int(np.argmax(top))
        if summary["cutoff_weight"] > 1e-4:   # threshold: common practice, not a derived bound
            show.say(f"warning: the occupation cutoff holds weight {summary['cutoff_weight']:.1e} (site "
                     f"{summary['cutoff_weight_site']}); raise model.nmax for results independent of it")
    _write_analysis(directory, cfg, search.state, summary)
    write_json(directory / SUMMARY, summary)
    show.say(f"E = {energy:.12f} ({energy / cfg.model.sites:.12f} per site), variance {variance:.2e}, "
             f"{'converged' if search.progress.converged else 'NOT converged'} after "
             f"{search.progress.sweep} sweeps")
    _compare_and_draw(directory, cfg, search.state, show)
    show.say(f"results in {directory}")


def _write_analysis(directory: Path, cfg: RunConfig, state, summary: dict, renyi=None, cuts=None) -> None:
    """Entanglement tables of every requested cut; the weight floor goes into the summary."""
    space = cfg.model.space()
    tables = entanglement_tables(state, space.charge_units, cfg.analysis, space.charge_names, renyi, cuts)
    write_tables(directory, tables)
    summary["weight_floor"] = cfg.analysis.weight_floor
    summary["resolved_by"] = cfg.analysis.resolve


def _compare_and_draw(directory: Path, cfg: RunConfig, state, show: ProgressLine) -> None:
    """comparison.json (fits, exact free fermions) and the plots, for an analysed run."""
    from mps.pipeline.comparison import ComparisonSettings, write_comparison

    settings = ComparisonSettings(window=cfg.analysis.fit_window, correlations=cfg.analysis.correlations)
    report = write_comparison(directory, cfg, state, settings)
    _report_line(directory, cfg, report, show)


def _report_line(directory: Path, cfg: RunConfig, report: dict, show: ProgressLine) -> None:
    """The one-line verdict of comparison.json (regime and the figures it supports), after drawing."""
    regime = report.get("regime") or {}
    if regime.get("verdict") == "critical":
        c = (report.get("central_charge") or {}).get("value")
        by_charge = report.get("luttinger_by_charge") or {}
        k = None if by_charge else (report.get("luttinger") or {}).get("value")   # several charges: K per charge
        parts = [f"{name} = {value:.4f}" for name, value in (("c", c), ("K", k)) if value is not None]
        for name, entry in by_charge.items():
            if entry.get("value") is not None:
                parts.append(f"K_{name} = {entry['value']:.4f}")
            elif entry.get("regime") == "gapped":
                parts.append(f"{name} gapped (xi = {entry['correlation_length']:.3g})")
        line = "critical: " + (", ".join(parts) or "no positive c or K fitted")
    else:
        line = regime.get("reason", "regime not decided")
        summary = (report.get("massive") or {}).get("summary")
        if summary:
            line += "; " + summary
    exact = report.get("exact") or {}
    dev = (exact.get("max_deviation") or {}).get("probability") if isinstance(exact, dict) else None
    if isinstance(dev, dict) and dev.get("value") is not None:
        line += f"; max |p(q) - exact| = {dev['value']:.1e}"
    if cfg.output.plots:
        from mps.pipeline.plots import draw_all

        drawn = draw_all(directory)
        line += f"; {len(drawn)} plots in {directory / 'plots'}"
    show.say(line)


# ----------------------------------------------------------------------------- verbs
def run(config_path: str, out: str | None = None) -> int:
    cfg = load_config(config_path)
    if out is not None:
        cfg = replace(cfg, output=replace(cfg.output, dir=str(out)))
    return run_config(cfg)


def run_config(cfg: RunConfig, stream=None, stop: Callable[[], bool] | None = None,
               initial: ChainState | None = None, note: dict | None = None) -> int:
    """Run a validated config into ``cfg.output.dir``: progress to ``stream`` (default stderr), ``stop``
    a further stop request, ``initial`` a starting state in the target sector instead of a random
    or product one (a scan's warm start), ``note`` extra entries for summary.json."""
    directory = Path(cfg.output.dir)
    if cfg.solver.method == "exact":
        return _run_exact(directory, cfg, stream=stream)
    mpo = build_operator(cfg)
    if (directory / CHECKPOINT).exists():
        raise InputError(f"{directory}: already holds a run; continue it with "
                         f"'chargewise resume {directory}' or choose another output.dir / --out")
    _make(directory)
    settings = sweep_settings(cfg)
    show = ProgressLine(settings, stream)
    with RunLock(directory, show.say):
        write_text(directory / CONFIG, dump_config(cfg))
        rng = np.random.default_rng(cfg.solver.seed)
        target = cfg.model.integer_charge()
        first = cfg.solver.stages[0].bond
        if initial is not None:
            state = initial
        elif cfg.solver.init == "product":
            state = product_state(mpo.phys, cfg.model.sites, target)
        else:
            state = random_state(mpo.phys, cfg.model.sites, target, min(first, 16), rng)
        search = SectorSweeper(mpo, state, settings, rng)
        show.say(f"{cfg.name}: {cfg.model.family}, {cfg.model.sites} sites, "
                 f"charge {cfg.model.charge}, operator bond {max(mpo.bond_dims)}")
        return _search_and_finish(directory, cfg, mpo, search, rng, show, stop, note=note)


def _run_exact(directory: Path, cfg: RunConfig, fresh: bool = True, stream=None) -> int:
    """A quadratic chain through the exact engines (``solver.method: exact``); see mps.pipeline.exact_run."""
    from mps.pipeline.exact_run import run_exact

    if fresh and ((directory / CHECKPOINT).exists() or (directory / SUMMARY).exists()):
        raise InputError(f"{directory}: already holds a run; choose another output.dir / --out")
    _make(directory)
    show = ProgressLine(sweep_settings(cfg), stream)
    with RunLock(directory, show.say):
        write_text(directory / CONFIG, dump_config(cfg))
        report = run_exact(directory, cfg, show.say)
        _report_line(directory, cfg, report, show)
    return 0


def _make(directory: Path) -> None:
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise storage_error(directory, exc) from None


def _exact_config(directory: Path) -> RunConfig | None:
    """The config of an exact run in ``directory`` (None for a swept run)."""
    if not (directory / CONFIG).is_file():
        raise InputError(f"{directory}: not a run directory (no {CONFIG})")
    cfg = load_config(directory / CONFIG)
    return replace(cfg, output=replace(cfg.output, dir=str(directory))) if cfg.solver.method == "exact" else None


def resume(directory: str, stream=None, stop: Callable[[], bool] | None = None) -> int:
    """Continue the run in ``directory`` from its checkpoint (``stream``, ``stop`` as for run_config)."""
    directory = Path(directory)
    if _exact_config(directory) is not None:
        raise InputError(f"{directory}: an exact run (solver.method: exact) has nothing to resume; run it again")
    cfg = load_config(directory / CONFIG)
    cfg = replace(cfg, output=replace(cfg.output, dir=str(directory)))
    if not (directory / CHECKPOINT).exists():   # stopped before its first checkpoint: start again
        ProgressLine(sweep_settings(cfg), stream).say(
            f"{directory}: no checkpoint yet, starting the run from the beginning")
        return run_config(cfg, stream, stop)
    show = ProgressLine(sweep_settings(cfg), stream)
    with RunLock(directory, show.say):
        state, progress, rng_state, meta = load_checkpoint(directory / CHECKPOINT)
        if meta["model_hash"] != config_hash(cfg.model):
            raise CheckpointError(f"{directory}: the model in {CONFIG} differs from the one the checkpoint "
                                  "was computed for; only the solver section may change on resume")
        mpo = build_operator(cfg)
        settings = sweep_settings(cfg)
        if meta["solver_hash"] != solver_hash(cfg):
            progress.converged = False
        rng = _rng_from(rng_state, cfg.solver.seed)
        search = SectorSweeper(mpo, state, settings, rng, progress)
        where = f", bond step {progress.step}" if progress.step else ""
        show.say(f"{cfg.name}: resuming after sweep {progress.sweep}{where} (stage {progress.stage + 1})")
        previous = sum(r.seconds for r in progress.history)
        return _search_and_finish(directory, cfg, mpo, search, rng, show, stop, previous)


def load_run(directory: str | Path):
    """Config and stored state of a finished or interrupted run (for analysis and notebooks)."""
    directory = Path(directory)
    if not (directory / CONFIG).is_file():
        raise InputError(f"{directory}: not a run directory (no {CONFIG})")
    cfg = load_config(directory / CONFIG)
    state, progress, _, meta = load_checkpoint(directory / CHECKPOINT)
    if meta["model_hash"] != config_hash(cfg.model):
        raise CheckpointError(f"{directory}: {CONFIG} does not match the stored state")
    return cfg, state, progress


def analyze(directory: str, renyi=None, cuts=None) -> int:
    """Recompute the entanglement tables from the stored state, without solving again."""
    directory = Path(directory)
    if _exact_config(directory) is not None:
        raise InputError(f"{directory}: an exact run writes every table already; run it again to change them")
    cfg, state, _ = load_run(directory)
    with RunLock(directory):
        summary_path = directory / SUMMARY
        summary = json.loads(summary_path.read_text()) if summary_path.is_file() else {}
        _write_analysis(directory, cfg, state, summary, renyi, cuts)
        write_json(summary_path, summary)
    print(f"tables written to {directory}", file=sys.stderr)
    return 0


def bench(quick: bool = False) -> int:
    from mps.pipeline.bench import main as bench_main

    return bench_main(quick)


def compare(directory: str) -> int:
    """Redo the fits, the exact free-fermion comparison and the plots of a finished run."""
    directory = Path(directory)
    exact = _exact_config(directory)
    if exact is not None:
        return _run_exact(directory, exact, fresh=False)
    cfg, state, _ = load_run(directory)
    with RunLock(directory):
        _compare_and_draw(directory, cfg, state, ProgressLine(sweep_settings(cfg)))
    return 0


def scan(config_path: str, workers: int | None = None, scheduler: str | None = None) -> int:
    """Run every point of a config's scan section (see mps.pipeline.scan_run)."""
    from mps.pipeline.scan_run import scan as run_scan

    return run_scan(config_path, workers, scheduler)
