"""Block-sparse tensors with U(1)^k charge labels: charge sectors of a leg and their fusion,
tensors holding only the blocks the conservation rule allows, planned GEMM contraction,
factorisations ranked across sectors (SVD, QR, LQ, eigh), reshaping and multi-tensor networks.

The bottom layer: it imports nothing of the project. ``mps.blocks.testing`` (invariant checks,
dense comparison, hypothesis strategies) is for tests and is not imported here.
"""

from mps.blocks.chain import PlannedChain
from mps.blocks.charges import FusionMap, Leg, fuse, leg_from_states, reachable_charges, reachable_totals
from mps.blocks.contract import contract, plan_contraction
from mps.blocks.decompose import Truncation, eigh, lq, qr, scale_leg, svd
from mps.blocks.network import contract_network
from mps.blocks.reshape import fuse_legs, split_leg
from mps.blocks.tensor import BlockTensor

__all__ = ["BlockTensor", "FusionMap", "Leg", "PlannedChain", "Truncation", "contract", "contract_network",
           "eigh", "fuse", "fuse_legs", "leg_from_states", "lq", "plan_contraction", "qr", "reachable_charges",
           "reachable_totals", "scale_leg", "split_leg", "svd"]
