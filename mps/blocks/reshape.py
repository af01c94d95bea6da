"""Fusing neighbouring legs of a block-sparse tensor into one leg, and splitting them again."""

from __future__ import annotations

import numpy as np

from mps.blocks.charges import FusionMap, fuse
from mps.blocks.tensor import BlockTensor


def fuse_legs(t: BlockTensor, start: int, stop: int, flow: int = 1) -> tuple[BlockTensor, FusionMap]:
    """Fuse legs ``start..stop-1`` of ``t`` into one leg of the given flow.

    Returns the fused tensor and the :class:`~mps.blocks.charges.FusionMap` that :func:`split_leg` needs.
    Every block is copied once into its place inside the fused sector.
    """
    if not 0 <= start < stop <= t.ndim:
        raise ValueError(f"cannot fuse legs {start}..{stop - 1} of a {t.ndim}-leg tensor")
    fmap = fuse(t.legs[start:stop], flow)
    legs = t.legs[:start] + (fmap.fused,) + t.legs[stop:]
    out = BlockTensor(legs, t.charge, dtype=t.dtype)
    for key, view in t.blocks():
        s, off, shape = fmap.entries[key[start:stop]]
        n = int(np.prod(shape))
        target = out.get(key[:start] + (s,) + key[stop:])
        head = view.shape[:start]
        tail = view.shape[stop:]
        target[(slice(None),) * start + (slice(off, off + n),)] = view.reshape(head + (n,) + tail)
    return out, fmap


def split_leg(t: BlockTensor, axis: int, fmap: FusionMap) -> BlockTensor:
    """Undo :func:`fuse_legs`: replace leg ``axis`` (which must be ``fmap.fused``) by the original legs."""
    if t.legs[axis] != fmap.fused:
        raise ValueError(f"leg {axis} is not the fused leg of this fusion map")
    legs = t.legs[:axis] + fmap.legs + t.legs[axis + 1:]
    out = BlockTensor(legs, t.charge, dtype=t.dtype)
    nsub = len(fmap.legs)
    for key, view in out.blocks():
        s, off, shape = fmap.entries[key[axis:axis + nsub]]
        n = int(np.prod(shape))
        src = t.get(key[:axis] + (s,) + key[axis + nsub:])
        piece = src[(slice(None),) * axis + (slice(off, off + n),)]
        view[...] = piece.reshape(view.shape)
    return out
