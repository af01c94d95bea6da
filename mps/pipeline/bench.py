"""``chargewise bench``: the performance figures of DESIGN.md section 6, as JSON.

- ``block_vs_dense``: one two-site effective-Hamiltonian application with charge blocks versus
  the same contraction done densely with numpy (Heisenberg chain, mid-chain bond structure).
- ``gemm_fraction``: FLOP rate of that block-sparse application (FLOPs counted from the group
  shapes of its contraction plans and the multiply-adds of its direct MPO step) over numpy's
  matmul rate on 2048 x 2048 matrices measured in the same process (the machine's practical peak:
  the best of several products, before and after the timed work, so that a moment in which the
  host took a core does not pass for the peak).
- ``seconds_per_sweep`` and ``sweep_exponent``: one full sweep of a Heisenberg chain at each bond
  dimension with a fixed Krylov work per bond (8 applications, no restart, 4 in ``--quick``), so
  only the engine's cost is measured, and the slope of log(seconds) against log(bond) (reported,
  no goal: the overheads that shape it at small bonds are what the other figures watch).
- ``sweep_flop_fraction``: per bond, the FLOPs of the sweep's planned contractions (two-site
  tensor, every effective-Hamiltonian application and every environment update, counted from the
  group shapes and the multiply-adds of the direct MPO steps; SVDs and Krylov vector work are
  not counted) over (sweep seconds x the matmul rate measured in the same process).
- ``planning_share``: per bond, seconds spent building contraction plans and direct MPO steps
  over sweep seconds.
- ``peak_rss_mb``: peak resident memory of the process that ran the largest-bond sweep of the
  series (each sweep runs in a fresh process); the full bench adds one bond-1024 sweep of a
  60-site chain with its own peak memory (``large_bond``).
- ``large_site_speedup`` and ``large_site_ratio`` (full bench): one sweep of the complex scalar at
  nmax 5 (d = 36), 64 sites, bond 64, with the default update (single-site with subspace
  expansion) against plain two-site updates, and against a spin-1/2 Heisenberg sweep of the same
  size and Krylov work.
Bond sectors follow the Gaussian charge profile that critical spin chains show, so block counts
and sizes are realistic without having to converge a large state first.
"""

from __future__ import annotations

import json
import math
import multiprocessing as mp
import os
import platform
import resource
import sys
import time
from dataclasses import dataclass

import numpy as np

from models import get_family
from mps.blocks.chain import PlannedChain, planning_seconds
from mps.blocks.charges import Leg
from mps.blocks.tensor import BlockTensor
from mps.chain.mpo import build_mpo
from mps.chain.state import ChainState, canonicalize
from mps.solver.effective import apply_merged, merge_pair, two_site_steps
from mps.solver.sweep import SectorSweeper, Stage, SweepSettings, default_update


def gaussian_leg(bond: int, parity: int, flow: int, width: float = 2.5, cap: int | None = None,
                 integers: bool = False) -> Leg:
    """Bond leg with charges of one parity (every integer with ``integers``) and sizes
    ~ exp(-q^2 / (2 width^2)) adding up to ``bond``."""
    qs = np.arange(-40, 41) if integers else np.arange(-40 + parity, 41, 2)
    w = np.exp(-qs.astype(float) ** 2 / (2 * width**2))
    sizes = np.floor(bond * w / w.sum()).astype(int)
    sizes[np.argmax(w)] += bond - sizes.sum()
    if cap is not None:
        sizes = np.minimum(sizes, cap)
    keep = sizes > 0
    return Leg.make(qs[keep], sizes[keep], flow)


def heisenberg_mpo(sites: int):
    fam = get_family("xxz")
    return build_mpo(fam.space(), sites, fam.terms(sites, {"J": 1.0, "Delta": 1.0}))


def effective_problem(bond: int, rng: np.random.Generator):
    """(left environment, merged MPO pair, right environment, two-site tensor) at a mid-chain bond."""
    mpo = heisenberg_mpo(6)
    w1, w2 = mpo.tensors[2], mpo.tensors[3]
    left_bond = gaussian_leg(bond, 1, 1)
    right_bond = gaussian_leg(bond, 1, 1)
    left = BlockTensor.random((left_bond, left_bond.dual(), w1.legs[0].dual()), None, rng=rng)
    right = BlockTensor.random((right_bond.dual(), right_bond, w2.legs[3].dual()), None, rng=rng)
    theta = BlockTensor.random((left_bond, mpo.phys, mpo.phys, right_bond.dual()), None, rng=rng)
    return left, merge_pair(w1, w2), right, theta


def dense_application(left, pair, right, theta) -> np.ndarray:
    """The same contraction order (environment, two-site tensor, MPO pair, environment) in numpy."""
    x = np.tensordot(left, theta, axes=(1, 0))
    x = np.tensordot(x, pair, axes=((1, 2, 3), (0, 1, 2)))
    return np.tensordot(x, right, axes=((1, 4), (1, 2)))


def best_time(fn, repeats: int) -> float:
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def gemm_rate(n: int = 2048, repeats: int = 5) -> float:
    a = np.random.default_rng(0).standard_normal((n, n))
    b = np.random.default_rng(1).standard_normal((n, n))
    a @ b
    return 2.0 * n**3 / best_time(lambda: a @ b, repeats)


def application_figures(bond: int, repeats: int) -> dict:
    rng = np.random.default_rng(5)
    problem = effective_problem(bond, rng)
    left, pair, right, theta = problem
    chain = PlannedChain(theta, two_site_steps(left, pair, right))
    peak = gemm_rate()
    t_block = best_time(lambda: chain(theta.data), repeats)
    dense = [t.to_dense() for t in problem]
    t_dense = best_time(lambda: dense_application(*dense), max(1, repeats // 2))
    check = apply_merged(*problem).to_dense()
    err = float(np.max(np.abs(check - dense_application(*dense))) / max(np.max(np.abs(check)), 1e-300))
    flops = chain.flops
    peak = max(peak, gemm_rate())
    return {"bond": bond, "block_seconds": t_block, "dense_seconds": t_dense,
            "block_vs_dense": t_dense / t_block, "block_gflops": flops / t_block / 1e9,
            "peak_gflops": peak / 1e9, "gemm_fraction": flops / t_block / peak,
            "relative_difference": err, "blocks_in_theta": problem[-1].layout.nblocks}


def chain_legs(sites: int, bond: int, dim: int = 2, parity: bool = True) -> list[Leg]:
    """Bond legs 0..L of a chain at total charge 0 with Gaussian sector profiles capped at
    ``bond`` and at the Hilbert-space dimension dim^min(b, L-b) of the shorter side; with
    ``parity`` the charges of bond b have the parity of b (spin-1/2 S^z in units of 1/2)."""
    legs = [Leg(((0,),), (1,), 1)]
    for b in range(1, sites):
        cap = min(bond, dim ** min(b, sites - b, 20))
        legs.append(gaussian_leg(cap, b % 2, 1) if parity else gaussian_leg(cap, 0, 1, integers=True))
    legs.append(Leg(((0,),), (1,), 1))
    return legs


@dataclass(frozen=True)
class SweepCase:
    """One timed sweep: a chain family at some size, bond and Krylov work, with one update."""

    sites: int
    bond: int
    krylov: int
    family: str = "xxz"
    couplings: tuple = (("J", 1.0), ("Delta", 1.0))
    options: tuple = ()
    update: str = "two-site"
    parity: bool = True


def _timed_sweep(case: SweepCase) -> tuple[SectorSweeper, float, float]:
    """One sweep of ``case`` from its random start: (the search, sweep seconds, planning seconds)."""
    rng = np.random.default_rng(3)
    fam = get_family(case.family)
    space = fam.space(dict(case.options))
    mpo = build_mpo(space, case.sites, fam.terms(case.sites, dict(case.couplings), dict(case.options)))
    legs = chain_legs(case.sites, case.bond, mpo.phys.dim, case.parity)
    ts = [BlockTensor.random((legs[j], mpo.phys, legs[j + 1].dual()), None, rng=rng) for j in range(case.sites)]
    state = canonicalize(ChainState(ts, case.sites - 1), 0)
    settings = SweepSettings((Stage(case.bond, 1, 0.0),), discard=0.0, energy_tol=1e-30,
                             lanczos_vectors=case.krylov, lanczos_tol=1e-30, lanczos_restarts=0,
                             update=case.update)
    search = SectorSweeper(mpo, state, settings, rng)
    planned = planning_seconds()
    t0 = time.perf_counter()
    for _ in search.run():
        pass
    return search, time.perf_counter() - t0, planning_seconds() - planned


def _sweep_worker(case: SweepCase, queue) -> None:
    before = gemm_rate()
    search, seconds, planning = _timed_sweep(case)
    peak = max(before, gemm_rate())
    queue.put({"bond": case.bond, "sites": case.sites, "family": case.family, "update": case.update,
               "seconds": seconds, "max_bond": max(search.state.bond_dims),
               "gflop": search.flops / 1e9, "flop_fraction": search.flops / seconds / peak,
               "planning_seconds": planning, "planning_share": planning / seconds,
               "peak_gflops": peak / 1e9,
               "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024})


def compile_kernels() -> None:
    """A tiny sweep of each update in this process before the timed ones: numba compiles the
    sweep's kernels once and writes its on-disk cache, so each timed sweep (a fresh process)
    loads them. Without it the first timed sweep on a new install also timed the compilation
    (measured: 4.6 s instead of 0.25 s at bond 32)."""
    for update in ("two-site", "single-site"):
        _timed_sweep(SweepCase(6, 4, 2, update=update))


def sweep_figures(sites: int, bond: int, krylov: int, **case) -> dict:
    """Run one :class:`SweepCase` in a fresh process (so its peak memory is its own)."""
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=_sweep_worker, args=(SweepCase(sites, bond, krylov, **case), queue))
    proc.start()
    out = queue.get()
    proc.join()
    return out


LARGE_SITE = dict(family="complex-scalar", couplings=(("m", 0.5),), options=(("nmax", 5),), parity=False)
"""The large-local-space case: complex scalar (d = 36) of mass 0.5 at nmax 5 (our demo choice)."""


def large_site_figures(say) -> dict:
    """``large_site_speedup`` (plain two-site sweep / default single-site sweep, complex scalar,
    64 sites, bond 64) and ``large_site_ratio`` (that sweep / a spin-1/2 Heisenberg sweep of the
    same size with the same Krylov work)."""
    out = {}
    for name, update in (("default", default_update(36)), ("two-site", "two-site")):
        say(f"one {update} sweep of the complex scalar (d = 36), 64 sites at bond 64")
        out[name] = sweep_figures(64, 64, 8, update=update, **LARGE_SITE)
    say("one sweep of the Heisenberg chain, 64 sites at bond 64")
    out["heisenberg"] = sweep_figures(64, 64, 8, update=default_update(2))
    return {"large_site_speedup": out["two-site"]["seconds"] / out["default"]["seconds"],
            "large_site_ratio": out["default"]["seconds"] / out["heisenberg"]["seconds"],
            "large_site": out}


def blas_info() -> dict:
    try:
        from threadpoolctl import threadpool_info
        info = [{k: d.get(k) for k in ("internal_api", "num_threads", "version", "architecture")}
                for d in threadpool_info() if d.get("user_api") == "blas"]
    except ImportError:
        cfg = np.show_config(mode="dicts") if "mode" in np.show_config.__code__.co_varnames else {}
        info = [cfg.get("Build Dependencies", {}).get("blas", {})]
    return {"blas": info, "cpu_count": os.cpu_count(),
            "env": {k: os.environ[k] for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                                 "OPENBLAS_CORETYPE", "MKL_NUM_THREADS") if k in os.environ}}


def run_benchmark(quick: bool, progress=None) -> dict:
    say = progress or (lambda text: None)
    heff_bond = 256 if quick else 512
    bonds = [32, 64, 128] if quick else [32, 64, 128, 256, 512]
    sites = 40 if quick else 100
    say("compiling the sweep's kernels (or loading them from numba's cache)")
    compile_kernels()
    say(f"effective Hamiltonian at bond {heff_bond}")
    app = application_figures(heff_bond, 3 if quick else 5)
    sweeps = []
    for bond in bonds:
        say(f"one sweep of {sites} sites at bond {bond}")
        sweeps.append(sweep_figures(sites, bond, krylov=4 if quick else 8))
    logb = np.log([s["bond"] for s in sweeps])
    logt = np.log([s["seconds"] for s in sweeps])
    slope = float(np.polyfit(logb, logt, 1)[0])
    out = {
        "quick": quick, "python": platform.python_version(), "numpy": np.__version__,
        **blas_info(),
        "block_vs_dense": app["block_vs_dense"], "gemm_fraction": app["gemm_fraction"],
        "sweep_exponent": slope,
        "seconds_per_sweep": {str(s["bond"]): s["seconds"] for s in sweeps},
        "sweep_flop_fraction": {str(s["bond"]): s["flop_fraction"] for s in sweeps},
        "planning_share": {str(s["bond"]): s["planning_share"] for s in sweeps},
        "peak_rss_mb": sweeps[-1]["peak_rss_mb"], "sweep_sites": sites,
        "application": app, "sweeps": sweeps,
        "goals": {"block_vs_dense": ">= 8",
                  "sweep_flop_fraction": {"256": ">= 0.35", "512": ">= 0.5"},
                  "planning_share": {"64": "<= 0.10", "256": "<= 0.10"}, "peak_rss_mb": "< 2000"},
    }
    if not quick:
        say("one sweep of 60 sites at bond 1024")
        big = sweep_figures(60, 1024, krylov=8)
        out["large_bond"] = big
        out.update(large_site_figures(say))
        out["goals"].update({"large_bond.peak_rss_mb": "< 6000", "large_site_speedup": ">= 5",
                             "large_site_ratio": "<= 10"})
    return out


def main(quick: bool) -> int:
    result = run_benchmark(quick, progress=lambda t: print(f"bench: {t}", file=sys.stderr, flush=True))
    print(json.dumps(result, indent=2))
    return 0
