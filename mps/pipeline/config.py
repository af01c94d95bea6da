"""Reading a run config: load a YAML file safely, validate every field, fill defaults, freeze.

This is the input boundary of the pipeline (clean inputs here, assume them clean inside): a
config that passes :func:`load_config` names a registered model family with known couplings,
finite numbers, a charge sector that the chain can actually hold, and a sane solver budget.
Every refusal is a :class:`~mps.pipeline.errors.ConfigError` whose ``str()`` is one line,
``<field>: <what is wrong>``. The schema and its defaults are listed in :mod:`mps.pipeline.schema`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from mps.pipeline.errors import ConfigError
from mps.pipeline.fields import boolean, integer, is_int, kind, real, section, show
from mps.pipeline.model_section import read_model
from mps.pipeline.schema import (
    ANALYSIS_KEYS,
    DEFAULT_ADMIX,
    DEFAULT_CHECKPOINT_SECONDS,
    DEFAULT_STAGES,
    INIT_CHOICES,
    METHOD_CHOICES,
    OUTPUT_KEYS,
    SOLVER_KEYS,
    STAGE_KEYS,
    TOP_KEYS,
    UPDATE_CHOICES,
    AnalysisConfig,
    ModelConfig,
    OutputConfig,
    RunConfig,
    SolverConfig,
    Stage,
)
from mps.pipeline.yaml_input import read_yaml_file

EXACT_SITES_LIMIT = 5000   # a dense 5000 x 5000 float matrix is 200 MB


def load_config(path: str | os.PathLike[str]) -> RunConfig:
    """Read, validate and resolve the YAML config at ``path`` (safe loader; no code is executed)."""
    data = load_mapping(path)
    if "scan" in data:
        raise ConfigError("scan", f"{path} describes a parameter scan; run it with 'chargewise scan {path}'")
    return parse_config(data, default_name=Path(path).stem)


def load_mapping(path: str | os.PathLike[str]) -> Mapping[str, Any]:
    """The YAML mapping at ``path``, read by :func:`mps.pipeline.yaml_input.read_yaml_file` (safe,
    bounded, duplicate keys refused); not yet validated (a scan config is expanded into points
    first, see :mod:`mps.pipeline.scan_plan`)."""
    where = str(path)
    data = read_yaml_file(path)
    if data is None:
        raise ConfigError(where, "is empty; expected a mapping with keys " + ", ".join(TOP_KEYS))
    if not isinstance(data, Mapping):
        raise ConfigError(
            where, f"must hold a mapping with keys {', '.join(TOP_KEYS)}, got {kind(data)}"
        )
    return data


def parse_config(data: Mapping[str, Any], default_name: str = "run") -> RunConfig:
    """Validate an already-loaded config mapping; ``default_name`` is used when ``name`` is absent."""
    top = section(data, "", TOP_KEYS, required=True)
    name = check_name(top.get("name", default_name))
    model = read_model(top.get("model"))
    solver = _solver(section(top.get("solver"), "solver", SOLVER_KEYS))
    if solver.method == "exact":
        _check_quadratic(model)
    analysis = _analysis(section(top.get("analysis"), "analysis", ANALYSIS_KEYS), model)
    output = _output(section(top.get("output"), "output", OUTPUT_KEYS), name)
    return RunConfig(name=name, model=model, solver=solver, analysis=analysis, output=output)


def config_hash(model_section: ModelConfig | Mapping[str, Any]) -> str:
    """sha256 hex digest of the canonical JSON of the resolved model section.

    A mapping is validated and resolved first, so ``{"J": 1}`` and ``{"J": 1.0}`` or an omitted
    default give the same hash; used to refuse resuming a run with a different chain.
    """
    model = model_section if isinstance(model_section, ModelConfig) else read_model(model_section)
    text = json.dumps(model.to_dict(), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# ----------------------------------------------------------------------------- sections


def check_name(value: Any) -> str:
    """The run name: a non-empty string that can be one directory name."""
    if not isinstance(value, str) or not value.strip():
        raise ConfigError("name", f"must be a non-empty string, got {show(value)}")
    if "/" in value or "\\" in value or value in (".", ".."):
        raise ConfigError("name", f"must not contain path separators, got {show(value)}")
    _path_text(value, "name")
    return value


def _path_text(value: str, where: str) -> None:
    """Refuse text no file name can hold (a NUL, or a lone surrogate from a YAML "\\ud800" escape)."""
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise ConfigError(where, f"must be text a file name can hold, got {show(value)}") from None
    if "\0" in value:
        raise ConfigError(where, f"must not contain a NUL character, got {show(value)}")


def _solver(sec: Mapping[str, Any]) -> SolverConfig:
    raw = sec.get("stages")
    if raw is None:
        raw = [{"bond": b, "sweeps": s} for b, s in DEFAULT_STAGES]
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "solver.stages", f"must be a non-empty list of {{bond, sweeps, admix}}, got {show(raw)}"
        )
    stages = []
    for i, item in enumerate(raw):
        where = f"solver.stages[{i}]"
        st = section(item, where, STAGE_KEYS, required=True)
        for key in ("bond", "sweeps"):
            if key not in st:
                raise ConfigError(f"{where}.{key}", "is required (an integer >= 1)")
        admix_default = DEFAULT_ADMIX if i < len(raw) - 1 else 0.0
        stages.append(
            Stage(
                bond=integer(st["bond"], f"{where}.bond", 1),
                sweeps=integer(st["sweeps"], f"{where}.sweeps", 1),
                admix=real(st.get("admix", admix_default), f"{where}.admix", lo=0.0),
            )
        )
    method = sec.get("method", "sweeps")
    if method not in METHOD_CHOICES:
        raise ConfigError("solver.method", f"must be one of {', '.join(METHOD_CHOICES)}, got {show(method)}")
    update = sec.get("update", "auto")
    if update not in UPDATE_CHOICES:
        raise ConfigError("solver.update", f"must be one of {', '.join(UPDATE_CHOICES)}, got {show(update)}")
    init = sec.get("init", "random")
    if init not in INIT_CHOICES:
        raise ConfigError("solver.init", f"must be one of {', '.join(INIT_CHOICES)}, got {show(init)}")
    return SolverConfig(
        stages=tuple(stages),
        discard=real(sec.get("discard", 1e-10), "solver.discard", lo=0.0),
        energy_tol=real(sec.get("energy_tol", 1e-9), "solver.energy_tol", lo=0.0, lo_open=True),
        seed=integer(sec.get("seed", 1), "solver.seed", 0),
        lanczos_vectors=integer(sec.get("lanczos_vectors", 24), "solver.lanczos_vectors", 2),
        lanczos_restarts=integer(sec.get("lanczos_restarts", 4), "solver.lanczos_restarts", 0),
        lanczos_tol=real(sec.get("lanczos_tol", 1e-10), "solver.lanczos_tol", lo=0.0, lo_open=True),
        init=init,
        method=method,
        update=update,
    )


def _check_quadratic(model: ModelConfig) -> None:
    """``solver.method: exact`` needs a chain the exact engines describe, with one conserved charge,
    and short enough for their dense L x L matrices (the check below already builds one)."""
    if model.sites > EXACT_SITES_LIMIT:
        raise ConfigError("model.sites", f"must be at most {EXACT_SITES_LIMIT} with solver.method exact (the "
                                         f"exact engines hold dense sites x sites matrices), got {model.sites}")
    fam = model.family_record()
    if len(model.space().charge_names) == 1:
        if fam.single_particle(model.sites, model.couplings, model.options) is not None and not fam.species:
            return
        if fam.scalar_masses(model.sites, model.couplings, model.options) is not None:
            return
    raise ConfigError("solver.method", "exact needs a quadratic chain with one conserved charge (fermions with "
                                       "V = 0, xxz with Delta = 0, complex-scalar with lam = 0); use sweeps")


def _analysis(sec: Mapping[str, Any], model: ModelConfig) -> AnalysisConfig:
    raw = sec.get("renyi", [1, 2, 3, "inf"])
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "analysis.renyi", f"must be a non-empty list of numbers > 0 or \"inf\", got {show(raw)}"
        )
    renyi: list[float] = []
    for i, n in enumerate(raw):
        where = f"analysis.renyi[{i}]"
        try:
            value = math.inf if n == "inf" else real(n, where, lo=0.0, lo_open=True, finite=False)
        except ConfigError:
            raise ConfigError(where, f"must be a number > 0 or \"inf\", got {show(n)}") from None
        if value in renyi:
            raise ConfigError(where, f"repeats the Renyi index {show(n)}")
        renyi.append(value)
    cuts = _cuts(sec.get("cuts", "all"), model.sites)
    names = model.space().charge_names
    resolve = sec.get("resolve", names[0])
    if resolve not in (*names, "joint"):
        raise ConfigError(
            "analysis.resolve", f"must be one of {', '.join((*names, 'joint'))}, got {show(resolve)}"
        )
    return AnalysisConfig(
        renyi=tuple(renyi),
        cuts=cuts,
        flux_points=integer(sec.get("flux_points", 65), "analysis.flux_points", 3),
        spectrum_levels=integer(sec.get("spectrum_levels", 20), "analysis.spectrum_levels", 1),
        weight_floor=real(
            sec.get("weight_floor", 1e-12), "analysis.weight_floor", lo=0.0, hi=1.0, hi_open=True
        ),
        resolve=resolve,
        fit_window=_fit_window(sec.get("fit_window"), model.sites),
        correlations=boolean(sec.get("correlations", True), "analysis.correlations"),
    )


def _fit_window(raw: Any, sites: int) -> tuple[int, int] | None:
    """Cuts (lo, hi) the field-theory fits use; None for the default L/8 .. 7L/8."""
    if raw is None or raw == "auto":
        return None
    where = "analysis.fit_window"
    if (not isinstance(raw, list) or len(raw) != 2 or not all(is_int(v) for v in raw)
            or not 1 <= raw[0] < raw[1] <= sites - 1 or raw[1] - raw[0] < 3):
        raise ConfigError(where, f"must be auto or [lo, hi] with 1 <= lo, lo + 3 <= hi <= {sites - 1}, "
                                 f"got {show(raw)}")
    return int(raw[0]), int(raw[1])


def _cuts(raw: Any, sites: int) -> str | tuple[int, ...]:
    if raw == "all":
        return "all"
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "analysis.cuts", f"must be \"all\" or a non-empty list of integers, got {show(raw)}"
        )
    cuts: list[int] = []
    for i, c in enumerate(raw):
        where = f"analysis.cuts[{i}]"
        if not is_int(c) or not 1 <= c <= sites - 1:
            raise ConfigError(where, f"must be an integer in 1..{sites - 1}, got {show(c)}")
        if c in cuts:
            raise ConfigError(where, f"repeats the cut {c}")
        cuts.append(int(c))
    return tuple(sorted(cuts))


def _output(sec: Mapping[str, Any], name: str) -> OutputConfig:
    out = check_dir(sec.get("dir", f"runs/{name}"))
    every = real(sec.get("checkpoint_seconds", DEFAULT_CHECKPOINT_SECONDS), "output.checkpoint_seconds", lo=0.0)
    return OutputConfig(dir=out, plots=boolean(sec.get("plots", True), "output.plots"), checkpoint_seconds=every)


def check_dir(value: Any) -> str:
    """``output.dir``: a non-empty string that can be a path."""
    if not isinstance(value, str) or not value.strip():
        raise ConfigError("output.dir", f"must be a non-empty string, got {show(value)}")
    _path_text(value, "output.dir")
    return value
