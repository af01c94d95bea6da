"""Plain records that describe a lattice chain to the engine: the local basis and a sum of terms.

A model (see ``models/``) is data: a :class:`LocalSpace` (basis states with their integer U(1)^k
charges, named operator matrices, which of them are fermionic) and a list of :class:`Term`.
The operator builder turns these into a charge-labelled matrix-product operator; the
Jordan-Wigner strings of fermionic operators are inserted there, once, for every model.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np


@dataclass(frozen=True)
class LocalSpace:
    """Basis of one site.

    Attributes
    ----------
    charges : (dim, k) integer array
        Charge vector of every basis state, in integer units.
    charge_names : names of the k charges, e.g. ``("Sz",)`` or ``("N",)``.
    charge_units : physical value of one integer unit of each charge (0.5 for S^z counted
        as 2 S^z, 1 for particle number), so that physical = unit * integer.
    ops : operator name -> (dim, dim) matrix, ``ops[name][out, in]``.
    fermionic : names of operators that are odd under fermion parity (get Jordan-Wigner strings).
    parity : diagonal of the local fermion parity (-1)^n; ``None`` for bosonic sites.
    adjoints : operator name -> name of its Hermitian conjugate (``ops[adjoints[a]] = ops[a]^dagger``);
        used to write "plus Hermitian conjugate" of a product of named operators.
    cutoff : 0/1 diagonal marking the basis states at an occupation cutoff (boson sites), or None;
        the ground state's weight there says whether the cutoff is large enough.
    """

    charges: np.ndarray
    charge_names: tuple[str, ...]
    charge_units: tuple[float, ...]
    ops: dict[str, np.ndarray] = field(hash=False, compare=False)
    fermionic: frozenset[str] = frozenset()
    parity: np.ndarray | None = None
    adjoints: dict[str, str] = field(default_factory=dict, hash=False, compare=False)
    cutoff: np.ndarray | None = field(default=None, hash=False, compare=False)

    @property
    def dim(self) -> int:
        return int(self.charges.shape[0])

    @property
    def nq(self) -> int:
        """Number of conserved charges k."""
        return int(self.charges.shape[1])

    def keep_charges(self, names: tuple[str, ...]) -> LocalSpace:
        """The same site with only the charges ``names`` conserved (e.g. Q = N_a - N_b without N).

        Operators that change a dropped charge become allowed; those that change a kept one are
        still refused by the operator builder.
        """
        unknown = [n for n in names if n not in self.charge_names]
        if unknown or not names or len(set(names)) != len(names):
            raise ValueError(f"charges to keep must be distinct names among {', '.join(self.charge_names)}, "
                             f"got {', '.join(names) or 'none'}")
        cols = [self.charge_names.index(n) for n in names]
        return replace(self, charges=self.charges[:, cols], charge_names=tuple(names),
                       charge_units=tuple(self.charge_units[c] for c in cols))


@dataclass(frozen=True)
class Term:
    """``coef * op_1 op_2 ... op_m`` with ``ops = ((site_1, name_1), ...)`` in product order.

    Sites may repeat and need not be sorted; fermionic operators are understood as
    lattice fermions c_j (Jordan-Wigner strings are added by the operator builder). ``label``
    names where the term came from (e.g. an entry of a written chain) in the builder's refusals.
    """

    coef: complex
    ops: tuple[tuple[int, str], ...]
    label: str = field(default="", compare=False)
