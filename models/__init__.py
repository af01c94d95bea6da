"""Registry of lattice model families: the YAML ``model.family`` name maps onto one entry here.

A family is data plus four small functions (local basis, list of terms, optional quadratic
single-particle matrix, default charge sector). Adding a family is one module that defines
``NAME``, ``DESCRIPTION``, ``CHARGE_NAMES``, ``COUPLINGS`` and the functions ``space(opts)``,
``terms(sites, couplings, opts)``, ``single_particle(sites, couplings, opts)`` and
``default_charge(sites, opts)``, plus one ``register`` line at the bottom of this file. Optional
module attributes: ``OPTIONS`` (further ``model:`` keys with their defaults, e.g. ``nmax``),
``VARIANCE_SLOPES`` (charge name -> coefficient of K log l_eff in the block charge variance, for
the Luttinger-parameter fits), ``FREE_COUPLINGS`` (coupling names chosen by the user) and
``SPECIES`` (when ``single_particle`` describes several independent fermion species: the integer
charge vector one particle of each species carries) and ``scalar_masses(sites, couplings, opts)``
(the per-site masses m_j of a quadratic complex-scalar chain, for the exact free-boson engine;
None when the chain is not quadratic).

Examples
--------
>>> from models import get_family
>>> fam = get_family("xxz")
>>> fam.charge_names
('Sz',)
>>> len(fam.terms(4, {"Delta": 0.5}))  # 3 bonds x (S+S-, S-S+, SzSz)
9
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import ModuleType
from typing import Any

import numpy as np

from models import bosons, fermions, hubbard, scalar, spin1, written, xxz
from mps.chain.lattice import LocalSpace, Term

SingleParticle = tuple[np.ndarray, float, float]
Options = Mapping[str, Any]


def _no_scalar_masses(sites: int, couplings: Mapping[str, float], opts: Options) -> None:
    """Default hook: the family is not a quadratic complex-scalar chain."""
    return None


# sigma^2 = (K/(2 pi^2)) log l_eff for one charge of a one-component Luttinger liquid, one
# entangling point (DESIGN.md section 5).
ONE_COMPONENT_SLOPE = 1.0 / (2.0 * math.pi**2)


class UnknownNameError(KeyError):
    """A name that is not in a registry; ``str()`` is the plain message (no quotes)."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


@dataclass(frozen=True)
class ModelFamily:
    """One lattice model family.

    Attributes
    ----------
    name : registry key, the YAML ``model.family`` value.
    description : one line for help texts.
    charge_names : names of the conserved charges, in the order of ``LocalSpace.charges`` columns
        (for chains written in YAML they follow the chosen basis: see :meth:`space`).
    couplings : coupling name -> default value; the only names a config may set (unless
        ``free_couplings``: then the config names its own couplings and there are no defaults).
    options : further ``model:`` keys of the family -> default (e.g. ``nmax``).
    variance_slopes : charge name -> s with sigma^2 = K s log l_eff (Luttinger-parameter fits).
    make_space : (opts) -> LocalSpace.
    make_terms : (sites, couplings, opts) -> list[Term], couplings complete (defaults filled).
    make_single_particle : (sites, couplings, opts) -> (h, unit, offset_per_site) or None.
    make_default_charge : (sites, opts) -> {charge name: physical value}.
    free_couplings : the config names the couplings (written chains).
    species : with a single-particle matrix, the integer charge vector of one particle of each
        independent species (None for one species).
    make_scalar_masses : (sites, couplings, opts) -> per-site masses m_j (length L) of a quadratic
        complex-scalar chain, or None (the default for every other family).
    """

    name: str
    description: str
    charge_names: tuple[str, ...]
    couplings: dict[str, float] = field(hash=False)
    make_space: Callable[[Options], LocalSpace] = field(repr=False)
    make_terms: Callable[[int, Mapping[str, float], Options], list[Term]] = field(repr=False)
    make_single_particle: Callable[[int, Mapping[str, float], Options], SingleParticle | None] = field(
        repr=False
    )
    make_default_charge: Callable[[int, Options], dict[str, float]] = field(repr=False)
    options: dict[str, Any] = field(default_factory=dict, hash=False)
    variance_slopes: dict[str, float] = field(default_factory=dict, hash=False)
    free_couplings: bool = False
    species: tuple[tuple[int, ...], ...] | None = None
    make_scalar_masses: Callable[[int, Mapping[str, float], Options], np.ndarray | None] = field(
        default=_no_scalar_masses, repr=False
    )

    @classmethod
    def from_module(cls, module: ModuleType) -> ModelFamily:
        """Build a family from a module that follows the layout described in this package."""
        return cls(
            name=module.NAME,
            description=module.DESCRIPTION,
            charge_names=tuple(module.CHARGE_NAMES),
            couplings=dict(module.COUPLINGS),
            make_space=module.space,
            make_terms=module.terms,
            make_single_particle=module.single_particle,
            make_default_charge=module.default_charge,
            options=dict(getattr(module, "OPTIONS", {})),
            variance_slopes=dict(getattr(module, "VARIANCE_SLOPES", {})),
            free_couplings=bool(getattr(module, "FREE_COUPLINGS", False)),
            species=getattr(module, "SPECIES", None),
            make_scalar_masses=getattr(module, "scalar_masses", _no_scalar_masses),
        )

    def resolve_couplings(self, couplings: Mapping[str, float] | None = None) -> dict[str, float]:
        """Defaults overlaid with ``couplings``.

        Unknown names raise :class:`UnknownNameError` (a ``KeyError``) listing the valid ones.
        """
        given = dict(couplings or {})
        if self.free_couplings:
            return {name: float(v) for name, v in given.items()}
        unknown = sorted(set(given) - set(self.couplings))
        if unknown:
            raise UnknownNameError(
                f"unknown coupling(s) {', '.join(unknown)} for family '{self.name}'; "
                f"valid: {', '.join(sorted(self.couplings))}"
            )
        return {name: float(given.get(name, default)) for name, default in self.couplings.items()}

    def resolve_options(self, options: Options | None = None) -> dict[str, Any]:
        """Defaults of the family's further ``model:`` keys overlaid with ``options``."""
        given = dict(options or {})
        unknown = sorted(set(given) - set(self.options))
        if unknown:
            raise UnknownNameError(
                f"unknown model key(s) {', '.join(unknown)} for family '{self.name}'; "
                f"valid: {', '.join(sorted(self.options)) or 'none'}"
            )
        return {**self.options, **given}

    def space(self, options: Options | None = None) -> LocalSpace:
        """Local basis, charges and operator matrices of one site."""
        return self.make_space(self.resolve_options(options))

    def terms(self, sites: int, couplings: Mapping[str, float] | None = None,
              options: Options | None = None) -> list[Term]:
        """Hamiltonian of an open chain of ``sites`` sites as a list of terms (zero terms omitted)."""
        return self.make_terms(sites, self.resolve_couplings(couplings), self.resolve_options(options))

    def single_particle(
        self, sites: int, couplings: Mapping[str, float] | None = None, options: Options | None = None
    ) -> SingleParticle | None:
        """``(h, unit, offset_per_site)`` when the chain is quadratic in fermions, else ``None``.

        H = sum_ij h_ij c+_i c_j + const; the block charge in physical units is
        ``unit * N_A + offset_per_site * l`` for a block of ``l`` sites holding ``N_A`` fermions.
        """
        return self.make_single_particle(sites, self.resolve_couplings(couplings),
                                         self.resolve_options(options))

    def scalar_masses(
        self, sites: int, couplings: Mapping[str, float] | None = None, options: Options | None = None
    ) -> np.ndarray | None:
        """Per-site masses m_j (length ``sites``) when the chain is a quadratic complex scalar, else None.

        H = sum_j [pi+_j pi_j + m_j^2 phi+_j phi_j] + sum over bonds incl. the Dirichlet ends of
        |phi_{j+1} - phi_j|^2 (DESIGN.md section 3), so V = diag(m_j^2 + 2) - shift - shift^T.
        """
        return self.make_scalar_masses(sites, self.resolve_couplings(couplings), self.resolve_options(options))

    def default_charge(self, sites: int, options: Options | None = None) -> dict[str, float]:
        """Charge sector (physical values) used when the config does not name one."""
        return self.make_default_charge(sites, self.resolve_options(options))

    def variance_slope(self, charge: str) -> float:
        """s in sigma^2 = K s log l_eff for ``charge`` (one-component value unless the family says)."""
        return self.variance_slopes.get(charge, ONE_COMPONENT_SLOPE)


_REGISTRY: dict[str, ModelFamily] = {}


def register(family: ModelFamily) -> ModelFamily:
    """Add ``family`` under ``family.name``; a name can be registered once."""
    if family.name in _REGISTRY:
        raise ValueError(f"model family '{family.name}' is already registered")
    _REGISTRY[family.name] = family
    return family


def get_family(name: str) -> ModelFamily:
    """The family registered as ``name``.

    Raises :class:`UnknownNameError` (a ``KeyError``) listing the valid names otherwise.
    """
    try:
        return _REGISTRY[name]
    except (KeyError, TypeError):
        raise UnknownNameError(
            f"unknown model family {name!r}; valid: {', '.join(family_names())}"
        ) from None


def family_names() -> list[str]:
    """Registered family names, sorted."""
    return sorted(_REGISTRY)


for _module in (xxz, fermions, hubbard, bosons, spin1, scalar, written):
    register(ModelFamily.from_module(_module))
