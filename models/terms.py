"""Products of named site operators placed along a chain, with a coefficient pattern per placement.

A product is written as text, one factor per operator in product order, each naming its site
relative to a running site j::

    "S^+(j) S^-(j+1)"        nearest-neighbour spin flip
    "S^z(j) S^z(j+2)"        next-nearest-neighbour Ising coupling
    "n_up(j) n_dn(j)"        on-site product (a site may repeat)
    "c^+(j) c(j+3)"          fermion hopping over three bonds (Jordan-Wigner strings are added)

Placed on an open chain of L sites, it contributes coef_j * product for every j with
0 <= j and j + reach <= L - 1 (reach = the largest offset), optionally plus its Hermitian
conjugate (coef_j^* times the reversed product of the conjugate operators). The coefficients
follow a :class:`SitePattern` over the placements j = 0, 1, ...: uniform, staggered
(value + stagger (-1)^j), dimerised (value (1 + dimer (-1)^j)), or an explicit list, and any of
its numbers may be a named coupling times a factor, so a scan can vary it by name.

The built-in families and chains written in YAML both go through :func:`place`, so there is one
way to turn a formula into terms.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from models.patterns import alternating
from mps.chain.lattice import LocalSpace, Term

_FACTOR = re.compile(r"\s*([A-Za-z][A-Za-z0-9_^+\-]*)\(\s*j\s*(?:\+\s*(\d+)\s*)?\)\s*")
_AMOUNT = re.compile(r"\s*([-+]?)\s*(?:(\d+\.?\d*(?:[eE][-+]?\d+)?|\.\d+(?:[eE][-+]?\d+)?)\s*\*\s*)?"
                     r"([A-Za-z_][A-Za-z0-9_]*)\s*")


class TermError(ValueError):
    """A product or coefficient that cannot be placed; ``str()`` says what is wrong in one line."""


@dataclass(frozen=True)
class Product:
    """factors[i] = (offset r_i, operator name): the product O_1(j + r_1) O_2(j + r_2) ... in order."""

    factors: tuple[tuple[int, str], ...]

    @property
    def reach(self) -> int:
        return max(r for r, _ in self.factors)

    @property
    def text(self) -> str:
        return " ".join(f"{name}(j{f'+{r}' if r else ''})" for r, name in self.factors)

    def check(self, space: LocalSpace) -> None:
        """Refuse unknown operators and an odd number of fermion operators (not an even operator)."""
        for _, name in self.factors:
            if name not in space.ops:
                raise TermError(f"unknown operator {name!r}; known here: {' '.join(space.ops)}")
        odd = sum(name in space.fermionic for _, name in self.factors)
        if odd % 2:
            raise TermError(f"has an odd number ({odd}) of fermion operators, so it changes the fermion "
                            "parity; terms must hold an even number of c-type operators")

    def charge(self, space: LocalSpace) -> np.ndarray:
        """Total integer charge change of the product (operators with a definite charge)."""
        total = np.zeros(space.nq, dtype=np.int64)
        for _, name in self.factors:
            rows, cols = np.nonzero(np.abs(space.ops[name]) > 1e-14)
            if rows.size:
                total += space.charges[rows[0]] - space.charges[cols[0]]
        return total


def parse_product(text: str) -> Product:
    """Read "NAME(j) NAME(j+r) ..." (see the module docstring); refuses anything else."""
    if not isinstance(text, str) or not text.strip():
        raise TermError("must be a product such as \"S^+(j) S^-(j+1)\"")
    factors, pos = [], 0
    while pos < len(text):
        m = _FACTOR.match(text, pos)
        if m is None or m.end() == pos:
            rest = text[pos:].strip()
            raise TermError(f"cannot read {rest[:30]!r}: write each factor as NAME(j) or NAME(j+r), "
                            "e.g. \"S^+(j) S^-(j+1)\"")
        factors.append((int(m.group(2) or 0), m.group(1)))
        pos = m.end()
    return Product(tuple(factors))


@dataclass(frozen=True)
class Amount:
    """factor * couplings[name] (or just factor when name is None)."""

    factor: float
    name: str | None = None

    def value(self, couplings: Mapping[str, float]) -> float:
        return self.factor if self.name is None else self.factor * float(couplings[self.name])

    def written(self) -> float | str:
        """The YAML form: a number, or "name", "-name", "0.5*name"."""
        if self.name is None:
            return self.factor
        if self.factor in (1.0, -1.0):
            return ("-" if self.factor < 0 else "") + self.name
        return f"{self.factor!r}*{self.name}"


def parse_amount(raw) -> Amount:
    """A number, or a coupling name with an optional sign and factor ("J2", "-t", "0.5*J")."""
    if isinstance(raw, (int, float)) and not isinstance(raw, bool):
        if not math.isfinite(raw):
            raise TermError(f"must be finite, got {raw!r}")
        return Amount(float(raw))
    if isinstance(raw, str):
        m = _AMOUNT.fullmatch(raw)
        if m:
            factor = float(m.group(2)) if m.group(2) else 1.0
            return Amount(-factor if m.group(1) == "-" else factor, m.group(3))
        try:
            x = float(raw)
        except ValueError:
            pass
        else:
            if math.isfinite(x):
                return Amount(x)
    raise TermError(f"must be a finite number or a coupling name such as J, -J or 0.5*J, got {raw!r}")


@dataclass(frozen=True)
class SitePattern:
    """Coefficients over the placements j = 0..count-1 of a product.

    value (1 + dimer (-1)^j) + stagger (-1)^j + random u_j, or the explicit list ``per_site`` (one
    entry per placement: L values for a one-site term, L - 1 for a nearest-neighbour one, ...).
    The disorder u_j is uniform in [-1, 1], drawn by numpy's default generator (PCG64) seeded with
    ``seed`` (an integer, or a coupling holding one, so a scan over that coupling averages over
    realisations); the same seed gives the same couplings on every machine and in every run.
    """

    value: Amount = Amount(0.0)
    stagger: Amount = Amount(0.0)
    dimer: Amount = Amount(0.0)
    per_site: tuple[Amount, ...] | None = None
    random: Amount = Amount(0.0)
    seed: Amount | None = None

    def values(self, count: int, couplings: Mapping[str, float]) -> np.ndarray:
        if self.per_site is not None:
            if len(self.per_site) != count:
                raise TermError(f"per_site lists {len(self.per_site)} values but the product has {count} "
                                f"placements j = 0..{count - 1} on this chain")
            return np.array([a.value(couplings) for a in self.per_site])
        sign = alternating(count)
        v = self.value.value(couplings)
        out = v * (1.0 + self.dimer.value(couplings) * sign) + self.stagger.value(couplings) * sign
        width = self.random.value(couplings)
        if width != 0.0:
            out = out + width * np.random.default_rng(self.disorder_seed(couplings)).uniform(-1.0, 1.0, count)
        return out

    def disorder_seed(self, couplings: Mapping[str, float]) -> int:
        """The seed of the disorder draw: a non-negative integer (or a coupling holding one)."""
        seed = 0.0 if self.seed is None else self.seed.value(couplings)
        if not (float(seed).is_integer() and seed >= 0):
            raise TermError(f"the disorder seed must be an integer >= 0, got {seed!r}")
        return int(seed)

    def names(self) -> set[str]:
        """Coupling names the pattern refers to."""
        amounts = self.per_site if self.per_site is not None else (self.value, self.stagger, self.dimer,
                                                                    self.random, self.seed)
        return {a.name for a in amounts if a is not None and a.name is not None}


def uniform(value: float) -> SitePattern:
    return SitePattern(Amount(float(value)))


def adjoint(ops: Sequence[tuple[int, str]], space: LocalSpace) -> tuple[tuple[int, str], ...]:
    """(O_1 ... O_m)^dagger = O_m^dagger ... O_1^dagger, by the basis's table of adjoint names
    (or, for a site without that table, the operator whose matrix is the conjugate transpose)."""
    return tuple((site, _adjoint_name(name, space)) for site, name in reversed(ops))


def _adjoint_name(name: str, space: LocalSpace) -> str:
    if name in space.adjoints:
        return space.adjoints[name]
    dagger = space.ops[name].conj().T
    for other, mat in space.ops.items():
        if mat.shape == dagger.shape and np.allclose(mat, dagger, rtol=0.0, atol=1e-14):
            return other
    raise TermError(f"the conjugate of {name!r} is not among the site's operators")


def placements(product: Product, sites: int) -> int:
    """Number of sites j at which the product fits on an open chain of ``sites`` sites (>= 1)."""
    if product.reach >= sites:
        raise TermError(f"reaches j+{product.reach}, beyond the end of a {sites}-site chain for every j")
    return sites - product.reach


def place(product: Product | str, coefs, space: LocalSpace, sites: int, add_conjugate: bool = False) -> list[Term]:
    """Terms coef_j * product(j) for every placement j (plus the conjugates when ``add_conjugate``).

    ``coefs`` is one number per placement (or a single number for all); placements whose
    coefficient is exactly zero are left out. Refuses (:class:`TermError`) unknown operators,
    fermion-odd products, and products that fit nowhere on the chain.
    """
    prod = parse_product(product) if isinstance(product, str) else product
    prod.check(space)
    count = placements(prod, sites)
    c = np.broadcast_to(np.asarray(coefs, dtype=float), (count,))
    out: list[Term] = []
    for j in np.nonzero(c)[0]:
        ops = tuple((int(j) + r, name) for r, name in prod.factors)
        out.append(Term(float(c[j]), ops))
        if add_conjugate:
            out.append(Term(float(c[j]), adjoint(ops, space)))
    return out
