"""Expansion of a ``scan:`` section into points, and the refusals of bad axes (no physics here)."""

from __future__ import annotations

import pytest

from mps.pipeline.config import parse_config
from mps.pipeline.errors import ConfigError
from mps.pipeline.scan_plan import (
    scan_axes,
    scan_points,
    validate_points,
    warm_axis,
    warm_sources,
    warm_start_enabled,
)

BASE = {
    "name": "study",
    "model": {"family": "xxz", "sites": 8, "couplings": {"J": 1.0, "Delta": 0.5}, "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 8, "sweeps": 1}], "seed": 4},
    "output": {"dir": "runs/study"},
}


def with_scan(scan):
    return {**BASE, "scan": scan}


def test_grid_times_paired_axis():
    pts = scan_points(with_scan({"grid": {"model.couplings.Delta": [0.0, 0.5, 1.0]},
                                 "paired": {"model.sites": [8, 10], "model.couplings.h": [0.1, 0.2]}}))
    assert len(pts) == 6
    combos = {(p.values["model.couplings.Delta"], p.values["model.sites"], p.values["model.couplings.h"])
              for p in pts}
    assert combos == {(d, s, h) for d in (0.0, 0.5, 1.0) for s, h in ((8, 0.1), (10, 0.2))}
    assert len({p.name for p in pts}) == 6 and all("/" not in p.name for p in pts)
    assert [p.config["solver"]["seed"] for p in pts] == [4 + i for i in range(6)]   # one seed per point
    for p in pts:
        assert p.config["output"]["dir"] == f"runs/study/{p.name}"
        cfg = parse_config(p.config)   # every point is an ordinary, valid config
        assert cfg.model.couplings["Delta"] == p.values["model.couplings.Delta"]
        assert cfg.model.sites == p.values["model.sites"]


def test_scanned_seed_is_kept():
    pts = scan_points(with_scan({"grid": {"solver.seed": [7, 9]}}))
    assert [p.config["solver"]["seed"] for p in pts] == [7, 9]


def test_readable_names():
    pts = scan_points(with_scan({"grid": {"model.couplings.Delta": [0.25, 1.0], "model.sites": [8]}}))
    assert [p.name for p in pts] == ["Delta=0.25,sites=8", "Delta=1,sites=8"]


@pytest.mark.parametrize("scan, where", [
    ({"grid": {"model.couplings.Delta": []}}, "scan.grid.model.couplings.Delta"),
    ({"grid": {"Delta": [1]}}, "scan.grid.Delta"),
    ({"paired": {"model.sites": [8, 10], "model.couplings.h": [0.1]}}, "scan.paired.model.couplings.h"),
    ({"grid": {"model.sites": [8]}, "paired": {"model.sites": [8]}}, "scan.paired.model.sites"),
    ({"grid": {"output.dir": ["a"]}}, "scan.grid.output.dir"),
    ({"axes": {}}, "scan.axes"),
    ({}, "scan"),
])
def test_bad_axes_are_refused_naming_the_key(scan, where):
    with pytest.raises(ConfigError) as err:
        scan_points(with_scan(scan))
    assert str(err.value).startswith(where)


def test_validation_names_the_scanned_key_and_value():
    data = with_scan({"grid": {"model.couplings.Dleta": [0.5]}})
    with pytest.raises(ConfigError) as err:
        validate_points(data, scan_points(data))
    assert str(err.value).startswith("scan.grid.model.couplings.Dleta: value 0.5:")
    data = with_scan({"grid": {"model.sites": [8, 1]}})
    with pytest.raises(ConfigError) as err:
        validate_points(data, scan_points(data))
    assert str(err.value).startswith("scan.grid.model.sites: value 1:")
    good = with_scan({"grid": {"model.sites": [8, 10]}})
    assert [c.model.sites for c in validate_points(good, scan_points(good))] == [8, 10]


def test_warm_axis_is_the_last_coupling_axis():
    axes = scan_axes({"grid": {"model.couplings.Delta": [0, 1], "model.sites": [8, 10]}})
    assert warm_axis(axes) == 0
    assert warm_axis(scan_axes({"grid": {"model.sites": [8, 10]}})) is None
    assert warm_axis(scan_axes({"grid": {"model.couplings.Delta": [0.5]}})) is None   # one value: no neighbour
    assert not warm_start_enabled({"warm_start": False}) and warm_start_enabled({})
    with pytest.raises(ConfigError, match="scan.warm_start"):
        warm_start_enabled({"warm_start": "yes"})


def test_warm_sources_chain_neighbours_in_segments():
    data = with_scan({"grid": {"model.sites": [8, 10], "model.couplings.Delta": [0.0, 0.25, 0.5, 0.75]}})
    pts, axes = scan_points(data), scan_axes(data["scan"])
    by = {(p.values["model.sites"], p.values["model.couplings.Delta"]): p.index for p in pts}
    one = warm_sources(pts, axes, workers=1)       # one segment per line of Delta values
    assert one == {by[s, d1]: by[s, d0] for s in (8, 10)
                   for d0, d1 in ((0.0, 0.25), (0.25, 0.5), (0.5, 0.75))}
    four = warm_sources(pts, axes, workers=4)      # two segments per line: 0.5 starts cold
    assert four == {by[s, d1]: by[s, d0] for s in (8, 10) for d0, d1 in ((0.0, 0.25), (0.5, 0.75))}
    for point, source in four.items():             # a source differs from its point only in Delta
        a, b = pts[point].values, pts[source].values
        assert a["model.sites"] == b["model.sites"] and a["model.couplings.Delta"] > b["model.couplings.Delta"]
