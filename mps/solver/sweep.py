"""Ground-state sweeps on charge-labelled MPS: two-site updates (White, PRL 69, 2863 (1992)) or
single-site updates with subspace expansion (Hubig, McCulloch, Schollwoeck and Wolf, PRB 91,
155115 (2015)), chosen by ``SweepSettings.update`` (``auto``: :func:`default_update`).

A sweep moves the two-site window left to right and back. At every bond the effective
Hamiltonian's lowest eigenvector (restarted Lanczos, warm-started from the current two-site
tensor) replaces the two site tensors; an SVD ranked across all charge sectors truncates it to
the stage's bond cap and discarded-weight threshold. In stages with ``admix`` > 0 a small random
admixture in every allowed block of the two-site tensor lets charge sectors that the state does
not yet hold appear on the bond (a simple form of the perturbation of White, PRB 72, 180403
(2005)); the last stage normally runs without it. A single-site sweep visits sites 0..L-2 and
then L-1..1 (the same 2(L-1) steps) and grows bonds by subspace expansion instead of admixture
(``admix`` is not used).

The search is a generator: it yields one :class:`SweepRecord` after every full sweep and never
prints. Its resumable position (:class:`Progress`) together with the state is all a checkpoint
needs.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Callable, Iterator

import numpy as np

from mps.blocks.contract import contract, plan_pair, run_plan
from mps.blocks.decompose import svd
from mps.blocks.expand import widened_svd
from mps.blocks.tensor import BlockTensor
from mps.chain.mpo import Mpo
from mps.chain.state import BondSpectrum, ChainState, canonicalize, product_state, random_state
from mps.solver.effective import (
    expansion_left,
    expansion_right,
    grow_left,
    grow_left_counted,
    grow_right,
    grow_right_counted,
    left_boundary,
    merge_pair,
    one_site_operator,
    right_boundary,
    two_site_operator,
)
from mps.solver.krylov import lowest_eigenpair

UPDATES = ("auto", "two-site", "single-site")
"""Bond updates: two-site (White 1992), single-site with subspace expansion (Hubig et al. 2015),
or whichever :func:`default_update` picks for the chain's local dimension."""

SINGLE_SITE_FROM = 9
"""Local dimension from which single-site updates are the default (see :func:`default_update`)."""


def default_update(dim: int) -> str:
    """The update a run uses unless the config names one, by local dimension d.

    Measured on the 2-core development machine, one sweep of 64 sites at bond 64 with 8 Krylov
    applications per step, two-site seconds / single-site seconds: 1.2 (spin-1/2, d = 2),
    1.2 (spin 1, d = 3), 2.3 (complex scalar nmax 1, d = 4), 5.1 (nmax 2, d = 9), 37 (nmax 5,
    d = 36). Single-site updates need more sweeps to settle, and on the two-charge Hubbard demo
    (d = 4, 32 sites, bond 96) they stayed 4.5e-4 above the two-site energy after twice the
    sweeps; so they are the default only from d = 9 on, where a two-site step costs 5x more.
    """
    return "single-site" if dim >= SINGLE_SITE_FROM else "two-site"

@dataclass(frozen=True)
class Stage:
    """One bond-dimension stage: up to ``sweeps`` sweeps with bond cap ``bond``."""

    bond: int
    sweeps: int
    admix: float = 0.0


@dataclass(frozen=True)
class SweepSettings:
    stages: tuple[Stage, ...]
    discard: float = 1e-10
    energy_tol: float = 1e-9
    lanczos_vectors: int = 24
    lanczos_tol: float = 1e-10
    lanczos_restarts: int = 4
    update: str = "auto"

    def __post_init__(self) -> None:
        if self.update not in UPDATES:
            raise ValueError(f"update must be one of {', '.join(UPDATES)}, got {self.update!r}")

    def residual_tol(self, stage: int) -> float:
        """Residual tolerance of the eigensolver: ``lanczos_tol`` in the last stage (it sets the
        accuracy of the final state, hence of every Schmidt value), looser before."""
        return self.lanczos_tol if stage == len(self.stages) - 1 else max(self.lanczos_tol, 1e-5)


@dataclass(frozen=True)
class SweepRecord:
    """What one full sweep achieved (one row of sweeps.csv)."""

    sweep: int
    stage: int
    bond: int
    energy: float
    delta_energy: float
    truncation: float
    max_entropy: float
    seconds: float
    max_bond: int
    converged: bool
    warning: str = ""


@dataclass
class Progress:
    """Resumable position of a search: sweeps done, the stage and sweeps done in it, and for a
    sweep stopped half way its bond steps done (worst truncation, last energy, time)."""

    sweep: int = 0
    stage: int = 0
    in_stage: int = 0
    energy: float = math.nan
    converged: bool = False
    history: list = field(default_factory=list)
    step: int = 0
    step_truncation: float = 0.0
    step_energy: float = math.nan
    step_seconds: float = 0.0


class NumericalError(ArithmeticError):
    """A non-finite number in the eigensolver or the truncation: the state in memory is unusable
    (the caller keeps its last checkpoint)."""


def rise_allowance(energy: float, truncation: float, sites: int, energy_tol: float) -> float:
    """How much the energy may rise from one sweep to the next before it is worth a warning.

    A truncation that discards weight w moves the energy by about w times the energy scale
    (common practice: energy errors proportional to the discarded weight), and a sweep truncates
    2(L - 1) times; we allow 10 w max(L, |E|) on top of ``energy_tol`` and of rounding
    (1e-12 max(1, |E|)). A larger rise means the search is not doing what it should (a bond too
    small for the stage, a Krylov space too small, or a bug)."""
    scale = max(float(sites), abs(energy))
    return energy_tol + 10.0 * truncation * scale + 1e-12 * max(1.0, abs(energy))


class SweepStopped(Exception):
    """Raised by :meth:`SectorSweeper.run` when asked to stop: the state, environments and
    progress are consistent at a bond boundary, so a checkpoint taken now resumes exactly."""


def _admix(theta: BlockTensor, amount: float, rng: np.random.Generator) -> BlockTensor:
    if amount <= 0:
        return theta
    r = BlockTensor.random(theta.legs, theta.charge, rng=rng, dtype=theta.dtype)
    out = theta + r * (amount / max(r.norm(), 1e-300))
    return out / out.norm()


class SectorSweeper:
    """Two-site sweeps of ``state`` under ``mpo``; iterate :meth:`run` to advance sweep by sweep."""

    def __init__(self, mpo: Mpo, state: ChainState, settings: SweepSettings, rng: np.random.Generator,
                 progress: Progress | None = None):
        if mpo.sites != state.sites:
            raise ValueError("operator and state have different numbers of sites")
        if state.sites < 2:
            raise ValueError("two-site sweeps need at least two sites")
        self.mpo, self.settings, self.rng = mpo, settings, rng
        self.progress = progress or Progress()
        if self.progress.step == 0 and state.center != 0:
            state = canonicalize(state, 0)
        self.state = state
        self.lefts: list[BlockTensor | None] = [None] * state.sites
        self.rights: list[BlockTensor | None] = [None] * state.sites
        self._pairs: dict = {}      # merged MPO pairs by bond and by content
        self.flops = 0      # multiply-adds x 2 of the planned contractions run by the bond steps
        self.update = default_update(mpo.phys.dim) if settings.update == "auto" else settings.update
        self._last_spectra = None     # Schmidt values after the previous sweep (single-site convergence)
        self._build_environments()

    # ------------------------------------------------------------------ environments
    def _build_environments(self) -> None:
        """Left environments up to the orthogonality centre, right environments down to it."""
        ts, ws = self.state.tensors, self.mpo.tensors
        n, c = self.state.sites, self.state.center
        self.lefts[0] = left_boundary(ws[0].legs[0], ts[0].legs[0])
        self.rights[n - 1] = right_boundary(ws[-1].legs[3], ts[-1].legs[2])
        for j in range(c):
            self.lefts[j + 1] = grow_left(self.lefts[j], ts[j], ws[j])
        for j in range(n - 1, c, -1):
            self.rights[j - 1] = grow_right(self.rights[j], ts[j], ws[j])

    def _grow_left(self, j: int) -> BlockTensor:
        """Left environment of site j + 1 after site j changed (its FLOPs counted)."""
        env, flops = grow_left_counted(self.lefts[j], self.state.tensors[j], self.mpo.tensors[j])
        self.flops += flops
        return env

    def _grow_right(self, j: int) -> BlockTensor:
        """Right environment of site j - 1 after site j changed (its FLOPs counted)."""
        env, flops = grow_right_counted(self.rights[j], self.state.tensors[j], self.mpo.tensors[j])
        self.flops += flops
        return env

    # ------------------------------------------------------------------ one bond
    def _optimize(self, j: int, stage: Stage, tol: float, rightward: bool):
        ts = self.state.tensors
        plan = plan_pair(ts[j], ts[j + 1], (2,), (0,))
        theta = run_plan(plan, ts[j], ts[j + 1])
        self.flops += plan.flops
        op = two_site_operator(self.lefts[j], self._pair(j), self.rights[j + 1], theta)
        energy, theta = self._ground_state(op, theta, tol)
        # the normalised Schmidt values go into the factor the centre moves to
        cut = svd(_admix(theta, stage.admix, self.rng), (0, 1), (2, 3), max_bond=stage.bond,
                  discard=self.settings.discard, min_value=1e-15, absorb="right" if rightward else "left")
        self._record(j + 1, cut.bond.charges, cut.values, normalized=True)
        return energy, cut

    def _pair(self, j: int) -> BlockTensor:
        """The merged MPO pair of sites j, j+1 (:func:`merge_pair`), built once per distinct pair
        of tensors: the bulk of a uniform chain has one, shared by all its bonds."""
        if j not in self._pairs:
            w1, w2 = self.mpo.tensors[j], self.mpo.tensors[j + 1]
            key = tuple((w.legs, w.charge, w.data.dtype.str, w.data.tobytes()) for w in (w1, w2))
            self._pairs[j] = self._pairs.get(key) or self._pairs.setdefault(key, merge_pair(w1, w2))
        return self._pairs[j]

    def _ground_state(self, op, start: BlockTensor, tol: float) -> tuple[float, BlockTensor]:
        """Lowest eigenpair of the local effective Hamiltonian, warm-started from ``start``."""
        res = lowest_eigenpair(op.matvec, start.data.astype(op.dtype, copy=False),
                               lanczos_vectors=self.settings.lanczos_vectors, tol=tol,
                               max_restarts=self.settings.lanczos_restarts, rng=self.rng)
        self.flops += op.chain.flops * res.applications
        if not (math.isfinite(res.value) and np.isfinite(res.vector).all()):
            raise NumericalError(f"the eigensolver returned a non-finite value ({res.value})")
        return res.value, op.wrap(res.vector)

    def _record(self, bond: int, charges, values, normalized: bool = False) -> tuple[np.ndarray, ...]:
        """Normalise (unless ``normalized``) a bond's kept singular values, one array per sector
        of ``charges``, store the non-empty sectors as its Schmidt values and return them."""
        norm = math.sqrt(sum(float(np.sum(v**2)) for v in values))
        if not (math.isfinite(norm) and norm > 0):
            raise NumericalError(f"the truncation at bond {bond} gave Schmidt values of norm {norm}")
        values = values if normalized else tuple(v / norm for v in values)
        self.state.spectra[bond] = BondSpectrum(tuple(q for q, v in zip(charges, values) if v.size),
                                                tuple(v for v in values if v.size))
        return values

    def _pair_step(self, j: int, rightward: bool, stage: Stage, tol: float) -> tuple[float, float]:
        """Two-site update of sites j, j+1; the centre moves to j+1 (rightward) or j."""
        ts = self.state.tensors
        energy, cut = self._optimize(j, stage, tol, rightward)
        ts[j], ts[j + 1] = cut.u, cut.vh
        if rightward:
            self.lefts[j + 1] = self._grow_left(j)
            self.state.center = j + 1
        else:
            self.rights[j] = self._grow_right(j + 1)
            self.state.center = j
        return energy, cut.discarded

    def _site_step(self, step: int, stage: Stage, tol: float) -> tuple[float, float]:
        """Single-site update with subspace expansion (Hubig, McCulloch, Schollwoeck and Wolf,
        PRB 91, 155115 (2015)). Step s < L-1 optimises site s and moves the centre right;
        later steps optimise sites L-1 ... 1 and move it left, so a sweep has the same 2(L-1)
        steps as a two-site sweep. The optimised M is truncated by its own SVD (the discarded-weight
        rule of two-site updates), and the bond gains empty directions from P = L M W (or M W R)
        outside M's span (:func:`mps.blocks.expand.widened_svd`) for the next update to fill."""
        ts, ws = self.state.tensors, self.mpo.tensors
        n = self.state.sites
        rightward = step < n - 1
        j = step if rightward else 2 * (n - 1) - step
        op = one_site_operator(self.lefts[j], ws[j], self.rights[j], ts[j])
        energy, m = self._ground_state(op, ts[j], tol)
        extra = expansion_right(self.lefts[j], m, ws[j]) if rightward else expansion_left(m, ws[j], self.rights[j])
        # the neighbour's other legs bound the rank the new bond can carry
        nb = ts[j + 1] if rightward else ts[j - 1]
        room = nb.legs[1].dim * (nb.legs[2].dim if rightward else nb.legs[0].dim)
        cut = widened_svd(m, extra, 2, "columns" if rightward else "rows", min(stage.bond, room),
                          self.settings.discard, 1e-15)
        self._record(j + 1 if rightward else j, cut.isometry.legs[-1 if rightward else 0].charges, cut.values)
        ts[j] = cut.isometry
        if rightward:
            ts[j + 1] = contract(cut.rest, ts[j + 1], (1,), (0,))
            self.lefts[j + 1] = self._grow_left(j)
        else:
            ts[j - 1] = contract(ts[j - 1], cut.rest, (2,), (0,))
            self.rights[j - 1] = self._grow_right(j)
        self.state.center = j + 1 if rightward else j - 1
        return energy, cut.discarded

    def _sweep(self, stage: Stage, on_bond, should_stop) -> tuple[float, float, float]:
        """One sweep (left to right and back), starting at bond step ``progress.step``; returns the
        last energy, the largest discarded weight and the seconds spent. ``progress`` points at the
        next bond step whenever ``on_bond`` is called, so a checkpoint taken there resumes exactly."""
        n = self.state.sites
        p = self.progress
        tol = self.settings.residual_tol(p.stage)
        steps = 2 * (n - 1)
        order = list(range(n - 1)) + list(range(n - 2, -1, -1))
        energy, worst = p.step_energy, p.step_truncation
        t0 = time.perf_counter() - p.step_seconds
        for step in range(p.step, steps):
            try:
                if self.update == "single-site":
                    energy, discarded = self._site_step(step, stage, tol)
                else:
                    energy, discarded = self._pair_step(order[step], step < n - 1, stage, tol)
            except NumericalError as exc:
                raise NumericalError(f"{exc} at bond step {step + 1} of sweep {p.sweep + 1}") from None
            worst = max(worst, discarded)
            if step + 1 < steps:   # a resumable position: a checkpoint taken now continues exactly
                p.step, p.step_truncation, p.step_energy = step + 1, worst, energy
                p.step_seconds = time.perf_counter() - t0
            if on_bond is not None:
                on_bond(step + 1, steps)
            if should_stop is not None and step + 1 < steps and should_stop():
                raise SweepStopped(f"stopped after bond step {step + 1} of {steps} in sweep {p.sweep + 1}")
        p.step, p.step_truncation, p.step_energy, p.step_seconds = 0, 0.0, math.nan, 0.0
        return energy, worst, time.perf_counter() - t0

    def _spectra_settled(self) -> bool:
        """Single-site sweeps settle the energy before the smallest Schmidt values, so they also
        need every bond's Schmidt values to have moved by less than max(sqrt(discard), 1e-8)
        since the last sweep (values below sqrt(discard) are below the truncation's own
        resolution). Two-site sweeps are judged by the energy alone, as before."""
        if self.update != "single-site":
            return True
        now = [s.as_dict() if s is not None else {} for s in self.state.spectra]
        before, self._last_spectra = self._last_spectra, now
        if before is None:
            return False
        change = 0.0
        for old, new in zip(before, now):
            for q in set(old) | set(new):
                a, b = np.sort(old.get(q, np.zeros(0)))[::-1], np.sort(new.get(q, np.zeros(0)))[::-1]
                n = max(a.size, b.size)
                diff = np.abs(np.pad(a, (0, n - a.size)) - np.pad(b, (0, n - b.size)))
                change = max(change, float(diff.max(initial=0.0)))
        return change < max(math.sqrt(self.settings.discard), 1e-8)

    # ------------------------------------------------------------------ driver
    def run(self, on_bond: Callable[[int, int], None] | None = None,
            should_stop: Callable[[], bool] | None = None) -> Iterator[SweepRecord]:
        """Sweep through the remaining stages, yielding a record after every full sweep.

        A stage ends after its number of sweeps; the last stage also ends as soon as the energy
        changes by less than ``energy_tol`` from one sweep to the next (converged). When
        ``should_stop()`` turns true the sweep stops after the current bond and
        :class:`SweepStopped` is raised, with ``progress`` pointing at the next bond.
        """
        stages = self.settings.stages
        p = self.progress
        while p.stage < len(stages) and not p.converged:
            stage = stages[p.stage]
            if p.in_stage >= stage.sweeps:
                p.stage, p.in_stage = p.stage + 1, 0
                continue
            energy, worst, seconds = self._sweep(stage, on_bond, should_stop)
            delta = energy - p.energy if math.isfinite(p.energy) else math.nan
            last = p.stage == len(stages) - 1
            settled = self._spectra_settled()
            p.converged = bool(last and stage.admix == 0 and math.isfinite(delta)
                               and abs(delta) < self.settings.energy_tol and settled)
            p.sweep += 1
            p.in_stage += 1
            p.energy = energy
            spectra = [s for s in self.state.spectra if s is not None]
            allowed = rise_allowance(energy, worst, self.state.sites, self.settings.energy_tol)
            warning = (f"the energy rose by {delta:.3e} in sweep {p.sweep}, more than the truncation "
                       f"allows ({allowed:.1e})") if delta > allowed and stage.admix == 0 else ""
            rec = SweepRecord(p.sweep, p.stage, stage.bond, energy, delta, worst,
                              max(s.entropy() for s in spectra), seconds,
                              max(self.state.bond_dims), p.converged, warning)
            p.history.append(rec)
            yield rec


def energy_and_variance(state: ChainState, mpo: Mpo) -> tuple[float, float]:
    """<H> and <H^2> - <H>^2 of a normalised state, by contracting environments with one and two
    copies of the MPO from left to right."""
    ts, ws = state.tensors, mpo.tensors
    env = left_boundary(ws[0].legs[0], ts[0].legs[0])
    l0, m0 = ts[0].legs[0], ws[0].legs[0]
    env2 = BlockTensor((l0, m0.dual(), m0.dual(), l0.dual()))
    env2.data[:] = 1.0
    for a, w in zip(ts, ws):
        env = grow_left(env, a, w)
        x = contract(env2, a, (3,), (0,))            # (bra, w1, w2, s, r)
        x = contract(x, w, (2, 3), (0, 2))           # (bra, w1, r, s', w2')
        x = contract(x, w, (1, 3), (0, 2))           # (bra, r, w2', s'', w1')
        x = contract(a.conj(), x, (0, 1), (0, 3))    # (r_bra, r, w2', w1')
        env2 = x.transpose((0, 3, 2, 1))
    norm2 = float(np.real(overlap_norm(state)))
    e = float(np.real(env.data.sum())) / norm2
    h2 = float(np.real(env2.data.sum())) / norm2
    return e, h2 - e * e


def overlap_norm(state: ChainState) -> float:
    """<psi|psi> from the orthogonality centre (the other tensors are isometries)."""
    return state.tensors[state.center].norm() ** 2


def solve_sector(mpo: Mpo, target, settings: SweepSettings, rng: np.random.Generator,
                      init: str = "random", init_bond: int = 16) -> SectorSweeper:
    """Run every stage from a random (or product) state in the sector ``target``; for notebooks
    and tests. The finished search holds the state, its Schmidt values and the sweep history."""
    if init == "product":
        state = product_state(mpo.phys, mpo.sites, target)
    else:
        state = random_state(mpo.phys, mpo.sites, target, init_bond, rng)
    search = SectorSweeper(mpo, state, settings, rng)
    for _ in search.run():
        pass
    return search
