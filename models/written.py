"""Chains written in YAML: a basis from the catalogue and a list of products with coefficients.

The family ``written`` turns the ``model:`` keys ``basis`` (a name of :mod:`models.bases`),
``nmax`` (boson bases), ``keep_charges`` (which of the basis's charges to keep; all by default) and
``terms`` (a list of :class:`WrittenTerm`) into Hamiltonian terms. Couplings are named by the
user (``couplings: {J1: 1.0, J2: 0.5}``) and referred to from the coefficients, so a scan can
vary them by name. Example (a zig-zag chain: nearest and next-nearest exchange)::

    model:
      family: written
      basis: spin-half
      sites: 32
      couplings: {J1: 1.0, J2: 0.4}
      charge: {Sz: 0}
      terms:
        - {product: "S^+(j) S^-(j+1)", coef: 0.5*J1, add_conjugate: true}
        - {product: "S^z(j) S^z(j+1)", coef: J1}
        - {product: "S^+(j) S^-(j+2)", coef: 0.5*J2, add_conjugate: true}
        - {product: "S^z(j) S^z(j+2)", coef: J2}

Each term is checked on its own before any solving: known operators, an even number of fermion
operators, a product that fits on the chain, an explicit per-site list of the right length, and
conservation of every kept charge. Hermiticity is a property of the whole sum (a term may be
written together with its conjugate as a second term); the operator builder checks the sum and,
if it fails, names the first term that is not Hermitian by itself.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from models.bases import make_basis
from models.terms import Product, SitePattern, TermError, place, placements
from mps.chain.lattice import LocalSpace, Term

NAME = "written"
DESCRIPTION = "a chain written in the config: basis, named couplings and a list of terms"
CHARGE_NAMES = ()          # those of the chosen basis (see space())
COUPLINGS: dict[str, float] = {}
FREE_COUPLINGS = True
OPTIONS = {"basis": None, "nmax": None, "keep_charges": None, "terms": ()}


class WrittenTermError(TermError):
    """A refused term: ``index`` in the list, its product text and what is wrong."""

    def __init__(self, index: int, product: str, message: str) -> None:
        super().__init__(f"terms[{index}] ({product}): {message}")
        self.index, self.product, self.message = index, product, message


@dataclass(frozen=True)
class WrittenTerm:
    """coef_j * product(j) over all placements j, plus its Hermitian conjugate if ``add_conjugate``."""

    product: Product
    coef: SitePattern
    add_conjugate: bool = False

    def label(self, index: int) -> str:
        return f"model.terms[{index}] ({self.product.text})"

    def to_dict(self) -> dict:
        """The YAML form (see :mod:`mps.pipeline.model_section`)."""
        c = self.coef
        if c.per_site is not None:
            coef = {"per_site": [a.written() for a in c.per_site]}
        elif c.stagger.factor == 0.0 and c.dimer.factor == 0.0 and c.random.factor == 0.0:
            coef = c.value.written()
        else:
            coef = {"value": c.value.written(), "stagger": c.stagger.written(), "dimer": c.dimer.written()}
            if c.random.factor != 0.0:
                coef.update(random=c.random.written(), seed=0.0 if c.seed is None else c.seed.written())
        return {"product": self.product.text, "coef": coef, "add_conjugate": self.add_conjugate}


def space(opts: Mapping) -> LocalSpace:
    """The chosen basis, keeping the charges listed in ``keep_charges`` (all when it is None)."""
    site = make_basis(opts["basis"], opts["nmax"])
    return site if opts["keep_charges"] is None else site.keep_charges(tuple(opts["keep_charges"]))


def terms(sites: int, couplings: Mapping[str, float], opts: Mapping) -> list[Term]:
    """All placements of all written terms, each labelled with its place in the list.

    Raises :class:`WrittenTermError` naming the first term that cannot be placed or that changes a
    conserved charge.
    """
    site = space(opts)
    out: list[Term] = []
    for i, wt in enumerate(opts["terms"]):
        text = wt.product.text
        try:
            missing = sorted(wt.coef.names() - set(couplings))
            if missing:
                raise TermError(f"coefficient refers to {', '.join(missing)}, not among the couplings "
                                f"({', '.join(sorted(couplings)) or 'none defined'})")
            wt.product.check(site)
            change = wt.product.charge(site)
            if change.any():
                moved = ", ".join(f"{n} by {q * u:g}" for n, u, q in
                                  zip(site.charge_names, site.charge_units, change) if q)
                raise TermError(f"changes {moved}; every term must conserve "
                                f"{', '.join(site.charge_names)} (drop a charge with keep_charges: [...])")
            coefs = wt.coef.values(placements(wt.product, sites), couplings)
            placed = place(wt.product, coefs, site, sites, wt.add_conjugate)
        except TermError as exc:
            raise WrittenTermError(i, text, str(exc)) from None
        out.extend(Term(t.coef, t.ops, wt.label(i)) for t in placed)
    return out


def single_particle(sites: int, couplings: Mapping[str, float], opts: Mapping) -> None:
    """None: written chains are not passed to the free-fermion engine (even when quadratic)."""
    return None


def default_charge(sites: int, opts: Mapping) -> dict[str, float]:
    """Written chains name their charge sector explicitly (``model.charge``)."""
    raise ValueError("a written chain needs model.charge")
