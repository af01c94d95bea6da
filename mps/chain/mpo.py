"""Matrix-product operator of a sum of local terms, built as a finite automaton.

Each term coef * O_1 O_2 ... O_m (operators on sites, fermionic ones with Jordan-Wigner strings)
becomes a string of local matrices on a contiguous range of sites. The operator is the language of
an automaton read from left to right (McCulloch, J. Stat. Mech. P10014 (2007); Crosswhite and
Bacon, PRA 78, 012356 (2008)): on every bond the automaton is either in the state "nothing placed
yet" (identity so far), "term finished" (identity from here on), or in one state per distinct
*prefix* of unfinished terms. Terms that start with the same local matrices share their prefix
states and the coefficient is applied on the last site, so sums of nearest-neighbour terms give
the minimal bond dimension (5 for the Heisenberg chain) and a term of range r adds r-1 states.

Every local matrix must change the charge by a definite amount; a bond state carries the charge
accumulated by its prefix, which gives the MPO its charge labels. Terms that do not conserve the
total charge, and sums that are not Hermitian, are refused.

Leg order of every MPO tensor: (left bond, out, in, right bond), flows (+1, +1, -1, -1),
total charge 0, so that the right bond charge = left bond charge + charge(out) - charge(in).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mps.blocks.charges import Leg, leg_from_states
from mps.blocks.tensor import BlockTensor
from mps.chain.lattice import LocalSpace, Term


class OperatorError(ValueError):
    """A term or sum of terms that cannot be turned into a conserving Hermitian operator."""


@dataclass(frozen=True)
class LocalString:
    """coef * M_first (x) M_first+1 (x) ... on consecutive sites (matrices in sector-ordered basis)."""

    coef: complex
    first: int
    mats: tuple[np.ndarray, ...]
    charges: tuple[tuple[int, ...], ...]   # charge change of every matrix
    label: str = ""                        # Term.label of the term it came from

    @property
    def last(self) -> int:
        return self.first + len(self.mats) - 1


@dataclass(frozen=True)
class Mpo:
    """A charge-labelled matrix-product operator.

    ``tensors[j]`` has legs (left bond, out, in, right bond); ``phys`` is the physical leg (flow +1)
    and ``basis_order[i]`` the model basis state stored at dense physical index i.
    """

    tensors: tuple[BlockTensor, ...]
    phys: Leg
    basis_order: np.ndarray

    @property
    def sites(self) -> int:
        return len(self.tensors)

    @property
    def bond_dims(self) -> list[int]:
        return [w.legs[3].dim for w in self.tensors[:-1]]


def operator_charge(mat: np.ndarray, charges: np.ndarray, atol: float = 1e-14) -> tuple[int, ...] | None:
    """Charge change q(out) - q(in) shared by every non-zero entry, or None if it is not definite."""
    rows, cols = np.nonzero(np.abs(mat) > atol)
    if rows.size == 0:
        return tuple(0 for _ in range(charges.shape[1]))
    diffs = {tuple(int(c) for c in charges[r] - charges[c]) for r, c in zip(rows, cols)}
    return diffs.pop() if len(diffs) == 1 else None


def _describe(term: Term) -> str:
    text = f"{term.coef:g} * " + " ".join(f"{name}@{site}" for site, name in term.ops)
    return f"{term.label}, {text}" if term.label else text


def local_strings(space: LocalSpace, sites: int, terms: list[Term]) -> list[LocalString]:
    """Expand every term into a string of local matrices, adding Jordan-Wigner strings.

    A fermionic operator on site s is c_s = (prod_{k<s} F_k) a_s with F = (-1)^n, so a product of an
    even number of them becomes a product of local matrices with F on the sites in between
    (Jordan and Wigner, Z. Phys. 47, 631 (1928)). Matrices are returned in the charge-sorted basis.
    """
    _, perm = leg_from_states(space.charges, 1)
    q = space.charges[perm]
    ops = {name: np.asarray(m)[np.ix_(perm, perm)] for name, m in space.ops.items()}
    parity = None if space.parity is None else np.diag(np.asarray(space.parity)[perm]).astype(float)
    eye = np.eye(space.dim)
    out = []
    for term in terms:
        if not term.ops:
            out.append(LocalString(complex(term.coef), 0, (eye,), ((0,) * space.nq,)))
            continue
        for site, name in term.ops:
            if name not in ops:
                raise OperatorError(f"term {_describe(term)}: unknown operator {name!r}; "
                                    f"known: {', '.join(sorted(ops))}")
            if not 0 <= site < sites:
                raise OperatorError(f"term {_describe(term)}: site {site} outside 0..{sites - 1}")
        lo = min(s for s, _ in term.ops)
        hi = max(s for s, _ in term.ops)
        nferm = sum(name in space.fermionic for _, name in term.ops)
        if nferm % 2:
            raise OperatorError(f"term {_describe(term)} has an odd number of fermion operators")
        if nferm and parity is None:
            raise OperatorError("fermionic operators need a local parity in the model's space")
        local = [eye.copy() for _ in range(hi - lo + 1)]
        for site, name in term.ops:
            if name in space.fermionic:
                for k in range(lo, site):
                    local[k - lo] = local[k - lo] @ parity
            local[site - lo] = local[site - lo] @ ops[name]
        if term.coef == 0 or any(not np.any(m) for m in local):
            continue  # the term vanishes identically
        charges = []
        for m in local:
            c = operator_charge(m, q)
            if c is None:
                raise OperatorError(f"term {_describe(term)}: an operator has no definite charge")
            charges.append(c)
        total = tuple(int(sum(c[i] for c in charges)) for i in range(space.nq))
        if any(total):
            names = ", ".join(space.charge_names)
            raise OperatorError(f"term {_describe(term)} changes the charge ({names}) by "
                                f"{tuple(u * t for u, t in zip(space.charge_units, total))}: "
                                "it does not conserve the charge")
        out.append(LocalString(complex(term.coef), lo, tuple(local), tuple(charges), term.label))
    return out


def _key(site: int, mat: np.ndarray) -> tuple:
    return (site, mat.shape, np.ascontiguousarray(mat).tobytes())


def automaton(strings: list[LocalString], sites: int, d: int, k: int) -> tuple[list[dict], list[np.ndarray]]:
    """Bond states and dense MPO tensors (state, out, in, state) of a sum of local strings.

    ``states[b]`` maps "start", "done" and every prefix key crossing bond b to (index, charge).
    """
    zero = (0,) * k
    states: list[dict] = [dict() for _ in range(sites + 1)]
    for b in range(sites):
        states[b]["start"] = (len(states[b]), zero)
    for st in strings:
        prefix = ()
        charge = np.zeros(k, dtype=np.int64)
        for j in range(st.first, st.last):
            prefix = prefix + (_key(j, st.mats[j - st.first]),)
            charge = charge + np.asarray(st.charges[j - st.first])
            bond = states[j + 1]
            if prefix not in bond:
                bond[prefix] = (len(bond), tuple(int(c) for c in charge))
    for b in range(1, sites + 1):
        states[b]["done"] = (len(states[b]), zero)

    dense = [np.zeros((len(states[j]), d, d, len(states[j + 1])), dtype=complex) for j in range(sites)]
    eye = np.eye(d)
    for j in range(sites):
        left, right = states[j], states[j + 1]
        if "start" in left and "start" in right:
            dense[j][left["start"][0], :, :, right["start"][0]] = eye
        if "done" in left and "done" in right:
            dense[j][left["done"][0], :, :, right["done"][0]] = eye
    for st in strings:
        prefix = ()
        for j in range(st.first, st.last + 1):
            mat = st.mats[j - st.first]
            a = states[j]["start"][0] if j == st.first else states[j][prefix][0]
            if j == st.last:
                dense[j][a, :, :, states[j + 1]["done"][0]] += st.coef * mat
            else:
                prefix = prefix + (_key(j, mat),)
                dense[j][a, :, :, states[j + 1][prefix][0]] = mat
    if all(not np.any(np.iscomplex(w)) for w in dense):
        dense = [w.real.copy() for w in dense]
    return states, dense


def adjoint_strings(strings: list[LocalString]) -> list[LocalString]:
    """The Hermitian conjugate of every string: conjugate coefficient, conjugate-transposed matrices."""
    return [LocalString(np.conj(st.coef), st.first, tuple(m.conj().T for m in st.mats),
                        tuple(tuple(-c for c in q) for q in st.charges), st.label) for st in strings]


def build_mpo(space: LocalSpace, sites: int, terms: list[Term], check_hermitian: bool = True) -> Mpo:
    """Build the MPO of sum(terms) on an open chain of ``sites`` sites (see module docstring)."""
    if sites < 1:
        raise OperatorError("a chain needs at least one site")
    strings = local_strings(space, sites, terms)
    phys, perm = leg_from_states(space.charges, 1)
    k, d = space.nq, space.dim
    states, dense = automaton(strings, sites, d, k)
    if check_hermitian:
        check_hermitian_sum(strings, dense, sites, d, k)
    bonds = []
    orders = []
    same: dict[Leg, Leg] = {}     # one object per distinct bond leg: cache look-ups compare by identity
    for b in range(sites + 1):
        ch = np.zeros((len(states[b]), k), dtype=np.int64)
        for idx, c in states[b].values():
            ch[idx] = c
        leg, order = leg_from_states(ch, 1)
        bonds.append(same.setdefault(leg, leg))
        orders.append(order)
    tensors = []
    for j in range(sites):
        w = dense[j][np.ix_(orders[j], np.arange(d), np.arange(d), orders[j + 1])]
        legs = (bonds[j], phys, phys.dual(), bonds[j + 1].dual())
        tensors.append(BlockTensor.from_dense(w, legs, (0,) * k, atol=0.0))
    return Mpo(tuple(tensors), phys, perm)


def _frobenius2(dense: list[np.ndarray]) -> float:
    """Tr(H^dagger H) / d^L of an MPO given by dense tensors (a, out, in, b), by transfer matrices."""
    v = np.ones((1, 1))
    for w in dense:
        d = w.shape[1]
        v = np.einsum("ab,astc,bste->ce", v, w.conj(), w) / d
    return float(np.real(v[0, 0]))


def hermitian_defect(strings: list[LocalString], sites: int, d: int, k: int,
                     dense: list[np.ndarray] | None = None) -> float:
    """||H - H^dagger||_F / ||H||_F of the sum of ``strings``.

    H - H^dagger is itself built by the automaton from the strings and their negated adjoints, so
    a term and the adjoint of its partner meet on the same prefix and cancel exactly there; the
    Frobenius norms are then contracted without catastrophic cancellation.
    """
    if dense is None:
        _, dense = automaton(strings, sites, d, k)
    negated = [LocalString(-st.coef, st.first, st.mats, st.charges) for st in adjoint_strings(strings)]
    _, diff = automaton(strings + negated, sites, d, k)
    norm = _frobenius2(dense)
    return float(np.sqrt(max(_frobenius2(diff), 0.0) / max(norm, 1e-300)))


def check_hermitian_sum(strings: list[LocalString], dense: list[np.ndarray], sites: int, d: int, k: int,
                        rtol: float = 1e-10) -> None:
    """Refuse a sum of terms whose operator H differs from H^dagger: ||H - H^dagger||_F > rtol ||H||_F.

    When it fails and the terms carry labels, the strings of each label are checked alone and the
    first label whose own sum is not Hermitian is named (a term whose conjugate was forgotten).
    """
    defect = hermitian_defect(strings, sites, d, k, dense)
    if defect <= rtol:
        return
    groups: dict[str, list[LocalString]] = {}
    for st in strings:
        groups.setdefault(st.label, []).append(st)
    for label, group in groups.items():
        if label and hermitian_defect(group, sites, d, k) > rtol:
            raise OperatorError(f"{label}: is not Hermitian and neither is the whole sum "
                                f"(||H - H^dagger|| / ||H|| = {defect:.3g}); add its conjugate "
                                "(add_conjugate: true, or a term with the conjugate product)")
    raise OperatorError(f"the Hamiltonian is not Hermitian: ||H - H^dagger|| / ||H|| = {defect:.3g}")
