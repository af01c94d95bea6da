"""The sweep figures of ``chargewise bench`` on a tiny chain: the accounting adds up."""

from __future__ import annotations

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
