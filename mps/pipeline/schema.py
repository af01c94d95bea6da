"""Run configuration records: the schema of a config file, its defaults, and the frozen records a
validated config becomes.

Reading and validating a file is :mod:`mps.pipeline.config`; this module only describes the
result. Schema (defaults in brackets; unknown keys at any level are refused)::

    name: str                                   [file stem]
    model:
      family: registry name (see models.family_names())
      sites: int >= 2
      couplings: {name: finite number}          [family defaults]
      charge: {charge name: physical value}     [family default sector]
      nmax: int in 1..12                        [bosons: 4]
      (family written only) basis: catalogue name, nmax (boson bases), keep_charges: [charge names]
      [all], terms: [{product: str, coef: number | coupling | {value, stagger, dimer} | {per_site},
      add_conjugate: bool [false]}]; see mps.pipeline.model_section
    solver:
      method: sweeps | exact                    [sweeps; exact: quadratic one-charge chains only, through
                                                 the exact free-field engines, no sweeps]
      stages: [{bond: int >= 1, sweeps: int >= 1, admix: number >= 0}]
                                                [[{bond: 32, sweeps: 2}, {bond: 128, sweeps: 6}];
                                                 admix 1e-5, 0 on the last stage]
      discard: number >= 0 [1e-10]   energy_tol: number > 0 [1e-9]   seed: int >= 0 [1]
      lanczos_vectors: int >= 2 [24]  lanczos_restarts: int >= 0 [4]  init: random | product [random]
      lanczos_tol: number > 0 [1e-10] (Lanczos residual in the last stage; 1e-5 or lanczos_tol before)
    analysis:
      renyi: [number > 0 or "inf"] [[1, 2, 3, inf]]    cuts: all | [1..sites-1] [all]
      flux_points: int >= 3 [65]   spectrum_levels: int >= 1 [20]
      weight_floor: number in [0, 1) [1e-12]   resolve: charge name | joint [first charge]
      fit_window: auto | [lo, hi] cuts used by the field-theory fits [auto: L/8 .. 7L/8]
      correlations: bool, measure charge correlations and the correlation length [true]
    output:
      dir: str [runs/<name>, relative to the working directory]   plots: bool [true]
      checkpoint_seconds: number >= 0, also checkpoint inside a sweep once this long has passed
                          since the last checkpoint [600]
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import yaml

from models import ModelFamily, get_family
from mps.chain.lattice import LocalSpace, Term

# key names of each section, in the order they are written back

TOP_KEYS = ("name", "model", "solver", "analysis", "output")
MODEL_KEYS = ("family", "sites", "couplings", "charge")   # plus the family's options
SOLVER_KEYS = ("method", "stages", "discard", "energy_tol", "seed", "lanczos_vectors", "lanczos_restarts",
               "lanczos_tol", "init", "update")
STAGE_KEYS = ("bond", "sweeps", "admix")
ANALYSIS_KEYS = ("renyi", "cuts", "flux_points", "spectrum_levels", "weight_floor", "resolve", "fit_window",
             "correlations")
OUTPUT_KEYS = ("dir", "plots", "checkpoint_seconds")
DEFAULT_CHECKPOINT_SECONDS = 600.0

DEFAULT_STAGES = ((32, 2), (128, 6))
DEFAULT_ADMIX = 1e-5
INIT_CHOICES = ("random", "product")
METHOD_CHOICES = ("sweeps", "exact")
UPDATE_CHOICES = ("auto", "two-site", "single-site")


@dataclass(frozen=True)
class ModelConfig:
    """The chain: family name, number of sites, all couplings, target charge (physical values),
    and the family's further keys (``options``: nmax; basis, conserve and terms of written chains)."""

    family: str
    sites: int
    couplings: dict[str, float] = field(hash=False)
    charge: dict[str, float] = field(hash=False)
    options: dict[str, Any] = field(default_factory=dict, hash=False)

    def family_record(self) -> ModelFamily:
        """The registered :class:`models.ModelFamily`."""
        return get_family(self.family)

    def space(self) -> LocalSpace:
        """The local basis of this chain (its charge names and units)."""
        return self.family_record().space(self.options)

    def terms(self) -> list[Term]:
        """Hamiltonian terms of this chain."""
        return self.family_record().terms(self.sites, self.couplings, self.options)

    def integer_charge(self) -> tuple[int, ...]:
        """Target charge in integer units, ordered as the space's ``charge_names``."""
        space = self.space()
        return tuple(
            int(round(self.charge[name] / unit))
            for name, unit in zip(space.charge_names, space.charge_units)
        )

    def to_dict(self) -> dict[str, Any]:
        out = {
            "family": self.family,
            "sites": self.sites,
            "couplings": dict(self.couplings),
            "charge": dict(self.charge),
        }
        for key, value in self.options.items():
            if key == "terms":
                out[key] = [t.to_dict() for t in value]
            elif key == "keep_charges" and value is not None:
                out[key] = list(value)
            elif value is not None:
                out[key] = value
        return out


@dataclass(frozen=True)
class Stage:
    """One step of the bond-dimension ramp."""

    bond: int
    sweeps: int
    admix: float


@dataclass(frozen=True)
class SolverConfig:
    stages: tuple[Stage, ...]
    discard: float
    energy_tol: float
    seed: int
    lanczos_vectors: int
    lanczos_restarts: int
    lanczos_tol: float
    init: str
    method: str = "sweeps"
    update: str = "auto"

    def to_dict(self) -> dict[str, Any]:
        return {
            "method": self.method,
            "update": self.update,
            "stages": [{"bond": s.bond, "sweeps": s.sweeps, "admix": s.admix} for s in self.stages],
            "discard": self.discard,
            "energy_tol": self.energy_tol,
            "seed": self.seed,
            "lanczos_vectors": self.lanczos_vectors,
            "lanczos_restarts": self.lanczos_restarts,
            "lanczos_tol": self.lanczos_tol,
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
    checkpoint_seconds: float = DEFAULT_CHECKPOINT_SECONDS

    def to_dict(self) -> dict[str, Any]:
        return {"dir": self.dir, "plots": self.plots, "checkpoint_seconds": self.checkpoint_seconds}


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


def dump_config(config: RunConfig) -> str:
    """The resolved config as YAML text (keys in schema order)."""
    return yaml.safe_dump(config.to_dict(), sort_keys=False, default_flow_style=None)
