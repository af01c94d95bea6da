"""Plain records that describe a lattice chain to the engine: the local basis and a sum of terms.

A model (see ``models/``) is data: a :class:`LocalSpace` (basis states with their integer U(1)^k
charges, named operator matrices, which of them are fermionic) and a list of :class:`Term`.
The operator builder turns these into a charge-labelled matrix-product operator; the
Jordan-Wigner strings of fermionic operators are inserted there, once, for every model.
"""

from __future__ import annotations

from dataclasses import dataclass, field

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
    """

    charges: np.ndarray
    charge_names: tuple[str, ...]
    charge_units: tuple[float, ...]
    ops: dict[str, np.ndarray] = field(hash=False, compare=False)
    fermionic: frozenset[str] = frozenset()
    parity: np.ndarray | None = None

    @property
    def dim(self) -> int:
        return int(self.charges.shape[0])

    @property
    def nq(self) -> int:
        """Number of conserved charges k."""
        return int(self.charges.shape[1])


@dataclass(frozen=True)
class Term:
    """``coef * op_1 op_2 ... op_m`` with ``ops = ((site_1, name_1), ...)`` in product order.

    Sites may repeat and need not be sorted; fermionic operators are understood as
    lattice fermions c_j (Jordan-Wigner strings are added by the operator builder).
    """

    coef: complex
    ops: tuple[tuple[int, str], ...]
