"""Local expectation values and connected charge-charge correlations of an MPS, and the correlation
length measured from their decay.

Both are computed with transfer matrices on the block tensors, never with a dense state. A copy
of the state is brought to orthogonality centre 0 and the centre is then walked to the right by
QR steps. With the centre on site i every site to the left is a left isometry and every site to
the right a right isometry, so

    <O_i>                = Tr[A_i^dagger O A_i],
    <(Q_i - <Q_i>) Q_j>  = Tr[E_{j-1} B_j^dagger Q B_j],   E_i = A_i^dagger (Q - <Q_i>) A_i,
                           E_k = B_k^dagger E_{k-1} B_k,

where E carries the insertion at site i to the right (Schollwoeck, Ann. Phys. 326, 96 (2011),
section 4.2.1). Inserting the *centred* operator Q_i - <Q_i> gives the connected correlation
directly, with no cancellation between <Q_i Q_j> and <Q_i><Q_j>. The cost is O(L^2 D^3 d).
"""

from __future__ import annotations

import numpy as np

from mps.blocks.charges import Leg
from mps.blocks.contract import contract
from mps.blocks.decompose import qr, scale_leg
from mps.blocks.tensor import BlockTensor
from mps.chain.state import ChainState, canonicalize

__all__ = ["local_expectations", "connected_charge_correlations", "correlation_length"]


# ----------------------------------------------------------------------------- expectation values
def _centre_tensors(state: ChainState) -> tuple[list[BlockTensor], list[BlockTensor]]:
    """(centres, right) of a normalised copy of ``state``.

    ``centres[i]`` is site i's tensor when the orthogonality centre sits on i; ``right[j]`` is site
    j's tensor as a right isometry (j >= 1). The right leg of ``centres[i]`` is the left leg of
    ``right[i + 1]``: walking the centre right by QR (t_i = Q R, R absorbed into t_{i+1}) leaves
    every tensor right of the centre untouched. The state passed in is not modified.
    """
    right = list(canonicalize(state, 0).tensors)
    centres = [right[0]]
    for i in range(1, len(right)):
        _, r = qr(centres[-1], (0, 1), (2,))
        centres.append(contract(r, right[i], (1,), (0,)))
    return centres, right


def _per_sector(phys: Leg, diagonal: np.ndarray) -> list[np.ndarray]:
    """Split a diagonal over the dense physical index into one vector per sector (for scale_leg)."""
    off = phys.offsets
    return [np.asarray(diagonal[off[k]:off[k + 1]]) for k in range(phys.nsec)]


def _conserving_operator(phys: Leg, op: np.ndarray) -> BlockTensor:
    """The charge-conserving part of a local operator as a block tensor with legs (out, in).

    Entries that change the charge have zero expectation value in a state of definite total charge,
    so they are dropped rather than refused.
    """
    q = phys.state_charges()
    same = np.all(q[:, None, :] == q[None, :, :], axis=2)
    return BlockTensor.from_dense(np.where(same, op, 0.0), (phys, phys.dual()))


def local_expectations(state: ChainState, op: np.ndarray) -> np.ndarray:
    """<psi|O_j|psi>/<psi|psi> of one local operator on every site j = 0..L-1.

    Parameters
    ----------
    state : the MPS (any orthogonality centre; it is not modified).
    op : (d, d) matrix ``op[out, in]`` in the MPS's charge-sorted local basis. Its charge-changing
        entries, whose expectation vanishes by symmetry, are ignored.

    Returns
    -------
    (L,) array, real if the operator is Hermitian, complex otherwise.
    """
    phys = state.tensors[0].legs[1]
    op = np.asarray(op)
    if op.shape != (phys.dim, phys.dim):
        raise ValueError(f"operator must be ({phys.dim}, {phys.dim}), got {op.shape}")
    o = _conserving_operator(phys, op)
    centres, _ = _centre_tensors(state)
    out = np.empty(state.sites, dtype=complex)
    for i, a in enumerate(centres):
        oa = contract(o, a, (1,), (1,)).transpose((1, 0, 2))
        out[i] = contract(a.conj(), oa, (0, 1, 2), (0, 1, 2))
    hermitian = np.allclose(op, op.conj().T, atol=1e-14, rtol=0.0)
    return out.real.copy() if hermitian else out


def _append_batch(stack: BlockTensor | None, env: BlockTensor) -> BlockTensor:
    """Stack an environment (bra, ket) as one more entry of the batch leg of (bra, batch, ket)."""
    bra, ket = env.legs
    n = 0 if stack is None else stack.legs[1].dim
    batch = Leg(((0,) * bra.nq,), (n + 1,), 1)
    out = BlockTensor((bra, batch, ket), env.charge, dtype=env.dtype)
    for (b, _, k), view in out.blocks():
        view[:, n, :] = env.get((b, k))
        if n:
            view[:, :n, :] = stack.get((b, 0, k))
    return out


def connected_charge_correlations(state: ChainState, site_charge: np.ndarray) -> np.ndarray:
    """Connected correlations C_ij = <Q_i Q_j> - <Q_i><Q_j> of a diagonal local charge.

    Parameters
    ----------
    state : the MPS (any orthogonality centre; it is not modified).
    site_charge : (d,) physical charge of every local basis state in the MPS's charge-sorted basis,
        e.g. S^z = (-1/2, +1/2) for spin-1/2 chains or n = (0, 1) for spinless fermions.

    Returns
    -------
    (L, L) real symmetric matrix; the diagonal is the on-site variance <Q_i^2> - <Q_i>^2.

    Notes
    -----
    E_i = A_i^dagger (Q - <Q_i>) A_i (centre on i) is carried to the right through the transfer
    matrices of the right isometries and closed with Q on every site j > i (module docstring):
    O(L^2) transfer steps of cost O(D^3 d). The environments of all i < j are kept stacked along
    one extra "batch" leg, so each step j is a few large matrix products, planned once per j.
    """
    phys = state.tensors[0].legs[1]
    qd = np.asarray(site_charge, dtype=float).reshape(-1)
    if qd.shape != (phys.dim,):
        raise ValueError(f"site_charge must have {phys.dim} entries (one per local state), got {qd.shape}")
    charge = _per_sector(phys, qd)
    L = state.sites
    centres, right = _centre_tensors(state)
    corr = np.zeros((L, L))
    stack = None
    for i, a in enumerate(centres):
        mean = float(np.real(contract(a.conj(), scale_leg(a, 1, charge), (0, 1, 2), (0, 1, 2))))
        da = scale_leg(a, 1, [c - mean for c in charge])           # (Q_i - <Q_i>) A_i
        corr[i, i] = float(np.real(da.inner(da)))
        if i + 1 == L:
            break
        stack = _append_batch(stack, contract(a.conj(), da, (0, 1), (0, 1)))   # (bra, batch, ket)
        b = right[i + 1]
        x = contract(stack, b, (2,), (0,))                          # (bra, batch, phys, ket)
        close = contract(b.conj(), scale_leg(x, 2, charge), (0, 1, 2), (0, 2, 3))
        corr[:i + 1, i + 1] = np.real(close.to_dense())
        if i + 2 < L:
            stack = contract(b.conj(), x, (0, 1), (0, 2))          # environments on the next bond
    iu = np.triu_indices(L, 1)
    corr[iu[1], iu[0]] = corr[iu]
    return corr


# ----------------------------------------------------------------------------- correlation length
def bulk_profile(corr: np.ndarray, edge: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """g(r) = mean over bulk i of |C(i, i+r)|, both sites at least ``edge`` sites from either end.

    Returns (g, counts) for r = 0..R, counts = number of pairs averaged. The default edge L//8
    (at least 2) keeps the boundary region, where an open chain's correlations differ from the
    bulk (Friedel oscillations, edge states), out. Averaging over consecutive i weighs both
    sublattices of a staggered or dimerised chain equally.
    """
    corr = np.asarray(corr, dtype=float)
    if corr.ndim != 2 or corr.shape[0] != corr.shape[1]:
        raise ValueError(f"corr must be a square matrix, got shape {corr.shape}")
    L = corr.shape[0]
    edge = max(2, L // 8) if edge is None else int(edge)
    lo, hi = edge, L - 1 - edge              # bulk sites lo..hi inclusive
    if hi < lo:
        raise ValueError(f"no bulk left: {L} sites with {edge} edge sites on each side")
    g = np.array([np.mean(np.abs(np.diagonal(corr, r)[lo:hi - r + 1])) for r in range(hi - lo + 1)])
    counts = np.arange(hi - lo + 1, 0, -1)
    return g, counts


def _parity_fit(r: np.ndarray, y: np.ndarray, columns: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray, float]:
    """Least squares y = c_{r mod 2} + sum_k b_k columns_k, one intercept per parity of r present.

    Returns (b, [c_even, c_odd] with NaN for an absent parity, rms residual)."""
    parities = [p for p in (0, 1) if np.any(r % 2 == p)]
    A = np.stack([np.asarray(c, dtype=float) for c in columns]
                 + [(r % 2 == p).astype(float) for p in parities], axis=1)
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    rms = float(np.sqrt(np.mean((A @ coef - y) ** 2)))
    intercepts = np.full(2, np.nan)
    intercepts[parities] = coef[len(columns):]
    return coef[:len(columns)], intercepts, rms


def _fit_window(g: np.ndarray, cutoff: float, window: tuple[int, int] | None) -> tuple[int, int]:
    """Default window: r = 2 up to just before g first stays below ``cutoff`` for two consecutive
    distances, and at most half the bulk length."""
    if window is not None:
        return int(window[0]), min(int(window[1]), len(g) - 1)
    r_min, r_max = 2, (len(g) - 1) // 2
    for r in range(r_min + 1, r_max + 1):
        if g[r] <= cutoff and g[r - 1] <= cutoff:
            return r_min, r - 2
    return r_min, r_max


VANISHING_PARITY = 1e-3   # a parity this far below the other is zero up to noise (common practice)


def _drop_vanishing_parity(r: np.ndarray, g: np.ndarray) -> np.ndarray:
    """The distances without the parity of r whose median g is below VANISHING_PARITY times the
    other's: correlations that vanish exactly at every other r (the density correlations of
    particle-hole symmetric free fermions, Peschel, J. Phys. A 36, L205 (2003)) are noise there in
    variational data, and a fit of that noise would pass for a decay."""
    medians = [float(np.median(g[r[r % 2 == p]])) if np.any(r % 2 == p) else np.nan for p in (0, 1)]
    for p in (0, 1):
        other = medians[1 - p]
        if np.isfinite(medians[p]) and np.isfinite(other) and medians[p] < VANISHING_PARITY * other:
            return r[r % 2 != p]
    return r


def correlation_length(corr: np.ndarray, window: tuple[int, int] | None = None,
                       edge: int | None = None, floor: float = 1e-8) -> dict:
    """Correlation length xi from the decay of connected correlations in the bulk.

    The bulk profile g(r) = mean_i |C(i, i+r)| (:func:`bulk_profile`) is fitted on a window of
    distances with the Ornstein-Zernike form of a massive chain,

        log g(r) = log A_{r mod 2} - r / xi - a log r,

    one amplitude per parity of r, so that a staggered or dimerised chain, whose correlations
    alternate in r (or vanish at every other r, as for particle-hole symmetric free fermions), is
    fitted by its envelope. The power prefactor r^{-a} matters: without it the fitted length
    depends strongly on the window (on exact free-fermion data of a dimerised chain, 20 % below
    the asymptotic 1/log((1+dimer)/(1-dimer)) of the exact density correlations; with it, 2 %).
    The profile is also fitted by a pure exponential (a = 0) and by a pure power law (1/xi = 0),
    the form of a critical chain (g ~ r^{-2} for the smooth part in a Luttinger liquid;
    Giamarchi, Quantum Physics in One Dimension, 2004, ch. 2; from memory). The decay counts as
    exponential when the pure exponential describes the window better than the pure power law
    and the full fit decays (1/xi > 0); otherwise ``xi`` is inf.

    The length is reliable when the window reaches several xi (``reach`` = r_max / xi >~ 3); at
    shorter reach the data sit in the crossover from power law to exponential and xi comes out
    too small.

    Window choice (when ``window`` is None): r from 2 (the first distances are lattice-scale) up
    to the last distance before g first falls below ``floor`` * g(0) at two consecutive r, and at
    most half the bulk length, so that every distance is averaged over at least half the bulk.
    Points below the floor are dropped even inside an explicit window. The default relative floor
    1e-8 is about the accuracy of the correlations of a variational MPS: an error delta in the
    state enters C linearly, and a ground state converged in energy to ~1e-14 still has delta ~1e-7
    (measured against exact free fermions: absolute errors ~1e-9 at intermediate r). For exact
    data a smaller floor may be passed.

    Parameters
    ----------
    corr : (L, L) connected correlation matrix.
    window : (r_min, r_max) inclusive, to fix the fitted distances.
    edge : sites left out at each end (default max(2, L//8)).
    floor : relative noise floor, see above.

    Returns
    -------
    dict with ``xi`` (inf unless the decay is exponential), ``exponential`` (bool), ``xi_fit``
    (1/xi of the full fit inverted, whatever the verdict; inf if it does not decay),
    ``prefactor_exponent`` a, ``amplitude`` (the larger A) and ``amplitudes`` ([A_even, A_odd],
    NaN for a parity without data), ``residual`` (rms of the full fit in log g),
    ``xi_pure`` and ``pure_residual`` of the pure exponential, ``power_exponent`` and
    ``power_residual`` of the pure power law, ``reach`` = r_max / xi, ``window`` [r_min, r_max],
    ``points`` (distances used), ``edge`` and ``floor``. With fewer than 5 usable distances no fit
    is made: ``xi`` inf, the fit fields NaN.
    """
    g, _ = bulk_profile(corr, edge)
    L = np.asarray(corr).shape[0]
    edge = max(2, L // 8) if edge is None else int(edge)
    g0 = g[0] if g[0] > 0 else float(np.max(g))
    cutoff = floor * g0
    r_min, r_max = _fit_window(g, cutoff, window)
    r = np.arange(max(r_min, 1), r_max + 1)
    r = r[g[r] > cutoff]
    r = _drop_vanishing_parity(r, g)
    nan = float("nan")
    out = {"xi": float("inf"), "exponential": False, "xi_fit": nan, "prefactor_exponent": nan,
           "amplitude": nan, "amplitudes": [nan, nan], "residual": nan, "xi_pure": nan,
           "pure_residual": nan, "power_exponent": nan, "power_residual": nan, "reach": 0.0,
           "window": [int(r_min), int(r_max)], "points": int(r.size), "edge": edge, "floor": floor}
    if r.size < 5:
        return out
    y, logr = np.log(g[r]), np.log(r)
    (inv_xi, a), c, res = _parity_fit(r, y, [-r, -logr])
    (inv_pure,), _, res_pure = _parity_fit(r, y, [-r])
    (p,), _, res_pow = _parity_fit(r, y, [-logr])
    xi_fit = 1.0 / float(inv_xi) if inv_xi > 0 else float("inf")
    exponential = bool(inv_xi > 0 and res_pure < res_pow)
    amps = [float(np.exp(x)) if np.isfinite(x) else nan for x in c]
    out.update(xi=xi_fit if exponential else float("inf"), exponential=exponential, xi_fit=xi_fit,
               prefactor_exponent=float(a), amplitude=float(np.nanmax(amps)), amplitudes=amps,
               residual=res, xi_pure=1.0 / float(inv_pure) if inv_pure > 0 else float("inf"),
               pure_residual=res_pure, power_exponent=float(p), power_residual=res_pow,
               reach=float(r[-1] / xi_fit) if exponential else 0.0)
    return out
