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

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from mps.blocks.charges import FusionMap, Leg, fuse
from mps.blocks.tensor import BlockTensor


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
    """Pack ``t`` into one dense matrix per charge sector of the fused row legs."""
    row_axes, col_axes = tuple(row_axes), tuple(col_axes)
    if sorted(row_axes + col_axes) != list(range(t.ndim)) or not row_axes or not col_axes:
        raise ValueError("row and column axes must split the legs into two non-empty groups")
    rows = fuse(tuple(t.legs[i] for i in row_axes), 1)
    cols = fuse(tuple(t.legs[i] for i in col_axes), 1)
    perm = row_axes + col_axes
    q = np.asarray(t.charge)
    found: dict[int, tuple[int, np.ndarray]] = {}
    for key, view in t.blocks():
        rs, ro, rshape = rows.entries[tuple(key[i] for i in row_axes)]
        cs, co, cshape = cols.entries[tuple(key[i] for i in col_axes)]
        if rs not in found:
            found[rs] = (cs, np.zeros((rows.fused.sizes[rs], cols.fused.sizes[cs]), dtype=t.dtype))
        nr, nc = int(np.prod(rshape)), int(np.prod(cshape))
        found[rs][1][ro:ro + nr, co:co + nc] = view.transpose(perm).reshape(nr, nc)
    # sectors with no stored block (all combinations empty) still need a zero matrix if both sides exist
    for rs, rq in enumerate(rows.fused.charges):
        cs = cols.fused.index(tuple(q - np.asarray(rq)))
        if rs not in found and cs >= 0 and rows.fused.sizes[rs] and cols.fused.sizes[cs]:
            found[rs] = (cs, np.zeros((rows.fused.sizes[rs], cols.fused.sizes[cs]), dtype=t.dtype))
    keys = sorted(found)
    return MatrixBlocks(rows, cols, row_axes, col_axes, tuple((rs, found[rs][0]) for rs in keys),
                        tuple(found[rs][1] for rs in keys))


def _unpack_rows(fmap: FusionMap, sector: int, mat: np.ndarray, bond_sector: int, out: BlockTensor,
                 bond_last: bool) -> None:
    """Cut the rows of a (fused sector x bond) matrix back into the blocks of ``out``."""
    for combo in fmap.combos_of(sector):
        _, off, shape = fmap.entries[combo]
        n = int(np.prod(shape))
        piece = mat[off:off + n]
        if bond_last:
            out.get(combo + (bond_sector,))[...] = piece.reshape(shape + (mat.shape[1],))
        else:
            out.get((bond_sector,) + combo)[...] = piece.T.reshape((mat.shape[1],) + shape)


def _bond_leg(mb: MatrixBlocks, kept: list[int], flow: int) -> tuple[Leg, list[int]]:
    """Bond leg with one sector per row sector that keeps at least one vector."""
    used = [i for i, n in enumerate(kept) if n > 0]
    if not used:
        raise ValueError("decomposition keeps nothing: the tensor is zero")
    charges = [mb.rows.fused.charges[mb.sectors[i][0]] for i in used]
    return Leg(tuple(charges), tuple(kept[i] for i in used), flow), used


def _factors(mb: MatrixBlocks, t: BlockTensor, lefts, rights, kept) -> tuple[BlockTensor, BlockTensor]:
    """Assemble left factor (row legs + bond) and right factor (bond + column legs)."""
    bond, used = _bond_leg(mb, kept, -1)
    dtype = np.result_type(*[m.dtype for m in lefts], *[m.dtype for m in rights])
    left = BlockTensor(tuple(t.legs[i] for i in mb.row_axes) + (bond,), None, dtype=dtype)
    right = BlockTensor((bond.dual(),) + tuple(t.legs[i] for i in mb.col_axes), t.charge, dtype=dtype)
    for b, i in enumerate(used):
        rs, cs = mb.sectors[i]
        _unpack_rows(mb.rows, rs, lefts[i][:, :kept[i]], b, left, bond_last=True)
        _unpack_rows(mb.cols, cs, rights[i][:kept[i]].T, b, right, bond_last=False)
    return left, right


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


def choose_kept(spectra: list[np.ndarray], max_bond: int | None, discard: float,
                min_value: float = 0.0) -> list[int]:
    """How many singular values to keep in each sector (spectra sorted descending).

    Ranks all values together and keeps the fewest largest ones whose discarded weight
    sum(dropped s^2)/sum(s^2) is <= ``discard``, at most ``max_bond`` and at least one; values
    <= ``min_value`` are always dropped.
    """
    allv = np.concatenate(spectra) if spectra else np.zeros(0)
    if allv.size == 0 or not np.any(allv > 0):
        raise ValueError("cannot truncate a zero tensor")
    w = np.sort(allv**2)[::-1]
    total = w.sum()
    tail = np.concatenate([np.cumsum(w[::-1])[::-1][1:], [0.0]]) / total  # weight dropped if we keep i+1
    keep = int(np.argmax(tail <= discard)) + 1
    keep = min(keep, int(np.count_nonzero(np.sort(allv)[::-1] > min_value)) or 1)
    if max_bond is not None:
        keep = min(keep, int(max_bond))
    keep = max(keep, 1)
    threshold = np.sort(allv)[::-1][keep - 1]
    kept = [int(np.count_nonzero(s >= threshold)) for s in spectra]
    excess = sum(kept) - keep       # ties at the threshold: drop from the end
    for i in reversed(range(len(kept))):
        while excess > 0 and kept[i] > 0 and spectra[i][kept[i] - 1] == threshold:
            kept[i] -= 1
            excess -= 1
    return kept


def svd(t: BlockTensor, row_axes, col_axes, max_bond: int | None = None, discard: float = 0.0,
        min_value: float = 0.0) -> Truncation:
    """Truncated SVD of ``t`` between ``row_axes`` and ``col_axes``, ranked across all sectors."""
    mb = as_matrix(t, row_axes, col_axes)
    us, ss, vs = [], [], []
    for m in mb.mats:
        try:
            u, s, vh = np.linalg.svd(m, full_matrices=False)   # numpy's LAPACK: one BLAS thread pool
        except np.linalg.LinAlgError:
            u, s, vh = sla.svd(m, full_matrices=False, lapack_driver="gesvd", check_finite=False)
        us.append(u), ss.append(s), vs.append(vh)
    total = float(sum(np.sum(s**2) for s in ss))
    kept = choose_kept(ss, max_bond, discard, min_value)
    dropped = total - float(sum(np.sum(s[:n]**2) for s, n in zip(ss, kept)))
    u, vh = _factors(mb, t, us, vs, kept)
    values = tuple(s[:n].copy() for s, n in zip(ss, kept) if n > 0)
    return Truncation(u, values, vh, max(dropped, 0.0) / total, total)


def qr(t: BlockTensor, row_axes, col_axes) -> tuple[BlockTensor, BlockTensor]:
    """t = Q R with Q isometric (Q^dagger Q = 1) on the row legs; the bond carries the row charge."""
    mb = as_matrix(t, row_axes, col_axes)
    qs, rs = zip(*[np.linalg.qr(m) for m in mb.mats]) if mb.mats else ((), ())
    return _factors(mb, t, list(qs), list(rs), [q.shape[1] for q in qs])


def lq(t: BlockTensor, row_axes, col_axes) -> tuple[BlockTensor, BlockTensor]:
    """t = L Q with Q having orthonormal rows (Q Q^dagger = 1) on the column legs."""
    mb = as_matrix(t, row_axes, col_axes)
    ls, qs = [], []
    for m in mb.mats:
        q, r = np.linalg.qr(m.conj().T)
        ls.append(r.conj().T), qs.append(q.conj().T)
    return _factors(mb, t, ls, qs, [q.shape[0] for q in qs])


def eigh(t: BlockTensor, row_axes, col_axes) -> tuple[tuple[np.ndarray, ...], BlockTensor, Leg]:
    """Eigen-decomposition of a Hermitian tensor (row legs dual to column legs, charge 0).

    Returns the eigenvalues per sector (ascending), the eigenvector tensor V (row legs + bond) with
    t = V diag(w) V^dagger, and the bond leg.
    """
    mb = as_matrix(t, row_axes, col_axes)
    ws, vs = [], []
    for m in mb.mats:
        if m.shape[0] != m.shape[1]:
            raise ValueError("eigh needs square sector blocks (row legs dual to column legs)")
        w, v = np.linalg.eigh(m)
        ws.append(w), vs.append(v)
    kept = [len(w) for w in ws]
    v, _ = _factors(mb, t, vs, [v.conj().T for v in vs], kept)
    return tuple(w for w in ws if len(w)), v, v.legs[-1]


def scale_leg(t: BlockTensor, axis: int, values) -> BlockTensor:
    """Multiply ``t`` along leg ``axis`` by a per-sector vector (e.g. singular values)."""
    out = t.astype(np.result_type(t.dtype, *[np.asarray(v).dtype for v in values]))
    shape_fix = [1] * t.ndim
    for key, view in out.blocks():
        v = np.asarray(values[key[axis]])
        shape_fix[axis] = v.shape[0]
        view *= v.reshape(shape_fix)
    return out
