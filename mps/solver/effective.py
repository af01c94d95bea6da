"""Environments and the two-site effective Hamiltonian, never formed as a matrix.

Left environment of site j (legs: bra bond, ket bond, MPO bond; flows +1, -1, -1) holds
<psi_left| H_left |psi_left> for sites < j; the right environment (flows -1, +1, +1) the same for
sites > j. That leg order is the one in which an environment update's last product leaves its
result, so an update writes the new environment without a transpose. The effective Hamiltonian
acts on a two-site tensor theta (l, s1, s2, r) in the order left environment -> theta -> both
MPO tensors -> right environment, which costs O(D^3 d^2 w) and never builds the D^2 d^2 x D^2 d^2 matrix (Schollwoeck, Ann. Phys. 326, 96 (2011), section 6).
Every contraction's plan is cached per block structure, so the Krylov iterations reuse it.
"""

from __future__ import annotations

import numpy as np

from mps.blocks.chain import PlannedChain
from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.decompose import lq, qr
from mps.blocks.tensor import BlockTensor


def left_boundary(mpo_left: Leg, bond_left: Leg) -> BlockTensor:
    """Trivial environment left of site 0: the 'start' MPO state and the charge-0 bond."""
    env = BlockTensor((bond_left, bond_left.dual(), mpo_left.dual()))
    env.data[:] = 1.0
    return env


def right_boundary(mpo_right: Leg, bond_right: Leg) -> BlockTensor:
    """Trivial environment right of the last site: the 'done' MPO state and the target-charge bond."""
    env = BlockTensor((bond_right, bond_right.dual(), mpo_right.dual()))
    env.data[:] = 1.0
    return env


def grow_left_counted(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> tuple[BlockTensor, int]:
    """Left environment of site j+1 from that of site j, the site tensor A_j and the MPO tensor
    W_j, with the FLOPs of its contractions. One planned chain: env -> A -> W (entry by entry)
    -> A*, so the intermediates move from one product's layout to the next once."""
    chain = PlannedChain(a, [(env, (0,), (1,), False),          # (bra, w, s, r)
                             (w, (1, 2), (0, 2), True),         # (bra, r, s', w')
                             (a.conj(), (0, 2), (0, 1), False)])  # (r_bra, r, w')
    return BlockTensor(chain.out_legs, chain.out_charge, chain(a.data)), chain.flops


def grow_right_counted(env: BlockTensor, b: BlockTensor, w: BlockTensor) -> tuple[BlockTensor, int]:
    """Right environment of site j-1 from that of site j, the site tensor B_j and W_j, with the
    FLOPs of its contractions (one planned chain, as :func:`grow_left_counted`)."""
    chain = PlannedChain(b, [(env, (2,), (1,), True),           # (l, s, r_bra, w)
                             (w, (1, 3), (2, 3), True),         # (l, r_bra, w, s')
                             (b.conj(), (3, 1), (1, 2), False)])  # (l_bra, l, w)
    return BlockTensor(chain.out_legs, chain.out_charge, chain(b.data)), chain.flops


def grow_left(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> BlockTensor:
    """Left environment of site j+1 from that of site j, the site tensor A_j and the MPO tensor W_j."""
    return grow_left_counted(env, a, w)[0]


def grow_right(env: BlockTensor, b: BlockTensor, w: BlockTensor) -> BlockTensor:
    """Right environment of site j-1 from that of site j, the site tensor B_j and W_j."""
    return grow_right_counted(env, b, w)[0]


def merge_pair(w1: BlockTensor, w2: BlockTensor) -> BlockTensor:
    """Two neighbouring MPO tensors as one (a, s1, s2, s1', s2', c) tensor, inputs before outputs.

    Built once per bond, it lets the effective Hamiltonian touch the large intermediate once
    for both physical sites instead of twice.
    """
    pair = contract(w1, w2, (3,), (0,))              # (a, s1', s1, s2', s2, c)
    return pair.transpose((0, 2, 4, 1, 3, 5))


def apply_merged(left: BlockTensor, pair: BlockTensor, right: BlockTensor, theta: BlockTensor) -> BlockTensor:
    """H_eff theta with the merged MPO pair of :func:`merge_pair`."""
    x = contract(left, theta, (1,), (0,))            # (l', a, s1, s2, r)
    x = contract(x, pair, (1, 2, 3), (0, 1, 2))      # (l', r, s1', s2', c)
    return contract(x, right, (1, 4), (1, 2))        # (l', s1', s2', r')


class LocalOperator:
    """H_eff on the flat data of one- or two-site tensors with a fixed block structure.

    ``matvec`` works on the flat arrays that hold every allowed block, so a Krylov solver sees a
    plain vector space; the structure (legs, total charge) is fixed at construction.
    """

    def __init__(self, template: BlockTensor, steps):
        self.legs, self.charge = template.legs, template.charge
        self.chain = PlannedChain(template, steps)
        if self.chain.out_legs != self.legs or self.chain.out_charge != self.charge:
            raise RuntimeError("effective Hamiltonian changes the block structure")
        self.dtype = self.chain.dtype
        self.size = template.data.size
        self.applications = 0

    def wrap(self, vec: np.ndarray) -> BlockTensor:
        return BlockTensor(self.legs, self.charge, vec)

    def matvec(self, vec: np.ndarray) -> np.ndarray:
        self.applications += 1
        return self.chain(vec)


def two_site_steps(left: BlockTensor, pair: BlockTensor, right: BlockTensor) -> list:
    """The chain of H_eff on two-site tensors (l, s1, s2, r): left environment, the merged MPO
    pair (:func:`merge_pair`, applied entry by entry), right environment. The last step
    contracts (MPO bond, r) in that order, so that r runs fastest in its packing, as it does in
    the first step's products: the MPO step then moves contiguous runs."""
    return [(left, (0,), (1,), False), (pair, (1, 2, 3), (0, 1, 2), True), (right, (4, 1), (2, 1), True)]


def two_site_operator(left: BlockTensor, pair: BlockTensor, right: BlockTensor, theta: BlockTensor) -> LocalOperator:
    """H_eff on two-site tensors (l, s1, s2, r) (:func:`two_site_steps`)."""
    return LocalOperator(theta, two_site_steps(left, pair, right))


def one_site_operator(left: BlockTensor, w: BlockTensor, right: BlockTensor, m: BlockTensor) -> LocalOperator:
    """H_eff on one-site tensors (l, s, r): left environment -> M -> W -> right environment,
    O(D^3 d w) per application instead of the two-site O(D^3 d^2 w)."""
    return LocalOperator(m, [(left, (0,), (1,), False), (w, (1, 2), (0, 2), True), (right, (3, 1), (2, 1), True)])


def expansion_right(left: BlockTensor, m: BlockTensor, w: BlockTensor) -> BlockTensor:
    """The part of P = L M W (legs l, s, r, w') outside M's column space: the new directions a
    right-moving update widens M's right bond by (subspace expansion, Hubig, McCulloch,
    Schollwoeck and Wolf, PRB 91, 155115 (2015)). Without the projection most of P would repeat
    M (H psi ~ E psi near convergence) and the new directions' weight would be uncontrolled."""
    x = contract(left, m, (1,), (0,))                # (bra, w, s, r)
    x = contract(x, w, (1, 2), (0, 2))               # (bra, r, s', w')
    p = x.transpose((0, 2, 1, 3))
    q, _ = qr(m, (0, 1), (2,))                       # orthonormal basis of M's columns
    return p - contract(q, contract(q.conj(), p, (0, 1), (0, 1)), (2,), (0,))


def expansion_left(m: BlockTensor, w: BlockTensor, right: BlockTensor) -> BlockTensor:
    """The part of P = M W R (legs l, w, s, r) outside M's row space: the directions a left-moving
    update widens M's left bond by."""
    x = contract(m, right, (2,), (1,))               # (l, s, r_bra, w)
    x = contract(w, x, (2, 3), (1, 3))               # (w, s', l, r_bra)
    p = x.transpose((2, 0, 1, 3))
    _, q = lq(m, (0,), (1, 2))                       # orthonormal basis of M's rows
    return p - contract(contract(p, q.conj(), (2, 3), (1, 2)), q, (2,), (0,))
