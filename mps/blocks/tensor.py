"""Block-sparse tensors with exact U(1)^k charge bookkeeping.

Only charge-allowed blocks exist (sum_i f_i q_i = Q for the block's sectors). Every allowed,
non-empty block is stored, in one flat array, in lexicographic order of its sector indices and
C order inside the block, so that vector operations (norms, inner products, the Krylov
recurrences of the solver) are single numpy calls and each block is a view into that array.
The layout is a pure function of the legs and the total charge and is computed once per
structure (cached).
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from mps.blocks.charges import _BIAS, _SHIFT, Leg, charge_bound, mixed_radix, pack_legs
from mps.blocks.kernels import block_map
from mps.blocks.sector_kernel import allowed_blocks


@dataclass(eq=False)
class Layout:
    """Allowed blocks of a structure and where each lives in the flat data array.

    ``key_array`` (nblocks, nlegs) holds the sector indices of every block, ``shape_array`` its
    shape, ``offsets`` its start (plus the total size at the end); ``keys``, ``shapes`` and
    ``index`` are the same as tuples and a dict, built on first use. Shared through the layout
    cache and never changed after it is built (not a frozen dataclass only because those cost
    ~1 us more to build, and a sweep builds thousands of layouts and plans).
    """

    legs: tuple[Leg, ...]
    charge: tuple[int, ...]
    key_array: np.ndarray
    shape_array: np.ndarray
    offsets: np.ndarray
    packed: tuple           # the legs as flat arrays (:func:`mps.blocks.charges.pack_legs`)
    bound: int              # largest |combined charge| of a combination of sectors of the legs

    @property
    def size(self) -> int:
        return int(self.offsets[-1])

    @property
    def nblocks(self) -> int:
        return len(self.key_array)

    @cached_property
    def keys(self) -> tuple[tuple[int, ...], ...]:
        return tuple(map(tuple, self.key_array.tolist()))

    @cached_property
    def shapes(self) -> tuple[tuple[int, ...], ...]:
        return tuple(map(tuple, self.shape_array.tolist()))

    @cached_property
    def index(self) -> dict[tuple[int, ...], int]:
        return {key: i for i, key in enumerate(self.keys)}


def _build_layout(legs: tuple[Leg, ...], charge: tuple[int, ...]) -> Layout:
    if not legs:
        raise ValueError("a block tensor needs at least one leg")
    k = legs[0].nq
    if any(leg.nq != k for leg in legs) or len(charge) != k:
        raise ValueError("all legs and the total charge must have the same number of charges")
    bound = charge_bound(legs)
    if bound + max(map(abs, charge)) >= _BIAS:
        raise ValueError(f"charges must be smaller than {_BIAS} in magnitude")
    packed = pack_legs(legs)
    keys, shapes, offsets = allowed_blocks(*packed, np.asarray(charge, dtype=np.int64), _SHIFT, _BIAS)
    return Layout(legs, tuple(charge), keys, shapes, offsets, packed, bound)


class _LayoutCache:
    """Least-recently-used layouts by (legs, charge); the contraction planner, which computes a
    result's layout together with its plan, puts it here for the result tensor to find."""

    def __init__(self, size: int):
        self.size, self.items = size, OrderedDict()

    def __call__(self, legs: tuple[Leg, ...], charge: tuple[int, ...]) -> Layout:
        """Allowed non-empty blocks of a tensor with ``legs`` and total charge ``charge``."""
        key = (legs, charge)
        lay = self.items.get(key)
        if lay is None:
            return self.put(_build_layout(legs, charge))
        try:
            self.items.move_to_end(key)
        except KeyError:    # evicted meanwhile by another thread (Dask workers run points in threads)
            pass
        return lay

    def offer(self, legs: tuple[Leg, ...], charge: tuple[int, ...], *parts) -> Layout:
        """The cached layout of structure (legs, charge) if there is one (layouts of one structure
        are equal, and callers may key on a layout's identity), else the layout of ``parts``
        (keys, shapes, offsets, packed legs, charge bound: a planner computed them), now cached."""
        held = self.items.get((legs, charge))
        return self.put(Layout(legs, charge, *parts)) if held is None else held

    def put(self, lay: Layout) -> Layout:
        self.items[(lay.legs, lay.charge)] = lay
        if len(self.items) > self.size:
            try:
                self.items.popitem(last=False)
            except KeyError:    # emptied meanwhile by another thread
                pass
        return lay

    def cache_clear(self) -> None:
        self.items.clear()


layout = _LayoutCache(8192)
"""``layout(legs, charge)``: allowed non-empty blocks of a tensor with ``legs`` and total charge
``charge`` (a :class:`Layout`, cached)."""


def permuted_blocks(src: Layout, dst: Layout, perm) -> np.ndarray:
    """For every block of ``dst`` (the layout of ``src``'s legs permuted: leg i of dst is leg
    ``perm[i]`` of src), the index of the same block in ``src``."""
    back = np.empty(len(perm), dtype=np.int64)
    back[list(perm)] = np.arange(len(perm))
    radix = mixed_radix([leg.nsec for leg in src.legs])
    return np.searchsorted(src.key_array @ radix, dst.key_array[:, back] @ radix)


class BlockTensor:
    """A tensor whose non-zero entries are confined to charge-allowed blocks.

    Parameters
    ----------
    legs : the legs, in order.
    charge : total charge Q (integer vector); conservation rule sum_i f_i q_i = Q.
    data : flat array holding every allowed block in layout order (zeros if omitted).
    dtype : element type when ``data`` is omitted.
    """

    __slots__ = ("legs", "charge", "layout", "data")

    def __init__(self, legs, charge=None, data=None, dtype=np.float64):
        self.legs = tuple(legs)
        k = self.legs[0].nq
        self.charge = tuple(int(c) for c in (charge if charge is not None else (0,) * k))
        self.layout = layout(self.legs, self.charge)
        if data is None:
            data = np.zeros(self.layout.size, dtype=dtype)
        data = np.asarray(data)
        if data.shape != (self.layout.size,):
            raise ValueError(f"flat data must have shape ({self.layout.size},), got {data.shape}")
        self.data = data

    # ----------------------------------------------------------------- construction
    @classmethod
    def zeros(cls, legs, charge=None, dtype=np.float64) -> "BlockTensor":
        return cls(legs, charge, dtype=dtype)

    @classmethod
    def random(cls, legs, charge=None, rng=None, dtype=np.float64) -> "BlockTensor":
        """Gaussian random entries in every allowed block."""
        rng = np.random.default_rng(rng)
        t = cls(legs, charge, dtype=dtype)
        t.data[:] = rng.standard_normal(t.data.shape)
        if np.iscomplexobj(t.data):
            t.data += 1j * rng.standard_normal(t.data.shape)
        return t

    @classmethod
    def from_dense(cls, array, legs, charge=None, atol: float = 1e-12) -> "BlockTensor":
        """Cut a dense array into allowed blocks; refuse it if a forbidden entry exceeds ``atol``."""
        array = np.asarray(array)
        legs = tuple(legs)
        if array.shape != tuple(leg.dim for leg in legs):
            raise ValueError(f"dense shape {array.shape} does not match leg dimensions "
                             f"{tuple(leg.dim for leg in legs)}")
        t = cls(legs, charge, dtype=np.result_type(array.dtype, np.float64))
        mask = np.zeros(array.shape, dtype=bool)
        for key, view in t.blocks():
            sl = t._slices(key)
            view[...] = array[sl]
            mask[sl] = True
        bad = np.abs(np.where(mask, 0, array))
        if bad.size and bad.max() > atol:
            where = np.unravel_index(int(np.argmax(bad)), array.shape)
            raise ValueError(f"entry {tuple(int(i) for i in where)} = {array[where]!r} breaks charge "
                             f"conservation (total charge {t.charge})")
        return t

    # ----------------------------------------------------------------- access
    @property
    def dtype(self):
        return self.data.dtype

    @property
    def ndim(self) -> int:
        return len(self.legs)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(leg.dim for leg in self.legs)

    def block(self, i: int) -> np.ndarray:
        """View of block number ``i`` (layout order)."""
        o = self.layout.offsets
        return self.data[o[i]:o[i + 1]].reshape(self.layout.shapes[i])

    def get(self, key) -> np.ndarray | None:
        """View of the block with sector indices ``key``, or None if it is not allowed."""
        i = self.layout.index.get(tuple(key))
        return None if i is None else self.block(i)

    def blocks(self):
        """Iterate over ``(key, view)`` of every stored block."""
        for i, key in enumerate(self.layout.keys):
            yield key, self.block(i)

    def _slices(self, key) -> tuple[slice, ...]:
        return tuple(slice(int(leg.offsets[c]), int(leg.offsets[c + 1])) for leg, c in zip(self.legs, key))

    def to_dense(self) -> np.ndarray:
        out = np.zeros(self.shape, dtype=self.dtype)
        for key, view in self.blocks():
            out[self._slices(key)] = view
        return out

    # ----------------------------------------------------------------- algebra
    def copy(self) -> "BlockTensor":
        return BlockTensor(self.legs, self.charge, self.data.copy())

    def astype(self, dtype) -> "BlockTensor":
        return BlockTensor(self.legs, self.charge, self.data.astype(dtype))

    def conj(self) -> "BlockTensor":
        """Complex conjugate: every flow reversed and the total charge negated (same blocks, in
        the same order: the layout is carried over, not searched for again)."""
        legs, charge = tuple(leg.dual() for leg in self.legs), tuple(-c for c in self.charge)
        if (legs, charge) not in layout.items:
            src = self.layout
            charges, sizes, starts, flows = src.packed
            layout.put(Layout(legs, charge, src.key_array, src.shape_array, src.offsets,
                              (charges, sizes, starts, -flows), src.bound))
        return BlockTensor(legs, charge, self.data.conj())

    def _check_same(self, other: "BlockTensor") -> None:
        if self.legs != other.legs or self.charge != other.charge:
            raise ValueError("tensors have different legs or total charge")

    def __add__(self, other: "BlockTensor") -> "BlockTensor":
        self._check_same(other)
        return BlockTensor(self.legs, self.charge, self.data + other.data)

    def __sub__(self, other: "BlockTensor") -> "BlockTensor":
        self._check_same(other)
        return BlockTensor(self.legs, self.charge, self.data - other.data)

    def __neg__(self) -> "BlockTensor":
        return BlockTensor(self.legs, self.charge, -self.data)

    def __mul__(self, scalar) -> "BlockTensor":
        if not np.isscalar(scalar):
            raise TypeError("a block tensor can only be multiplied by a scalar")
        return BlockTensor(self.legs, self.charge, self.data * scalar)

    __rmul__ = __mul__

    def __truediv__(self, scalar) -> "BlockTensor":
        return self * (1.0 / scalar)

    def norm(self) -> float:
        """Frobenius norm."""
        return float(np.linalg.norm(self.data))

    def inner(self, other: "BlockTensor") -> complex:
        """<self|other> = sum conj(self) * other over all entries."""
        self._check_same(other)
        return np.vdot(self.data, other.data)

    def transpose(self, perm) -> "BlockTensor":
        """Permute the legs: leg i of the result is leg ``perm[i]`` of this tensor."""
        perm = tuple(int(p) for p in perm)
        if sorted(perm) != list(range(self.ndim)):
            raise ValueError(f"{perm} is not a permutation of {self.ndim} legs")
        if perm == tuple(range(self.ndim)):
            return self.copy()
        legs = tuple(self.legs[p] for p in perm)
        src, dst = self.layout, layout(legs, self.charge)
        order = permuted_blocks(src, dst, perm)
        dest = np.empty(src.nblocks, dtype=np.int64)
        dest[order] = dst.offsets[:-1]
        spots = block_map(src.shape_array, src.offsets, np.asarray(perm, dtype=np.int64),
                          np.zeros(0, dtype=np.int64), dest, np.ones(src.nblocks, dtype=np.int64), src.size, True)
        out = np.empty_like(self.data)
        out[spots] = self.data
        return BlockTensor(legs, self.charge, out)

    def __repr__(self) -> str:
        return (f"BlockTensor(shape={self.shape}, charge={self.charge}, blocks={self.layout.nblocks}, "
                f"flows={[leg.flow for leg in self.legs]}, dtype={self.dtype})")
