"""Registry of lattice model families: the YAML ``model.family`` name maps onto one entry here.

A family is data plus four small functions (local basis, list of terms, optional quadratic
single-particle matrix, default charge sector). Adding a family is one module that defines
``NAME``, ``DESCRIPTION``, ``CHARGE_NAMES``, ``COUPLINGS`` and the functions ``space``,
``terms``, ``single_particle`` and ``default_charge``, plus one ``register`` line at the bottom
of this file.

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

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import ModuleType

import numpy as np

from models import fermions, xxz
from mps.chain.lattice import LocalSpace, Term

SingleParticle = tuple[np.ndarray, float, float]


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
    charge_names : names of the conserved charges, in the order of ``LocalSpace.charges`` columns.
    couplings : coupling name -> default value; the only names a config may set.
    make_space : () -> LocalSpace.
    make_terms : (sites, couplings) -> list[Term], couplings complete (defaults filled).
    make_single_particle : (sites, couplings) -> (h, unit, offset_per_site) or None.
    make_default_charge : sites -> {charge name: physical value}.
    """

    name: str
    description: str
    charge_names: tuple[str, ...]
    couplings: dict[str, float] = field(hash=False)
    make_space: Callable[[], LocalSpace] = field(repr=False)
    make_terms: Callable[[int, Mapping[str, float]], list[Term]] = field(repr=False)
    make_single_particle: Callable[[int, Mapping[str, float]], SingleParticle | None] = field(
        repr=False
    )
    make_default_charge: Callable[[int], dict[str, float]] = field(repr=False)

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
        )

    def resolve_couplings(self, couplings: Mapping[str, float] | None = None) -> dict[str, float]:
        """Defaults overlaid with ``couplings``.

        Unknown names raise :class:`UnknownNameError` (a ``KeyError``) listing the valid ones.
        """
        given = dict(couplings or {})
        unknown = sorted(set(given) - set(self.couplings))
        if unknown:
            raise UnknownNameError(
                f"unknown coupling(s) {', '.join(unknown)} for family '{self.name}'; "
                f"valid: {', '.join(sorted(self.couplings))}"
            )
        return {name: float(given.get(name, default)) for name, default in self.couplings.items()}

    def space(self) -> LocalSpace:
        """Local basis, charges and operator matrices of one site."""
        return self.make_space()

    def terms(self, sites: int, couplings: Mapping[str, float] | None = None) -> list[Term]:
        """Hamiltonian of an open chain of ``sites`` sites as a list of terms (zero terms omitted)."""
        return self.make_terms(sites, self.resolve_couplings(couplings))

    def single_particle(
        self, sites: int, couplings: Mapping[str, float] | None = None
    ) -> SingleParticle | None:
        """``(h, unit, offset_per_site)`` when the chain is quadratic in fermions, else ``None``.

        H = sum_ij h_ij c+_i c_j + const; the block charge in physical units is
        ``unit * N_A + offset_per_site * l`` for a block of ``l`` sites holding ``N_A`` fermions.
        """
        return self.make_single_particle(sites, self.resolve_couplings(couplings))

    def default_charge(self, sites: int) -> dict[str, float]:
        """Charge sector (physical values) used when the config does not name one."""
        return self.make_default_charge(sites)


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


register(ModelFamily.from_module(xxz))
register(ModelFamily.from_module(fermions))
