"""Reading the ``model:`` section of a config: family, size, couplings, charge sector, and the
family's own keys (``nmax`` for bosons; ``basis``, ``nmax``, ``keep_charges`` and ``terms`` of a chain
written in YAML).

A written chain's terms, in the YAML form this module reads (see :mod:`models.written`)::

    terms:
      - product: "S^+(j) S^-(j+2)"      # operators on sites j + offset, in product order
        coef: 0.5*J2                    # a number, a coupling name (J2, -J2, 0.5*J2), or
                                        # {value: .., stagger: .., dimer: .., random: .., seed: ..}
                                        # or {per_site: [..]}; random: uniform disorder of that
                                        # width, drawn from seed (a number or a coupling)
        add_conjugate: true                   # add the Hermitian conjugate [false]

Every refusal is one line ``model.<field>: <what is wrong>``; terms that change a conserved
charge, hold an odd number of fermion operators, use unknown operators or couplings, or never fit
on the chain are refused here, before any solving. So are sizes whose check alone would take
minutes or gigabytes: more than :data:`SITES_LIMIT` sites, a charge-sector check beyond
:data:`CHARGE_CHECK_BUDGET` (it grows as sites^(k+1) for k charges), a written chain of more than
:data:`PLACEMENT_LIMIT` placed terms, and texts longer than :data:`TEXT_LIMIT` where a short
product or coefficient is expected.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Any

import numpy as np

from models import ModelFamily, family_names, get_family
from models.bases import CATALOGUE, NMAX_LIMIT, basis_names, make_basis
from models.terms import Amount, SitePattern, TermError, parse_amount, parse_product
from models.written import WrittenTerm, WrittenTermError
from mps.blocks.charges import reachable_totals
from mps.chain.lattice import LocalSpace
from mps.pipeline.errors import ConfigError
from mps.pipeline.fields import boolean, fmt, integer, is_int, kind, real, section, show
from mps.pipeline.schema import MODEL_KEYS, ModelConfig

TERM_KEYS = ("product", "coef", "add_conjugate")
PATTERN_KEYS = ("value", "stagger", "dimer", "per_site", "random", "seed")
_COUPLING_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
SITES_LIMIT = 100_000             # far beyond any matrix-product-state run on one machine
CHARGE_CHECK_BUDGET = 3 * 10**10  # grid cells the reachability check may visit (about 2 s)
PLACEMENT_LIMIT = 300_000         # placed terms of a written chain built at check time (about 3 s)
TEXT_LIMIT = 1000                 # characters of a product or coefficient text


def read_model(value: Any) -> ModelConfig:
    """Validate the model section and resolve its defaults."""
    if isinstance(value, Mapping) and "family" in value:
        fam = _family(value["family"])
        allowed = MODEL_KEYS + tuple(fam.options)
    else:
        fam, allowed = None, MODEL_KEYS
    sec = section(value, "model", allowed, required=True)
    for key in ("family", "sites"):
        if key not in sec:
            raise ConfigError(f"model.{key}", "is required")
    sites = integer(sec["sites"], "model.sites", 2, SITES_LIMIT)
    if fam.free_couplings:
        options = _written_options(sec)
        couplings = _named_couplings(sec.get("couplings"))
    else:
        options = {key: _option(key, sec[key], default) if key in sec else default
                   for key, default in fam.options.items()}
        given = section(sec.get("couplings"), "model.couplings", tuple(fam.couplings), what="coupling")
        couplings = {
            key: (real(given[key], f"model.couplings.{key}") if key in given else float(default))
            for key, default in fam.couplings.items()
        }
    space = fam.space(options)
    _check_reach_cost(space, sites)   # before any placing: both take long on too long a chain
    if fam.free_couplings:
        _check_written(fam, sites, couplings, options)
    charge = _charge(sec.get("charge"), fam, space, sites, options)
    return ModelConfig(family=fam.name, sites=sites, couplings=couplings, charge=charge, options=options)


def _family(name: Any) -> ModelFamily:
    try:
        return get_family(name)
    except KeyError:
        raise ConfigError("model.family", f"unknown family {show(name)}; valid: {', '.join(family_names())}") \
            from None


def _option(key: str, raw: Any, default: Any) -> Any:
    if key == "nmax":
        return _nmax(raw)
    raise ConfigError(f"model.{key}", "is not a key this version can read")  # a family with a new option


def _nmax(raw: Any) -> int:
    n = integer(raw, "model.nmax", 1)
    if n > NMAX_LIMIT:
        raise ConfigError("model.nmax", f"must be an integer in 1..{NMAX_LIMIT}, got {show(raw)}")
    return n


# ----------------------------------------------------------------------------- charge sector
def _charge(value: Any, fam: ModelFamily, space: LocalSpace, sites: int, options: dict) -> dict[str, float]:
    """Target charge in physical units, checked to be a multiple of the unit and reachable."""
    given = section(value, "model.charge", space.charge_names, what="charge")
    if fam.free_couplings:
        missing = [n for n in space.charge_names if n not in given]
        if missing:
            raise ConfigError(f"model.charge.{missing[0]}",
                              f"is required for a written chain (charges: {', '.join(space.charge_names)})")
        default = {}
    else:
        default = fam.default_charge(sites, options)
    target: list[int] = []
    for name, unit in zip(space.charge_names, space.charge_units):
        where = f"model.charge.{name}"
        q = real(given[name], where) if name in given else float(default[name])
        k = q / unit
        if not math.isfinite(k):   # 1e308 in units of 1/2
            raise ConfigError(where, f"must be a charge that {sites} sites can hold, got {show(given[name])}")
        if abs(k - round(k)) > 1e-9 * max(1.0, abs(k)):
            need = "a whole number" if unit == 1 else f"a multiple of {fmt(unit)}"
            raise ConfigError(where, f"must be {need}, got {show(given[name])}")
        target.append(int(round(k)))
    reach = reachable_totals(np.asarray(space.charges), sites)
    bounds = zip(target, reach.min(axis=0).tolist(), reach.max(axis=0).tolist())
    inside = all(lo <= t <= hi for t, lo, hi in bounds)   # (outside, np.array(target) may overflow int64)
    if not inside or not (reach == np.array(target)).all(axis=1).any():
        _unreachable(space.charge_names, space.charge_units, reach, target, sites)
    return {
        name: float(k * unit) for name, unit, k in zip(space.charge_names, space.charge_units, target)
    }


def _reach_cost(charges: np.ndarray, sites: int) -> int:
    """Grid cells :func:`reachable_totals` visits for ``sites`` sites (an upper bound, exact integers)."""
    span = charges.max(axis=0) - charges.min(axis=0)
    return len(charges) * sites * math.prod(sites * int(s) + 1 for s in span)


def _check_reach_cost(space: LocalSpace, sites: int) -> None:
    """Refuse a chain too long for the charge-sector check of its local space (the bound is steep
    for two charges: about a thousand Hubbard sites), naming the largest length that can be checked."""
    charges = np.asarray(space.charges).reshape(space.dim, -1)
    if _reach_cost(charges, sites) <= CHARGE_CHECK_BUDGET:
        return
    lo, hi = 2, sites
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (mid, hi) if _reach_cost(charges, mid) <= CHARGE_CHECK_BUDGET else (lo, mid)
    raise ConfigError("model.sites", f"must be at most {lo} for this local space (the check that the charge "
                                     f"sector exists grows as sites^{charges.shape[1] + 1}), got {sites}")


def _unreachable(
    names: tuple[str, ...], units: tuple[float, ...], reach: np.ndarray, target: list[int], sites: int
) -> None:
    if len(names) == 1:
        values = [fmt(k * units[0]) for k in reach[:, 0]]
        steps = set(np.diff(reach[:, 0]).tolist())
        if len(values) > 6 and len(steps) == 1:
            allowed = ", ".join(values[:2] + ["..."] + values[-1:])
        else:
            allowed = ", ".join(values)
        raise ConfigError(
            f"model.charge.{names[0]}",
            f"must be one of {allowed} for {sites} sites, got {fmt(target[0] * units[0])}",
        )
    ranges = "; ".join(
        f"{n} in [{fmt(reach[:, i].min() * u)}, {fmt(reach[:, i].max() * u)}]"
        for i, (n, u) in enumerate(zip(names, units))
    )
    got = ", ".join(f"{n}={fmt(k * u)}" for n, u, k in zip(names, units, target))
    raise ConfigError("model.charge", f"{got} is not reachable with {sites} sites ({ranges})")


# ----------------------------------------------------------------------------- written chains
def _written_options(sec: Mapping[str, Any]) -> dict[str, Any]:
    basis = sec.get("basis")
    if not isinstance(basis, str) or basis not in CATALOGUE:
        raise ConfigError("model.basis", f"must be one of {', '.join(basis_names())}, got {show(basis)}")
    if CATALOGUE[basis].needs_nmax:
        if "nmax" not in sec:
            raise ConfigError("model.nmax", f"is required for basis {basis} (an integer in 1..{NMAX_LIMIT})")
        nmax = _nmax(sec["nmax"])
    elif "nmax" in sec:
        raise ConfigError("model.nmax", f"applies to the boson bases only, not to {basis}")
    else:
        nmax = None
    charges = make_basis(basis, nmax).charge_names
    conserve = sec.get("keep_charges")
    if conserve is not None:
        if (not isinstance(conserve, list) or not conserve or not all(isinstance(c, str) for c in conserve)
                or len(set(conserve)) != len(conserve) or any(c not in charges for c in conserve)):
            raise ConfigError("model.keep_charges", f"must be a non-empty list of distinct charges among "
                                                f"{', '.join(charges)}, got {show(conserve)}")
        conserve = tuple(conserve)
    raw = sec.get("terms")
    if not isinstance(raw, list) or not raw:
        raise ConfigError("model.terms", f"must be a non-empty list of {{product, coef, add_conjugate}}, got {show(raw)}")
    terms = tuple(_written_term(item, f"model.terms[{i}]") for i, item in enumerate(raw))
    return {"basis": basis, "nmax": nmax, "keep_charges": conserve, "terms": terms}


def _written_term(raw: Any, where: str) -> WrittenTerm:
    sec = section(raw, where, TERM_KEYS, required=True)
    if "product" not in sec:
        raise ConfigError(f"{where}.product", "is required, e.g. \"S^+(j) S^-(j+1)\"")
    text = sec["product"]
    try:
        if isinstance(text, str) and len(text) > TEXT_LIMIT:
            raise TermError(f"must be a product of at most {TEXT_LIMIT} characters")
        product = parse_product(text)
    except ValueError as exc:   # TermError, or int() of a site offset with thousands of digits
        raise ConfigError(f"{where}.product", f"{exc}, got {show(text)}") from None
    if "coef" not in sec:
        raise ConfigError(f"{where}.coef", "is required (a number, a coupling name, or a pattern)")
    coef = _pattern(sec["coef"], f"{where}.coef")
    return WrittenTerm(product, coef, boolean(sec.get("add_conjugate", False), f"{where}.add_conjugate"))


def _amount(raw: Any, where: str) -> Amount:
    if (is_int(raw) and raw.bit_length() > 1000) or (isinstance(raw, str) and len(raw) > TEXT_LIMIT):
        # parse_amount would overflow float(), or spend minutes matching a megabyte of digits
        raise ConfigError(where, "must be a finite number or a coupling name such as J, -J or 0.5*J, "
                                 f"got {show(raw)}")
    try:
        return parse_amount(raw)
    except TermError as exc:
        raise ConfigError(where, str(exc)) from None


def _pattern(raw: Any, where: str) -> SitePattern:
    if not isinstance(raw, Mapping):
        return SitePattern(_amount(raw, where))
    sec = section(raw, where, PATTERN_KEYS)
    if "per_site" in sec:
        if len(sec) > 1:
            raise ConfigError(where, "per_site cannot be combined with value, stagger or dimer")
        values = sec["per_site"]
        if not isinstance(values, list) or not values:
            raise ConfigError(f"{where}.per_site", f"must be a non-empty list of numbers, got {kind(values)}")
        return SitePattern(per_site=tuple(_amount(v, f"{where}.per_site[{i}]") for i, v in enumerate(values)))
    if "value" not in sec:
        raise ConfigError(f"{where}.value", "is required in a pattern (with stagger, dimer and/or random)")
    zero = Amount(0.0)
    if "seed" in sec and "random" not in sec:
        raise ConfigError(f"{where}.seed", "needs random: the width of the disorder it seeds")
    seed = _amount(sec["seed"], f"{where}.seed") if "seed" in sec else None
    if seed is not None and seed.name is None and not (seed.factor.is_integer() and seed.factor >= 0):
        raise ConfigError(f"{where}.seed", f"must be an integer >= 0 or a coupling holding one, got {show(sec['seed'])}")
    return SitePattern(_amount(sec["value"], f"{where}.value"),
                       _amount(sec["stagger"], f"{where}.stagger") if "stagger" in sec else zero,
                       _amount(sec["dimer"], f"{where}.dimer") if "dimer" in sec else zero,
                       random=_amount(sec["random"], f"{where}.random") if "random" in sec else zero,
                       seed=seed)


def _named_couplings(raw: Any) -> dict[str, float]:
    if raw is None:
        return {}
    if not isinstance(raw, Mapping):
        raise ConfigError("model.couplings", f"must be a mapping of names to numbers, got {kind(raw)}")
    out = {}
    for name, value in raw.items():
        if not isinstance(name, str) or not _COUPLING_NAME.fullmatch(name):
            raise ConfigError("model.couplings", f"names must be letters, digits and _ (not first), got {show(name)}")
        out[name] = real(value, f"model.couplings.{name}")
    return out


def _check_written(fam: ModelFamily, sites: int, couplings: dict[str, float], options: dict) -> None:
    """Place every term once (refusing what cannot be placed, and coefficients that overflow to
    infinity) and refuse unused couplings."""
    placed = sites * sum(1 + t.add_conjugate for t in options["terms"])
    if placed > PLACEMENT_LIMIT:
        raise ConfigError("model.terms", f"place {placed} terms on {sites} sites; at most {PLACEMENT_LIMIT} "
                                         "can be checked (fewer terms or sites)")
    try:
        terms = fam.terms(sites, couplings, options)
    except WrittenTermError as exc:
        raise ConfigError(f"model.terms[{exc.index}]", f"{exc.product}: {exc.message}") from None
    for term in terms:
        if not math.isfinite(term.coef):
            field, _, product = term.label.partition(" ")
            raise ConfigError(field, f"{product[1:-1]}: a coefficient overflows to {show(term.coef)} "
                                     "(its factors are finite, their product is not)")
    used = set().union(*(t.coef.names() for t in options["terms"]))
    for name in couplings:
        if name not in used:
            raise ConfigError(f"model.couplings.{name}", "is not used by any term (misspelt?)")
