"""Run configuration: read a YAML file safely, validate every field, fill defaults, freeze.

This is the input boundary of the pipeline (clean inputs here, assume them clean inside): a
config that passes :func:`load_config` names a registered model family with known couplings,
finite numbers, a charge sector that the chain can actually hold, and a sane solver budget.
Every refusal is a :class:`ConfigError` whose ``str()`` is one line, ``<field>: <what is wrong>``.

Schema (defaults in brackets; unknown keys at any level are refused)::

    name: str                                   [file stem]
    model:
      family: registry name (see models.family_names())
      sites: int >= 2
      couplings: {name: finite number}          [family defaults]
      charge: {charge name: physical value}     [family default sector]
    solver:
      stages: [{bond: int >= 1, sweeps: int >= 1, noise: number >= 0}]
                                                [[{bond: 32, sweeps: 2}, {bond: 128, sweeps: 6}];
                                                 noise 1e-5, 0 on the last stage]
      discard: number >= 0 [1e-10]   energy_tol: number > 0 [1e-9]   seed: int >= 0 [1]
      krylov_dim: int >= 2 [24]      init: random | product [random]
      eig_tol: number > 0 [1e-10] (Lanczos residual in the last stage; 1e-5 or eig_tol before)
    analysis:
      renyi: [number > 0 or "inf"] [[1, 2, 3, inf]]    cuts: all | [1..sites-1] [all]
      flux_points: int >= 3 [65]   spectrum_levels: int >= 1 [20]
      weight_floor: number in [0, 1) [1e-12]   resolve: charge name | joint [first charge]
      fit_window: auto | [lo, hi] cuts used by the field-theory fits [auto: L/8 .. 7L/8]
      correlations: bool, measure charge correlations and the correlation length [true]
    output:
      dir: str [runs/<name>, relative to the working directory]   plots: bool [true]

Numbers written as ``1e-10`` (which YAML 1.1 reads as a string) are accepted as numbers;
booleans are never numbers.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from models import ModelFamily, family_names, get_family
from mps.chain.lattice import Term


class InputError(Exception):
    """Bad user input (a path, a run directory, an option); the command line exits with code 2."""


class ConfigError(InputError):
    """A refused config field; ``str()`` is the single line ``<field>: <message>``."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(field, message)
        self.field = field
        self.message = message

    def __str__(self) -> str:
        return " ".join(f"{self.field}: {self.message}".split())


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class ModelConfig:
    """The chain: family name, number of sites, all couplings, target charge (physical values)."""

    family: str
    sites: int
    couplings: dict[str, float] = field(hash=False)
    charge: dict[str, float] = field(hash=False)

    def family_record(self) -> ModelFamily:
        """The registered :class:`models.ModelFamily`."""
        return get_family(self.family)

    def terms(self) -> list[Term]:
        """Hamiltonian terms of this chain."""
        return self.family_record().terms(self.sites, self.couplings)

    def integer_charge(self) -> tuple[int, ...]:
        """Target charge in integer units, ordered as the family's ``charge_names``."""
        space = self.family_record().space()
        return tuple(
            int(round(self.charge[name] / unit))
            for name, unit in zip(space.charge_names, space.charge_units)
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "family": self.family,
            "sites": self.sites,
            "couplings": dict(self.couplings),
            "charge": dict(self.charge),
        }


@dataclass(frozen=True)
class Stage:
    """One step of the bond-dimension ramp."""

    bond: int
    sweeps: int
    noise: float


@dataclass(frozen=True)
class SolverConfig:
    stages: tuple[Stage, ...]
    discard: float
    energy_tol: float
    seed: int
    krylov_dim: int
    eig_tol: float
    init: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "stages": [{"bond": s.bond, "sweeps": s.sweeps, "noise": s.noise} for s in self.stages],
            "discard": self.discard,
            "energy_tol": self.energy_tol,
            "seed": self.seed,
            "krylov_dim": self.krylov_dim,
            "eig_tol": self.eig_tol,
            "init": self.init,
        }


@dataclass(frozen=True)
class AnalysisConfig:
    renyi: tuple[float, ...]
    cuts: str | tuple[int, ...]
    flux_points: int
    spectrum_levels: int
    weight_floor: float
    resolve: str
    fit_window: tuple[int, int] | None = None
    correlations: bool = True

    def cut_list(self, sites: int) -> list[int]:
        """The cuts to analyse (left-block sizes), ``"all"`` expanded to 1..sites-1."""
        return list(range(1, sites)) if self.cuts == "all" else list(self.cuts)

    def to_dict(self) -> dict[str, Any]:
        return {
            "renyi": ["inf" if math.isinf(n) else n for n in self.renyi],
            "cuts": self.cuts if self.cuts == "all" else list(self.cuts),
            "flux_points": self.flux_points,
            "spectrum_levels": self.spectrum_levels,
            "weight_floor": self.weight_floor,
            "resolve": self.resolve,
            "fit_window": "auto" if self.fit_window is None else list(self.fit_window),
            "correlations": self.correlations,
        }


@dataclass(frozen=True)
class OutputConfig:
    dir: str
    plots: bool

    def to_dict(self) -> dict[str, Any]:
        return {"dir": self.dir, "plots": self.plots}


@dataclass(frozen=True)
class RunConfig:
    """A fully validated run configuration with every default filled in."""

    name: str
    model: ModelConfig
    solver: SolverConfig
    analysis: AnalysisConfig
    output: OutputConfig

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (YAML-safe types only) that :func:`parse_config` maps back to an equal config."""
        return {
            "name": self.name,
            "model": self.model.to_dict(),
            "solver": self.solver.to_dict(),
            "analysis": self.analysis.to_dict(),
            "output": self.output.to_dict(),
        }


# ----------------------------------------------------------------------------- entry points


def load_config(path: str | os.PathLike[str]) -> RunConfig:
    """Read, validate and resolve the YAML config at ``path`` (safe loader; no code is executed)."""
    p = Path(path)
    where = str(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(where, "no such config file") from None
    except IsADirectoryError:
        raise ConfigError(where, "is a directory, expected a YAML config file") from None
    except UnicodeDecodeError:
        raise ConfigError(where, "is not UTF-8 text") from None
    except OSError as exc:
        raise ConfigError(where, f"cannot be read ({exc.strerror or exc})") from None
    try:
        data = yaml.safe_load(text)
    except yaml.constructor.ConstructorError as exc:
        raise ConfigError(
            where, f"uses a YAML tag that safe loading refuses (plain data only): {_yaml_problem(exc)}"
        ) from None
    except yaml.YAMLError as exc:
        raise ConfigError(where, f"is not valid YAML: {_yaml_problem(exc)}") from None
    if data is None:
        raise ConfigError(where, "is empty; expected a mapping with keys " + ", ".join(_TOP))
    if not isinstance(data, Mapping):
        raise ConfigError(
            where, f"must hold a mapping with keys {', '.join(_TOP)}, got {_kind(data)}"
        )
    return parse_config(data, default_name=p.stem)


def parse_config(data: Mapping[str, Any], default_name: str = "run") -> RunConfig:
    """Validate an already-loaded config mapping; ``default_name`` is used when ``name`` is absent."""
    top = _section(data, "", _TOP, required=True)
    name = _name(top.get("name", default_name))
    model = _model(top.get("model"))
    solver = _solver(_section(top.get("solver"), "solver", _SOLVER))
    analysis = _analysis(_section(top.get("analysis"), "analysis", _ANALYSIS), model)
    output = _output(_section(top.get("output"), "output", _OUTPUT), name)
    return RunConfig(name=name, model=model, solver=solver, analysis=analysis, output=output)


def dump_config(config: RunConfig) -> str:
    """The resolved config as YAML text (keys in schema order)."""
    return yaml.safe_dump(config.to_dict(), sort_keys=False, default_flow_style=None)


def config_hash(model_section: ModelConfig | Mapping[str, Any]) -> str:
    """sha256 hex digest of the canonical JSON of the resolved model section.

    A mapping is validated and resolved first, so ``{"J": 1}`` and ``{"J": 1.0}`` or an omitted
    default give the same hash; used to refuse resuming a run with a different chain.
    """
    model = model_section if isinstance(model_section, ModelConfig) else _model(model_section)
    text = json.dumps(model.to_dict(), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# ----------------------------------------------------------------------------- sections

_TOP = ("name", "model", "solver", "analysis", "output")
_MODEL = ("family", "sites", "couplings", "charge")
_SOLVER = ("stages", "discard", "energy_tol", "seed", "krylov_dim", "eig_tol", "init")
_STAGE = ("bond", "sweeps", "noise")
_ANALYSIS = ("renyi", "cuts", "flux_points", "spectrum_levels", "weight_floor", "resolve", "fit_window",
             "correlations")
_OUTPUT = ("dir", "plots")

DEFAULT_STAGES = ((32, 2), (128, 6))
DEFAULT_NOISE = 1e-5
INIT_CHOICES = ("random", "product")


def _name(value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ConfigError("name", f"must be a non-empty string, got {_show(value)}")
    if "/" in value or "\\" in value or value in (".", ".."):
        raise ConfigError("name", f"must not contain path separators, got {_show(value)}")
    return value


def _model(value: Any) -> ModelConfig:
    sec = _section(value, "model", _MODEL, required=True)
    for key in ("family", "sites"):
        if key not in sec:
            raise ConfigError(f"model.{key}", "is required")
    try:
        fam = get_family(sec["family"])
    except KeyError:
        raise ConfigError(
            "model.family",
            f"unknown family {_show(sec['family'])}; valid: {', '.join(family_names())}",
        ) from None
    sites = _integer(sec["sites"], "model.sites", 2)
    given = _section(sec.get("couplings"), "model.couplings", tuple(fam.couplings), what="coupling")
    couplings = {
        key: (_real(given[key], f"model.couplings.{key}") if key in given else float(default))
        for key, default in fam.couplings.items()
    }
    charge = _charge(sec.get("charge"), fam, sites)
    return ModelConfig(family=fam.name, sites=sites, couplings=couplings, charge=charge)


def _charge(value: Any, fam: ModelFamily, sites: int) -> dict[str, float]:
    """Target charge in physical units, checked to be a multiple of the unit and reachable."""
    space = fam.space()
    given = _section(value, "model.charge", space.charge_names, what="charge")
    default = fam.default_charge(sites)
    target: list[int] = []
    for name, unit in zip(space.charge_names, space.charge_units):
        where = f"model.charge.{name}"
        q = _real(given[name], where) if name in given else float(default[name])
        k = q / unit
        if abs(k - round(k)) > 1e-9 * max(1.0, abs(k)):
            need = "a whole number" if unit == 1 else f"a multiple of {_fmt(unit)}"
            raise ConfigError(where, f"must be {need}, got {_show(given[name])}")
        target.append(int(round(k)))
    reach = reachable_charges(np.asarray(space.charges), sites)
    if not (reach == np.array(target)).all(axis=1).any():
        _unreachable(space.charge_names, space.charge_units, reach, target, sites)
    return {
        name: float(k * unit) for name, unit, k in zip(space.charge_names, space.charge_units, target)
    }


def reachable_charges(local: np.ndarray, sites: int) -> np.ndarray:
    """All total integer charge vectors of ``sites`` sites with local charges ``local`` (dim, k).

    Dynamic programme over sites on the set of reachable vectors, R_0 = {0} and
    R_{s+1} = {r + q : r in R_s, q a local charge}, with the set held as a boolean grid over
    its bounding box (cost ~ dim * sites * box, fine for k = 1 up to 10^4 sites).
    Returns the reachable vectors as rows (m, k), sorted lexicographically.
    """
    local = np.asarray(local, dtype=np.int64)
    local = local.reshape(len(local), -1)
    lo = local.min(axis=0)
    shifted = local - lo
    span = shifted.max(axis=0)
    grid = np.ones((1,) * local.shape[1], dtype=bool)  # shifted sums of zero sites: {0}
    for _ in range(sites):
        grown = np.zeros(tuple(np.add(grid.shape, span)), dtype=bool)
        for q in shifted:
            grown[tuple(slice(a, a + n) for a, n in zip(q, grid.shape))] |= grid
        grid = grown
    return np.argwhere(grid) + sites * lo


def _unreachable(
    names: tuple[str, ...], units: tuple[float, ...], reach: np.ndarray, target: list[int], sites: int
) -> None:
    if len(names) == 1:
        values = [_fmt(k * units[0]) for k in reach[:, 0]]
        steps = set(np.diff(reach[:, 0]).tolist())
        if len(values) > 6 and len(steps) == 1:
            allowed = ", ".join(values[:2] + ["..."] + values[-1:])
        else:
            allowed = ", ".join(values)
        raise ConfigError(
            f"model.charge.{names[0]}",
            f"must be one of {allowed} for {sites} sites, got {_fmt(target[0] * units[0])}",
        )
    ranges = "; ".join(
        f"{n} in [{_fmt(reach[:, i].min() * u)}, {_fmt(reach[:, i].max() * u)}]"
        for i, (n, u) in enumerate(zip(names, units))
    )
    got = ", ".join(f"{n}={_fmt(k * u)}" for n, u, k in zip(names, units, target))
    raise ConfigError("model.charge", f"{got} is not reachable with {sites} sites ({ranges})")


def _solver(sec: Mapping[str, Any]) -> SolverConfig:
    raw = sec.get("stages")
    if raw is None:
        raw = [{"bond": b, "sweeps": s} for b, s in DEFAULT_STAGES]
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "solver.stages", f"must be a non-empty list of {{bond, sweeps, noise}}, got {_show(raw)}"
        )
    stages = []
    for i, item in enumerate(raw):
        where = f"solver.stages[{i}]"
        st = _section(item, where, _STAGE, required=True)
        for key in ("bond", "sweeps"):
            if key not in st:
                raise ConfigError(f"{where}.{key}", "is required (an integer >= 1)")
        noise_default = DEFAULT_NOISE if i < len(raw) - 1 else 0.0
        stages.append(
            Stage(
                bond=_integer(st["bond"], f"{where}.bond", 1),
                sweeps=_integer(st["sweeps"], f"{where}.sweeps", 1),
                noise=_real(st.get("noise", noise_default), f"{where}.noise", lo=0.0),
            )
        )
    init = sec.get("init", "random")
    if init not in INIT_CHOICES:
        raise ConfigError("solver.init", f"must be one of {', '.join(INIT_CHOICES)}, got {_show(init)}")
    return SolverConfig(
        stages=tuple(stages),
        discard=_real(sec.get("discard", 1e-10), "solver.discard", lo=0.0),
        energy_tol=_real(sec.get("energy_tol", 1e-9), "solver.energy_tol", lo=0.0, lo_open=True),
        seed=_integer(sec.get("seed", 1), "solver.seed", 0),
        krylov_dim=_integer(sec.get("krylov_dim", 24), "solver.krylov_dim", 2),
        eig_tol=_real(sec.get("eig_tol", 1e-10), "solver.eig_tol", lo=0.0, lo_open=True),
        init=init,
    )


def _analysis(sec: Mapping[str, Any], model: ModelConfig) -> AnalysisConfig:
    raw = sec.get("renyi", [1, 2, 3, "inf"])
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "analysis.renyi", f"must be a non-empty list of numbers > 0 or \"inf\", got {_show(raw)}"
        )
    renyi: list[float] = []
    for i, n in enumerate(raw):
        where = f"analysis.renyi[{i}]"
        try:
            value = math.inf if n == "inf" else _real(n, where, lo=0.0, lo_open=True, finite=False)
        except ConfigError:
            raise ConfigError(where, f"must be a number > 0 or \"inf\", got {_show(n)}") from None
        if value in renyi:
            raise ConfigError(where, f"repeats the Renyi index {_show(n)}")
        renyi.append(value)
    cuts = _cuts(sec.get("cuts", "all"), model.sites)
    names = model.family_record().charge_names
    resolve = sec.get("resolve", names[0])
    if resolve not in (*names, "joint"):
        raise ConfigError(
            "analysis.resolve", f"must be one of {', '.join((*names, 'joint'))}, got {_show(resolve)}"
        )
    return AnalysisConfig(
        renyi=tuple(renyi),
        cuts=cuts,
        flux_points=_integer(sec.get("flux_points", 65), "analysis.flux_points", 3),
        spectrum_levels=_integer(sec.get("spectrum_levels", 20), "analysis.spectrum_levels", 1),
        weight_floor=_real(
            sec.get("weight_floor", 1e-12), "analysis.weight_floor", lo=0.0, hi=1.0, hi_open=True
        ),
        resolve=resolve,
        fit_window=_fit_window(sec.get("fit_window"), model.sites),
        correlations=_boolean(sec.get("correlations", True), "analysis.correlations"),
    )


def _fit_window(raw: Any, sites: int) -> tuple[int, int] | None:
    """Cuts (lo, hi) the field-theory fits use; None for the default L/8 .. 7L/8."""
    if raw is None or raw == "auto":
        return None
    where = "analysis.fit_window"
    if (not isinstance(raw, list) or len(raw) != 2 or not all(_is_int(v) for v in raw)
            or not 1 <= raw[0] < raw[1] <= sites - 1 or raw[1] - raw[0] < 3):
        raise ConfigError(where, f"must be auto or [lo, hi] with 1 <= lo, lo + 3 <= hi <= {sites - 1}, "
                                 f"got {_show(raw)}")
    return int(raw[0]), int(raw[1])


def _boolean(raw: Any, where: str) -> bool:
    if not isinstance(raw, bool):
        raise ConfigError(where, f"must be true or false, got {_show(raw)}")
    return raw


def _cuts(raw: Any, sites: int) -> str | tuple[int, ...]:
    if raw == "all":
        return "all"
    if not isinstance(raw, list) or not raw:
        raise ConfigError(
            "analysis.cuts", f"must be \"all\" or a non-empty list of integers, got {_show(raw)}"
        )
    cuts: list[int] = []
    for i, c in enumerate(raw):
        where = f"analysis.cuts[{i}]"
        if not _is_int(c) or not 1 <= c <= sites - 1:
            raise ConfigError(where, f"must be an integer in 1..{sites - 1}, got {_show(c)}")
        if c in cuts:
            raise ConfigError(where, f"repeats the cut {c}")
        cuts.append(int(c))
    return tuple(sorted(cuts))


def _output(sec: Mapping[str, Any], name: str) -> OutputConfig:
    out = sec.get("dir", f"runs/{name}")
    if not isinstance(out, str) or not out.strip():
        raise ConfigError("output.dir", f"must be a non-empty string, got {_show(out)}")
    plots = sec.get("plots", True)
    if not isinstance(plots, bool):
        raise ConfigError("output.plots", f"must be true or false, got {_show(plots)}")
    return OutputConfig(dir=out, plots=plots)


# ----------------------------------------------------------------------------- field checks

_NUMBER = re.compile(r"[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?")


def _section(
    value: Any, where: str, allowed: tuple[str, ...], required: bool = False, what: str = "key"
) -> Mapping[str, Any]:
    """A mapping whose keys are all in ``allowed``; ``None`` means empty unless ``required``."""
    label = where or "config"
    if value is None:
        if required:
            raise ConfigError(label, f"is required (a mapping with keys {', '.join(allowed)})")
        return {}
    if not isinstance(value, Mapping):
        raise ConfigError(
            label, f"must be a mapping with keys {', '.join(allowed)}, got {_show(value)}"
        )
    for key in value:
        if key not in allowed:
            path = f"{where}.{key}" if where else str(key)
            raise ConfigError(path, f"unknown {what}; allowed: {', '.join(sorted(allowed))}")
    return value


def _is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _integer(value: Any, where: str, minimum: int) -> int:
    if not _is_int(value) or value < minimum:
        raise ConfigError(where, f"must be an integer >= {minimum}, got {_show(value)}")
    return int(value)


def _real(
    value: Any,
    where: str,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    finite: bool = True,
) -> float:
    """A real number (not a bool; numeric strings such as "1e-10" accepted) within bounds."""
    if lo is None and hi is None:
        need = "a finite number"
    elif hi is None:
        need = f"a number {'>' if lo_open else '>='} {_fmt(lo)}"
    else:
        need = f"a number in {'(' if lo_open else '['}{_fmt(lo)}, {_fmt(hi)}{')' if hi_open else ']'}"
    x: float | None = None
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        x = float(value)
    elif isinstance(value, str) and _NUMBER.fullmatch(value.strip()):
        x = float(value)
    bad = x is None or math.isnan(x) or (finite and math.isinf(x))
    if not bad and lo is not None:
        bad = x < lo or (lo_open and x == lo)
    if not bad and hi is not None:
        bad = x > hi or (hi_open and x == hi)
    if bad:
        raise ConfigError(where, f"must be {need}, got {_show(value)}")
    return x


def _fmt(x: float) -> str:
    """Short text of a number: integers without a decimal point."""
    x = float(x)
    return str(int(x)) if x.is_integer() else repr(x)


def _show(value: Any) -> str:
    """How a user-written YAML value is quoted in messages (one line, at most 60 characters)."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif value is None:
        text = "nothing (null)"
    elif isinstance(value, float) and math.isnan(value):
        text = ".nan"
    elif isinstance(value, float) and math.isinf(value):
        text = ".inf" if value > 0 else "-.inf"
    else:
        text = repr(value)
    text = " ".join(text.split())
    return text if len(text) <= 60 else text[:57] + "..."


def _kind(value: Any) -> str:
    return {list: "a list", str: "a string"}.get(type(value), f"a {type(value).__name__}")


def _yaml_problem(exc: yaml.YAMLError) -> str:
    """One-line description of a YAML error with its line and column."""
    problem = getattr(exc, "problem", None) or str(exc)
    mark = getattr(exc, "problem_mark", None)
    where = f" (line {mark.line + 1}, column {mark.column + 1})" if mark is not None else ""
    return " ".join(f"{problem}{where}".split())
