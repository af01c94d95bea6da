"""The sweep figures of ``chargewise bench`` on a tiny chain: the accounting adds up."""

from __future__ import annotations

from mps.pipeline.bench import _sweep_worker


class _Box:
    def put(self, item):
        self.item = item


def test_sweep_figures_count_work_and_planning_time():
    box = _Box()
    _sweep_worker(8, 8, 2, box)
    fig = box.item
    assert fig["bond"] == 8 and fig["sites"] == 8 and fig["max_bond"] == 8
    assert fig["seconds"] > 0 and fig["gflop"] > 0
    assert 0 < fig["flop_fraction"] < 1              # a tiny chain is far from the matmul peak
    assert 0 <= fig["planning_seconds"] <= fig["seconds"]
    assert fig["planning_share"] == fig["planning_seconds"] / fig["seconds"]
