"""A chain as tensors: local spaces and Hamiltonian terms, the operator built from them as a
finite automaton (Jordan-Wigner strings, conservation and Hermiticity checked), and the
matrix-product state with the charge-labelled Schmidt values of every bond.
"""

from mps.chain.lattice import LocalSpace, Term
from mps.chain.mpo import Mpo, OperatorError, build_mpo
from mps.chain.state import (
                             BondSpectrum,
                             ChainState,
                             canonicalize,
                             overlap,
                             product_state,
                             random_state,
                             to_dense_vector,
)

__all__ = ["BondSpectrum", "ChainState", "LocalSpace", "Mpo", "OperatorError", "Term", "build_mpo",
           "canonicalize", "overlap", "product_state", "random_state", "to_dense_vector"]
