"""Per-sector linear algebra on block-sparse tensors: truncated SVD, QR, LQ and eigh.

A tensor of total charge Q is viewed as a matrix between a group of row legs and a group of
column legs. Fusing each group (see :func:`mps.blocks.charges.fuse`) makes that matrix block diagonal:
row sector r meets only column sector Q - r. Each block is decomposed with LAPACK and the new bond
leg between the factors carries the row charge r. The truncated SVD ranks the singular values of
*all* sectors together, so the kept spectrum is the globally optimal one for the bond cap and the
discarded-weight threshold (Schollwoeck, Ann. Phys. 326, 96 (2011), section 4.5).

Hot-path factorisations use numpy's LAPACK, the same library as the contractions' matrix
products: numpy and scipy wheels ship separate OpenBLAS builds, and waking both thread pools in
turn makes them compete for the cores (measured: a 400 x 400 eigh slowed from 0.04 s to 3 s).
scipy's divide-and-conquer-free SVD is only the fallback when gesdd fails to converge.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import scipy.linalg as sla
from numba import njit

from mps.blocks.charges import FusionMap, Leg, charge_bound, fuse, pack_legs
from mps.blocks.cores import map_sectors
from mps.blocks.factor_kernel import left_factor_blocks, right_factor_blocks
from mps.blocks.kernels import leg_positions, pack_into, unpack_blocks
from mps.blocks.plan_kernel import sector_places
from mps.blocks.tensor import BlockTensor, Layout, layout

SIDE_BY_SIDE = {"svd": 48, "qr": 80, "eigh": 64}
"""Smallest sector matrix (rows and columns) for which the sector factorisations run side by side
(:func:`mps.blocks.cores.map_sectors`). Measured on the 2-core development machine with five
blocks of 2n x n: gesdd gains 1.3x at n = 48 and 1.6x at 96, nothing at 32; QR gains from 96
(and loses at 48); eigh 1.1x at 64."""


@dataclass(frozen=True)
class MatrixBlocks:
    """A tensor seen as a block-diagonal matrix: one dense block per row sector."""

    rows: FusionMap
    cols: FusionMap
    row_axes: tuple[int, ...]
    col_axes: tuple[int, ...]
    sectors: tuple[tuple[int, int], ...]   # (row sector, column sector) of every block
    mats: tuple[np.ndarray, ...]


def as_matrix(t: BlockTensor, row_axes, col_axes) -> MatrixBlocks:
    """Pack ``t`` into one dense matrix per charge sector of the fused row legs.

    Row sector r pairs with the column sector of charge Q - r; the matrices are views into one
    zeroed buffer filled by one compiled copy of every block into its place (entries no block
    covers stay zero).
    """
    row_axes, col_axes = tuple(row_axes), tuple(col_axes)
    if sorted(row_axes + col_axes) != list(range(t.ndim)) or not row_axes or not col_axes:
        raise ValueError("row and column axes must split the legs into two non-empty groups")
    rows = fuse(tuple(t.legs[i] for i in row_axes), 1)
    cols = fuse(tuple(t.legs[i] for i in col_axes), 1)
    q, col_index = t.charge, cols.fused.index
    sectors = [(rs, cs) for rs, rq in enumerate(rows.fused.charges)
               if (cs := col_index(tuple(a - b for a, b in zip(q, rq)))) >= 0
               and rows.fused.sizes[rs] and cols.fused.sizes[cs]]
    shapes = [(rows.fused.sizes[rs], cols.fused.sizes[cs]) for rs, cs in sectors]
    start, ld, total = _sector_starts(rows.fused.nsec, [rs for rs, _ in sectors], shapes)
    lay, rax, cax = t.layout, _axes(row_axes), _axes(col_axes)
    dest, width = sector_places(_arrays(t), rax, cax, rows.arrays, cols.arrays, start, ld)
    buf = pack_into(t.data, lay.shape_array, lay.offsets, rax, cax, dest, width, np.zeros(total, dtype=t.dtype))
    mats, pos = [], 0
    for nr, nc in shapes:
        mats.append(buf[pos:pos + nr * nc].reshape(nr, nc))
        pos += nr * nc
    return MatrixBlocks(rows, cols, row_axes, col_axes, tuple(sectors), tuple(mats))


def _arrays(t: BlockTensor) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    lay = t.layout
    return lay.key_array, lay.shape_array, lay.offsets


def _axes(axes) -> np.ndarray:
    return np.array(axes, dtype=np.int64)


def _sector_starts(nsec: int, owners: list[int], shapes: list[tuple[int, int]]):
    """Start and column count of the matrix of every row sector (-1: none), and the total size."""
    start = np.full(nsec, -1, dtype=np.int64)
    ld = np.zeros(nsec, dtype=np.int64)
    pos = 0
    for s, (nr, nc) in zip(owners, shapes):
        start[s], ld[s] = pos, nc
        pos += nr * nc
    return start, ld, pos


def _fill(out: BlockTensor, row_axes, col_axes, f_row, f_col, owners, mats) -> None:
    """Write dense matrices (one per row sector in ``owners``) into the blocks of ``out``."""
    start, ld, _ = _sector_starts(f_row.fused.nsec, owners, [m.shape for m in mats])
    lay, rax, cax = out.layout, _axes(row_axes), _axes(col_axes)
    dest, width = sector_places(_arrays(out), rax, cax, f_row.arrays, f_col.arrays, start, ld)
    if np.any(dest < 0):
        raise AssertionError("a block of the factor has no matrix to come from")
    packed = np.concatenate([m.ravel() for m in mats]) if mats else np.zeros(0, dtype=out.dtype)
    out.data = unpack_blocks(packed, lay.shape_array, lay.offsets, rax, cax, dest, width)


def _bond_leg(mb: MatrixBlocks, kept: list[int], flow: int) -> tuple[Leg, list[int]]:
    """Bond leg with one sector per row sector that keeps at least one vector."""
    used = [i for i, n in enumerate(kept) if n > 0]
    if not used:
        raise ValueError("decomposition keeps nothing: the tensor is zero")
    charges = [mb.rows.fused.charges[mb.sectors[i][0]] for i in used]
    return Leg(tuple(charges), tuple(kept[i] for i in used), flow), used


def _factors(mb: MatrixBlocks, t: BlockTensor, lefts, rights, kept, weights=None,
             side: str = "left") -> tuple[BlockTensor, BlockTensor]:
    """Assemble left factor (row legs + bond) and right factor (bond + column legs): layouts and
    data of both in one compiled pass each (:mod:`mps.blocks.factor_kernel`). ``weights``: one
    array per kept sector (in bond order), multiplied along the bond into the factor on ``side``."""
    bond, used = _bond_leg(mb, kept, -1)
    dtype = np.result_type(*[m.dtype for m in lefts], *[m.dtype for m in rights])
    counts = np.array([kept[i] for i in used], dtype=np.int64)
    ones = np.ones(int(counts.sum()))
    scaled = np.concatenate(weights) if weights is not None else ones
    bond_of = np.full(mb.rows.fused.nsec, -1, dtype=np.int64)
    bond_of[[mb.sectors[i][0] for i in used]] = np.arange(len(used))
    col_of_bond = np.array([mb.sectors[i][1] for i in used], dtype=np.int64)
    rows, cols = mb.rows, mb.cols
    left = _assembled(rows.legs + (bond,), (0,) * bond.nq, left_factor_blocks(
        rows.combos, rows.sector, rows.offset, *rows.leg_sizes, bond_of, counts,
        scaled if side == "left" else ones, *_flat([lefts[i] for i in used], dtype)))
    right = _assembled((bond.dual(),) + cols.legs, t.charge, right_factor_blocks(
        cols.combos, cols.sector, cols.offset, *cols.leg_sizes, col_of_bond, counts,
        scaled if side == "right" else ones, *_flat([rights[i] for i in used], dtype)))
    return left, right


def _flat(mats, dtype) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Start and column count of every matrix in one C-order buffer, and the buffer."""
    sizes = np.array([m.size for m in mats], dtype=np.int64)
    start = np.zeros(len(mats), dtype=np.int64)
    np.cumsum(sizes[:-1], out=start[1:])
    buf = np.concatenate([np.ravel(m) for m in mats]).astype(dtype, copy=False)
    return start, np.array([m.shape[1] for m in mats], dtype=np.int64), buf


def _assembled(legs, charge, blocks) -> BlockTensor:
    """A tensor from compiled (keys, shapes, offsets, data): the layout of its structure is put in
    the layout cache unless already there (it is the same layout, found by a search)."""
    keys, shapes, offsets, data = blocks
    if (legs, charge) not in layout.items:
        layout.put(Layout(legs, charge, keys, shapes, offsets, pack_legs(legs), charge_bound(legs)))
    return BlockTensor(legs, charge, data)


@dataclass(frozen=True)
class Truncation:
    """Result of a truncated SVD t ~ U diag(S) Vh.

    ``values[b]`` are the kept singular values of bond sector b (descending), whose charge is
    ``u.legs[-1].charges[b]``; ``discarded`` is the discarded weight sum(dropped s^2) / sum(s^2);
    ``norm2`` the total weight sum(s^2) before truncation.
    """

    u: BlockTensor
    values: tuple[np.ndarray, ...]
    vh: BlockTensor
    discarded: float
    norm2: float

    @property
    def bond(self) -> Leg:
        return self.u.legs[-1]


class Kept(NamedTuple):
    """What a truncation keeps: ``counts[i]`` values of sector i; the total weight sum(s^2) and
    the dropped weight (the sum of the dropped s^2, summed from the smallest up)."""

    counts: list[int]
    total: float
    dropped: float


def rank_kept(spectra: list[np.ndarray], max_bond: int | None, discard: float,
              min_value: float = 0.0) -> Kept:
    """How many singular values to keep in each sector (spectra sorted descending).

    Ranks all values together and keeps the fewest largest ones whose discarded weight
    sum(dropped s^2)/sum(s^2) is <= ``discard``, at most ``max_bond`` and at least one; values
    <= ``min_value`` are always dropped. Ties: earlier sectors rank first, so ties at the
    threshold are dropped from the last sectors first.
    """
    allv = np.concatenate(spectra) if spectra else np.zeros(0)
    lengths = np.array([len(x) for x in spectra], dtype=np.int64)
    cap = np.iinfo(np.int64).max if max_bond is None else int(max_bond)
    counts, total, dropped = _ranked(allv.astype(np.float64, copy=False), lengths, cap, float(discard),
                                     float(min_value))
    if not total > 0:
        raise ValueError("cannot truncate a zero tensor")
    return Kept(counts.tolist(), total, dropped)


def choose_kept(spectra: list[np.ndarray], max_bond: int | None, discard: float,
                min_value: float = 0.0) -> list[int]:
    """The kept count of every sector (:func:`rank_kept`)."""
    return rank_kept(spectra, max_bond, discard, min_value).counts


@njit(cache=True, nogil=True)
def _ranked(values, lengths, cap, discard, min_value):  # pragma: no cover - compiled
    """Kept counts per sector, total and dropped weight for :func:`rank_kept` (one pass each)."""
    n = values.size
    sector = np.empty(n, np.int64)
    pos = 0
    for i in range(lengths.size):
        sector[pos:pos + lengths[i]] = i
        pos += lengths[i]
    order = np.argsort(-values, kind="mergesort")        # stable: descending, ties in sector order
    w = np.empty(n)
    above = 0
    for i in range(n):
        w[i] = values[order[i]] ** 2
        above += values[order[i]] > min_value
    tail = np.empty(n)      # tail[i]: weight dropped when the first i + 1 are kept
    acc = 0.0
    for i in range(n - 1, -1, -1):
        tail[i] = acc
        acc += w[i]
    total = acc
    keep = n
    for i in range(n):
        if tail[i] <= discard * total:
            keep = i + 1
            break
    keep = max(min(keep, max(above, 1), cap), 1)
    counts = np.zeros(lengths.size, np.int64)
    for i in range(min(keep, n)):
        counts[sector[order[i]]] += 1
    return counts, total, tail[keep - 1] if n else 0.0


def dense_svd(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin SVD of one dense matrix: numpy's gesdd (one BLAS thread pool), gesvd if it fails."""
    try:
        return np.linalg.svd(m, full_matrices=False)
    except np.linalg.LinAlgError:
        return sla.svd(m, full_matrices=False, lapack_driver="gesvd", check_finite=False)


def svd(t: BlockTensor, row_axes, col_axes, max_bond: int | None = None, discard: float = 0.0,
        min_value: float = 0.0, absorb: str | None = None) -> Truncation:
    """Truncated SVD of ``t`` between ``row_axes`` and ``col_axes``, ranked across all sectors.

    ``absorb`` "left" or "right": the kept values are normalised (sum of squares 1: the Schmidt
    values of a normalised state) and multiplied along the bond into that factor as it is
    assembled, so ``u`` or ``vh`` is no longer isometric; ``values`` are the normalised ones.
    """
    if absorb not in (None, "left", "right"):
        raise ValueError(f"absorb must be None, 'left' or 'right', not {absorb!r}")
    mb = as_matrix(t, row_axes, col_axes)
    factors = map_sectors(dense_svd, mb.mats, SIDE_BY_SIDE["svd"])
    us, ss, vs = [f[0] for f in factors], [f[1] for f in factors], [f[2] for f in factors]
    kept, total, dropped = rank_kept(ss, max_bond, discard, min_value)
    values = tuple(s[:n].copy() for s, n in zip(ss, kept) if n > 0)
    if absorb is not None:
        norm = math.sqrt(sum(float(np.dot(v, v)) for v in values))
        values = tuple(v / norm for v in values)
    u, vh = _factors(mb, t, us, vs, kept, values if absorb else None, absorb or "left")
    return Truncation(u, values, vh, dropped / total, total)


def qr(t: BlockTensor, row_axes, col_axes) -> tuple[BlockTensor, BlockTensor]:
    """t = Q R with Q isometric (Q^dagger Q = 1) on the row legs; the bond carries the row charge."""
    mb = as_matrix(t, row_axes, col_axes)
    qs, rs = zip(*map_sectors(np.linalg.qr, mb.mats, SIDE_BY_SIDE["qr"])) if mb.mats else ((), ())
    return _factors(mb, t, list(qs), list(rs), [q.shape[1] for q in qs])


def lq(t: BlockTensor, row_axes, col_axes) -> tuple[BlockTensor, BlockTensor]:
    """t = L Q with Q having orthonormal rows (Q Q^dagger = 1) on the column legs."""
    mb = as_matrix(t, row_axes, col_axes)
    factors = map_sectors(lambda m: np.linalg.qr(m.conj().T), mb.mats, SIDE_BY_SIDE["qr"])
    ls, qs = [r.conj().T for _, r in factors], [q.conj().T for q, _ in factors]
    return _factors(mb, t, ls, qs, [q.shape[0] for q in qs])


def eigh(t: BlockTensor, row_axes, col_axes) -> tuple[tuple[np.ndarray, ...], BlockTensor, Leg]:
    """Eigen-decomposition of a Hermitian tensor (row legs dual to column legs, charge 0).

    Returns the eigenvalues per sector (ascending), the eigenvector tensor V (row legs + bond) with
    t = V diag(w) V^dagger, and the bond leg.
    """
    mb = as_matrix(t, row_axes, col_axes)
    if any(m.shape[0] != m.shape[1] for m in mb.mats):
        raise ValueError("eigh needs square sector blocks (row legs dual to column legs)")
    ws, vs = zip(*map_sectors(np.linalg.eigh, mb.mats, SIDE_BY_SIDE["eigh"])) if mb.mats else ((), ())
    kept = [len(w) for w in ws]
    v, _ = _factors(mb, t, vs, [v.conj().T for v in vs], kept)
    return tuple(w for w in ws if len(w)), v, v.legs[-1]


def scale_leg(t: BlockTensor, axis: int, values) -> BlockTensor:
    """Multiply ``t`` along leg ``axis`` by a per-sector vector (e.g. singular values)."""
    v = np.concatenate([np.asarray(x) for x in values]) if len(values) else np.zeros(0)
    lay = t.layout
    pos = leg_positions(lay.key_array, lay.shape_array, lay.offsets, axis, t.legs[axis].offsets)
    return BlockTensor(t.legs, t.charge, t.data * v[pos])
