"""The sweep figures of ``chargewise bench`` on a tiny chain: the accounting adds up."""

from __future__ import annotations

import subprocess
import sys

from mps.pipeline.bench import SweepCase, _sweep_worker


class _Box:
    def put(self, item):
        self.item = item


def test_sweep_figures_count_work_and_planning_time():
    box = _Box()
    _sweep_worker(SweepCase(8, 8, 2), box)
    fig = box.item
    assert fig["bond"] == 8 and fig["sites"] == 8 and fig["max_bond"] == 8
    assert fig["seconds"] > 0 and fig["gflop"] > 0
    assert 0 < fig["flop_fraction"] < 1              # a tiny chain is far from the matmul peak
    assert 0 <= fig["planning_seconds"] <= fig["seconds"]
    assert fig["planning_share"] == fig["planning_seconds"] / fig["seconds"]


def test_single_site_sweep_of_a_large_local_space_is_counted_too():
    box = _Box()
    _sweep_worker(SweepCase(6, 6, 2, update="single-site", family="complex-scalar", couplings=(("m", 0.5),),
                            options=(("nmax", 1),), parity=False), box)
    fig = box.item
    assert fig["update"] == "single-site" and fig["family"] == "complex-scalar"
    assert fig["gflop"] > 0 and 0 < fig["flop_fraction"] < 1


def test_warm_up_compiles_the_sweep_kernels_before_any_timing():
    # a fresh interpreter: no kernel has been called (compiled or loaded from cache) yet
    code = ("from mps.blocks.direct import direct_apply\n"
            "from mps.solver.krylov import _extend\n"
            "from mps.pipeline.bench import compile_kernels\n"
            "before = len(direct_apply.signatures) + len(_extend.signatures)\n"
            "compile_kernels()\n"
            "print(before, len(direct_apply.signatures), len(_extend.signatures))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    before, direct, krylov = map(int, out.stdout.split())
    assert before == 0 and direct >= 1 and krylov >= 1
