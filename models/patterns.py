"""Spatial patterns of couplings shared by the model families (sites and bonds j = 0, 1, ...)."""

from __future__ import annotations

import numpy as np


def alternating(count: int) -> np.ndarray:
    """(-1)^j for j = 0..count-1."""
    return np.where(np.arange(count) % 2 == 0, 1.0, -1.0)


def staggered(uniform: float, stagger: float, count: int) -> np.ndarray:
    """uniform + stagger (-1)^j: a field or potential with a staggered part, per site."""
    return uniform + stagger * alternating(count)


def dimerised(strength: float, dimer: float, count: int) -> np.ndarray:
    """strength (1 + dimer (-1)^j): a coupling with a bond dimerisation, per bond."""
    return strength * (1.0 + dimer * alternating(count))
