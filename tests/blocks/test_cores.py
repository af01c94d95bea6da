"""Per-sector factorisations side by side (mps.blocks.cores) and the decompositions that use
them on sectors large enough to take that path, against numpy's dense LAPACK as the reference."""

from __future__ import annotations

import multiprocessing
import os
import threading

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.cores import blas_threads, map_sectors
from mps.blocks.decompose import SIDE_BY_SIDE, eigh, lq, qr, scale_leg, svd
from mps.blocks.tensor import BlockTensor
from mps.blocks.testing import assert_matches_dense, check_invariants

TOL = 1e-11
SVD_SIDE = SIDE_BY_SIDE["svd"]


def mixed_matrices(rng):
    """Two blocks above the side-by-side size, three below it."""
    return [rng.standard_normal(shape) for shape in ((120, 70), (5, 9), (64, 96), (1, 1), (30, 12))]


def svd_thread(m):
    u, s, vh = np.linalg.svd(m, full_matrices=False)
    return u, s, vh, threading.current_thread().name


def test_results_come_back_in_input_order_and_reconstruct():
    mats = mixed_matrices(np.random.default_rng(1))
    for m, (u, s, vh, _) in zip(mats, map_sectors(svd_thread, mats, SVD_SIDE)):
        assert u.shape[0] == m.shape[0] and vh.shape[1] == m.shape[1]
        np.testing.assert_allclose((u * s) @ vh, m, rtol=0, atol=TOL * max(1.0, s[0]))
        np.testing.assert_allclose(s, np.linalg.svd(m, compute_uv=False), rtol=0, atol=TOL * s[0])


@pytest.mark.skipif(blas_threads() < 2, reason="the BLAS of this machine runs on one thread")
def test_large_blocks_run_side_by_side_and_the_blas_threads_come_back():
    before = blas_threads()
    names = {r[-1] for r in map_sectors(svd_thread, mixed_matrices(np.random.default_rng(2)), SVD_SIDE)}
    assert any(name.startswith("chargewise-sector") for name in names)
    assert blas_threads() == before


def test_small_blocks_stay_on_the_calling_thread():
    mats = [np.random.default_rng(3).standard_normal((20, 30)) for _ in range(4)]
    names = {r[-1] for r in map_sectors(svd_thread, mats, SVD_SIDE)}
    assert names == {threading.current_thread().name}


def test_one_blas_thread_means_no_side_by_side_work():
    with threadpool_limits(1, user_api="blas"):
        names = {r[-1] for r in map_sectors(svd_thread, mixed_matrices(np.random.default_rng(4)), SVD_SIDE)}
        assert blas_threads() == 1
    assert names == {threading.current_thread().name}


def test_a_failing_block_raises_and_restores_the_blas_threads():
    before = blas_threads()

    def fails_on_wide(m):
        if m.shape[1] > m.shape[0]:
            raise np.linalg.LinAlgError("refused")
        return m.sum()

    with pytest.raises(np.linalg.LinAlgError):
        map_sectors(fails_on_wide, mixed_matrices(np.random.default_rng(5)), SVD_SIDE)
    assert blas_threads() == before


# --- the decompositions on large sectors ------------------------------------------------------

def big_tensor(rng, dtype=float) -> BlockTensor:
    """Bond legs of charges -2..2 with up to 50 states, a spin-1/2 leg: row sectors of 20-80
    states, so several sectors take the side-by-side path."""
    bond = Leg.make([-2, -1, 0, 1, 2], [20, 40, 50, 40, 20], 1)
    phys = Leg.make([-1, 1], [1, 1], 1)
    return BlockTensor.random((bond, phys, phys, bond.dual()), (0,), rng=rng, dtype=dtype)


def as_matrix(t: BlockTensor) -> np.ndarray:
    return t.to_dense().reshape(t.shape[0] * t.shape[1], -1)


@pytest.mark.parametrize("dtype", [float, complex])
def test_svd_of_large_sectors_matches_the_dense_spectrum(dtype):
    t = big_tensor(7, dtype)
    tr = svd(t, (0, 1), (2, 3))
    check_invariants(tr.u), check_invariants(tr.vh)
    assert max(tr.bond.sizes) >= 48
    dense = np.linalg.svd(as_matrix(t), compute_uv=False)
    kept = np.sort(np.concatenate(tr.values))[::-1]
    np.testing.assert_allclose(kept, dense[:kept.size], rtol=0, atol=TOL * dense[0])
    rebuilt = contract(scale_leg(tr.u, 2, tr.values), tr.vh, [2], [0])
    assert_matches_dense(rebuilt, t.to_dense(), atol=TOL * dense[0])


def test_qr_and_lq_of_large_sectors_reconstruct():
    t = big_tensor(8)
    q, r = qr(t, (0, 1), (2, 3))
    assert max(q.legs[-1].sizes) >= 80
    assert_matches_dense(contract(q, r, [2], [0]), t.to_dense(), atol=TOL)
    assert_matches_dense(contract(q.conj(), q, [0, 1], [0, 1]), np.eye(q.legs[-1].dim), atol=TOL)
    lo, qq = lq(t, (0, 1), (2, 3))
    assert_matches_dense(contract(lo, qq, [2], [0]), t.to_dense(), atol=TOL)
    assert_matches_dense(contract(qq, qq.conj(), [1, 2], [1, 2]), np.eye(qq.legs[0].dim), atol=TOL)


def test_eigh_of_large_sectors_matches_the_dense_eigenvalues():
    x = big_tensor(9)
    h = contract(x, x.conj(), [2, 3], [2, 3])       # X X^dagger: Hermitian, sectors up to 80
    values, v, bond = eigh(h, (0, 1), (2, 3))
    assert max(bond.sizes) >= 64
    m = as_matrix(h)
    np.testing.assert_allclose(np.sort(np.concatenate(values)), np.linalg.eigvalsh(m), rtol=0,
                               atol=TOL * np.abs(m).max())
    rebuilt = contract(scale_leg(v, 2, values), v.conj(), [2], [2])
    assert_matches_dense(rebuilt, h.to_dense(), atol=TOL * np.abs(m).max())


def _factorise_in_child(queue) -> None:
    mats = mixed_matrices(np.random.default_rng(6))
    queue.put([float(r[1][0]) for r in map_sectors(svd_thread, mats, SVD_SIDE)])


@pytest.mark.skipif(not hasattr(os, "fork"), reason="no fork on this platform")
def test_a_forked_child_factorises_with_its_own_threads():
    """After the parent has used its pool, a child made by fork (which inherits none of the
    pool's threads) still factorises, with the same results."""
    parent = [float(r[1][0]) for r in map_sectors(svd_thread, mixed_matrices(np.random.default_rng(6)), SVD_SIDE)]
    ctx = multiprocessing.get_context("fork")
    queue = ctx.Queue()
    child = ctx.Process(target=_factorise_in_child, args=(queue,))
    child.start()
    try:
        got = queue.get(timeout=60)
    finally:
        child.join(timeout=60)
        if child.is_alive():
            child.kill()
    np.testing.assert_allclose(got, parent, rtol=1e-12)
    assert child.exitcode == 0
