"""Contraction of several block-sparse tensors, in an order chosen once by opt_einsum.

``contract_network("abc,bd,cde->ae", x, y, z)`` contracts repeated indices pairwise. The
pairwise order is chosen by opt_einsum from the dense leg dimensions and cached per (expression,
shapes), so a network applied many times (an environment update each sweep) plans only once.
"""

from __future__ import annotations

from functools import lru_cache

import opt_einsum

from mps.blocks.contract import contract
from mps.blocks.tensor import BlockTensor


@lru_cache(maxsize=1024)
def _order(expr: str, shapes: tuple[tuple[int, ...], ...]) -> tuple[tuple[int, int], ...]:
    path, _ = opt_einsum.contract_path(expr, *shapes, shapes=True, optimize="optimal"
                                       if len(shapes) <= 5 else "greedy")
    return tuple(tuple(p) for p in path)


def contract_network(expr: str, *tensors: BlockTensor):
    """Einsum-style contraction of block-sparse tensors; every repeated index is summed.

    Each index letter must appear once (free, in the output) or twice (contracted); traces within
    one tensor are not supported. The output legs are permuted to the order given after ``->``.
    """
    inputs, output = expr.replace(" ", "").split("->")
    terms = inputs.split(",")
    if len(terms) != len(tensors):
        raise ValueError(f"expression names {len(terms)} tensors, got {len(tensors)}")
    for term, t in zip(terms, tensors):
        if len(term) != t.ndim or len(set(term)) != len(term):
            raise ValueError(f"index string {term!r} does not fit a {t.ndim}-leg tensor")
    ops = list(zip(terms, tensors))
    for step in _order(expr.replace(" ", ""), tuple(t.shape for t in tensors)):
        picked = [ops[i] for i in step]
        for idx in sorted(step, reverse=True):
            ops.pop(idx)
        if len(picked) == 1:  # a lone tensor: nothing to contract, it is permuted at the end
            ops.append(picked[0])
            continue
        (ta, a), (tb, b) = picked
        if not isinstance(a, BlockTensor) or not isinstance(b, BlockTensor):
            # a closed part of a disconnected network has become a scalar
            ops.append((ta + tb, b * a if isinstance(b, BlockTensor) else a * b))
            continue
        shared = [c for c in ta if c in tb]
        res = contract(a, b, [ta.index(c) for c in shared], [tb.index(c) for c in shared])
        label = "".join(c for c in ta if c not in shared) + "".join(c for c in tb if c not in shared)
        ops.append((label, res))
    label, res = ops[0]
    if not isinstance(res, BlockTensor):
        return res
    if sorted(label) != sorted(output):
        raise ValueError(f"output indices {output!r} do not match the free indices {label!r}")
    if label == output:
        return res
    return res.transpose([label.index(c) for c in output])
