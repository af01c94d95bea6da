"""Config boundary: every bad input refused with one line naming the field, defaults resolved,
round trip through YAML, model hash."""

from __future__ import annotations

import copy
import dataclasses
import math
from pathlib import Path

import pytest
import yaml

from mps.pipeline.config import config_hash, load_config, parse_config
from mps.pipeline.errors import ConfigError, InputError
from mps.pipeline.schema import RunConfig, dump_config

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "configs" / "demo-staggered-chain.yaml"

BASE = {
    "name": "t",
    "model": {"family": "xxz", "sites": 32, "couplings": {"Delta": 0.6}, "charge": {"Sz": 0}},
    "solver": {"stages": [{"bond": 16, "sweeps": 2}, {"bond": 48, "sweeps": 4}]},
    "analysis": {"renyi": [1, 2, "inf"]},
    "output": {"dir": "runs/t"},
}


def edit(path: str, value, base=BASE):
    """Copy of ``base`` with the dotted ``path`` set to ``value`` (a ``DELETE`` value removes it)."""
    data = copy.deepcopy(base)
    *parents, last = path.split(".")
    node = data
    for key in parents:
        node = node[int(key)] if isinstance(node, list) else node[key]
    if value is DELETE:
        del node[last]
    elif isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return data


DELETE = object()
FERMIONS = edit("model", {"family": "fermions", "sites": 8, "charge": {"N": 4}})

# name -> (config mapping, field the error must name, text the message must contain)
BAD = {
    "unknown top-level key": (edit("modle", 1), "modle", "allowed: analysis, model, name, output, solver"),
    "unknown model key": (edit("model.size", 4), "model.size", "allowed: charge, couplings, family, sites"),
    "unknown solver key": (edit("solver.sweeps", 4), "solver.sweeps", "allowed:"),
    "unknown stage key": (
        edit("solver.stages.0.bond_dim", 4), "solver.stages[0].bond_dim", "allowed: admix, bond, sweeps"
    ),
    "unknown analysis key": (edit("analysis.entropies", 1), "analysis.entropies", "allowed:"),
    "unknown output key": (edit("output.format", "csv"), "output.format", "allowed: checkpoint_seconds, dir, plots"),
    "negative checkpoint interval": (
        edit("output.checkpoint_seconds", -1), "output.checkpoint_seconds", "must be a number >= 0"
    ),
    "model missing": (edit("model", DELETE), "model", "is required"),
    "model not a mapping": (edit("model", "xxz"), "model", "mapping"),
    "family missing": (edit("model.family", DELETE), "model.family", "required"),
    "sites missing": (edit("model.sites", DELETE), "model.sites", "required"),
    "unknown family": (edit("model.family", "xyz"), "model.family", "valid: bosons, complex-scalar, fermions, hubbard, spin1, written, xxz"),
    "sites string": (edit("model.sites", "ten"), "model.sites", "integer >= 2"),
    "sites float": (edit("model.sites", 12.0), "model.sites", "integer >= 2"),
    "sites one": (edit("model.sites", 1), "model.sites", "integer >= 2, got 1"),
    "sites bool": (edit("model.sites", True), "model.sites", "got true"),
    "couplings list": (edit("model.couplings", [1, 2]), "model.couplings", "mapping"),
    "coupling string": (
        edit("model.couplings.Delta", "abc"), "model.couplings.Delta", "finite number, got 'abc'"
    ),
    "coupling bool": (edit("model.couplings.J", False), "model.couplings.J", "finite number"),
    "coupling nan": (edit("model.couplings.Delta", math.nan), "model.couplings.Delta", "finite number"),
    "coupling inf": (edit("model.couplings.h", -math.inf), "model.couplings.h", "finite number"),
    "unknown coupling": (
        edit("model.couplings.t", 1.0), "model.couplings.t", "allowed: Delta, J, dimer, h, h_stag"
    ),
    "unknown charge name": (edit("model.charge", {"N": 3}), "model.charge.N", "allowed: Sz"),
    "odd sites with Sz 0": (edit("model.sites", 33), "model.charge.Sz", "-16.5, -15.5, ..., 16.5 for 33 sites"),
    "Sz beyond the chain": (edit("model.charge.Sz", 17), "model.charge.Sz", "-16, -15, ..., 16 for 32 sites"),
    "Sz not a multiple": (edit("model.charge.Sz", 0.25), "model.charge.Sz", "multiple of 0.5"),
    "charge bool": (edit("model.charge.Sz", True), "model.charge.Sz", "finite number"),
    "unreachable N": (edit("model.charge.N", 9, FERMIONS), "model.charge.N", "0, 1, ..., 8 for 8 sites"),
    "negative N": (edit("model.charge.N", -1, FERMIONS), "model.charge.N", "0, 1, ..., 8"),
    "N not whole": (edit("model.charge.N", 2.5, FERMIONS), "model.charge.N", "whole number"),
    "empty stages": (edit("solver.stages", []), "solver.stages", "non-empty list"),
    "stages mapping": (edit("solver.stages", {"bond": 4}), "solver.stages", "non-empty list"),
    "stage not a mapping": (edit("solver.stages.1", 64), "solver.stages[1]", "mapping"),
    "stage bond zero": (edit("solver.stages.1.bond", 0), "solver.stages[1].bond", "integer >= 1, got 0"),
    "stage bond bool": (edit("solver.stages.0.bond", True), "solver.stages[0].bond", "integer >= 1"),
    "stage bond missing": (edit("solver.stages.0.bond", DELETE), "solver.stages[0].bond", "required"),
    "stage sweeps float": (edit("solver.stages.0.sweeps", 2.5), "solver.stages[0].sweeps", "integer >= 1"),
    "stage admix negative": (edit("solver.stages.0.admix", -1e-5), "solver.stages[0].admix", ">= 0"),
    "discard negative": (edit("solver.discard", -1.0), "solver.discard", ">= 0"),
    "energy_tol zero": (edit("solver.energy_tol", 0), "solver.energy_tol", "> 0"),
    "seed negative": (edit("solver.seed", -3), "solver.seed", "integer >= 0"),
    "seed bool": (edit("solver.seed", False), "solver.seed", "got false"),
    "lanczos_vectors one": (edit("solver.lanczos_vectors", 1), "solver.lanczos_vectors", "integer >= 2"),
    "init unknown": (edit("solver.init", "zeros"), "solver.init", "random, product"),
    "update unknown": (edit("solver.update", "three-site"), "solver.update", "two-site, single-site"),
    "renyi zero": (edit("analysis.renyi", [1, 0]), "analysis.renyi[1]", "> 0 or \"inf\", got 0"),
    "renyi negative": (edit("analysis.renyi", [-2]), "analysis.renyi[0]", "> 0"),
    "renyi word": (edit("analysis.renyi", ["two"]), "analysis.renyi[0]", "got 'two'"),
    "renyi nan": (edit("analysis.renyi", [math.nan]), "analysis.renyi[0]", "> 0"),
    "renyi empty": (edit("analysis.renyi", []), "analysis.renyi", "non-empty list"),
    "renyi scalar": (edit("analysis.renyi", 2), "analysis.renyi", "non-empty list"),
    "renyi repeated": (edit("analysis.renyi", [2, 2.0]), "analysis.renyi[1]", "repeats"),
    "cut zero": (edit("analysis.cuts", [0, 5]), "analysis.cuts[0]", "integer in 1..31"),
    "cut equal to sites": (edit("analysis.cuts", [5, 32]), "analysis.cuts[1]", "integer in 1..31, got 32"),
    "cut bool": (edit("analysis.cuts", [True]), "analysis.cuts[0]", "integer in 1..31"),
    "cuts word": (edit("analysis.cuts", "some"), "analysis.cuts", "\"all\""),
    "cuts empty": (edit("analysis.cuts", []), "analysis.cuts", "non-empty"),
    "cuts repeated": (edit("analysis.cuts", [3, 3]), "analysis.cuts[1]", "repeats"),
    "flux_points two": (edit("analysis.flux_points", 2), "analysis.flux_points", "integer >= 3"),
    "spectrum_levels zero": (edit("analysis.spectrum_levels", 0), "analysis.spectrum_levels", "integer >= 1"),
    "weight_floor one": (edit("analysis.weight_floor", 1.0), "analysis.weight_floor", "[0, 1)"),
    "resolve unknown": (edit("analysis.resolve", "N"), "analysis.resolve", "Sz, joint"),
    "output dir number": (edit("output.dir", 3), "output.dir", "string"),
    "plots string": (edit("output.plots", "yes"), "output.plots", "true or false"),
    "name number": (edit("name", 2024), "name", "string"),
    "name with slash": (edit("name", "a/b"), "name", "path separators"),
}


def write(tmp_path: Path, data, name: str = "case.yaml") -> Path:
    path = tmp_path / name
    path.write_text(data if isinstance(data, str) else yaml.safe_dump(data), encoding="utf-8")
    return path


def assert_refused(exc: ConfigError, field: str, text: str) -> None:
    line = str(exc)
    assert exc.field == field, line
    assert line.startswith(f"{field}: "), line
    assert "\n" not in line
    assert text in line, line


def test_base_config_is_valid():
    assert isinstance(parse_config(BASE), RunConfig)
    assert isinstance(parse_config(FERMIONS), RunConfig)


@pytest.mark.parametrize("case", list(BAD))
def test_bad_config_is_refused_naming_the_field(tmp_path, case):
    data, field, text = BAD[case]
    with pytest.raises(ConfigError) as info:
        parse_config(data)
    assert_refused(info.value, field, text)
    if not any(isinstance(v, float) and math.isnan(v) for v in _leaves(data)):
        with pytest.raises(ConfigError) as info:  # the same through a YAML file
            load_config(write(tmp_path, data))
        assert_refused(info.value, field, text)


def _leaves(node):
    if isinstance(node, dict):
        for v in node.values():
            yield from _leaves(v)
    elif isinstance(node, list):
        for v in node:
            yield from _leaves(v)
    else:
        yield node


YAML_TEXT_CASES = {
    "nan written in YAML": (
        "model: {family: xxz, sites: 8, couplings: {Delta: .nan}}\n", "model.couplings.Delta"
    ),
    "inf written in YAML": ("model: {family: xxz, sites: 8, couplings: {J: .inf}}\n", "model.couplings.J"),
    "plots neither true nor false": (
        "model: {family: xxz, sites: 8}\noutput: {plots: maybe}\n", "output.plots"
    ),
}


@pytest.mark.parametrize("case", list(YAML_TEXT_CASES))
def test_bad_yaml_values(tmp_path, case):
    text, field = YAML_TEXT_CASES[case]
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, text))
    assert info.value.field == field and "\n" not in str(info.value)


FILE_CASES = {
    "invalid YAML": ("model: [xxz\n", "not valid YAML"),
    "tab indentation": ("model:\n\tfamily: xxz\n", "not valid YAML"),
    "not a mapping": ("- model\n- solver\n", "mapping"),
    "scalar document": ("just text\n", "mapping"),
    "empty file": ("", "empty"),
    "not UTF-8": (b"model: \xff\xfe\n", "UTF-8"),
}


@pytest.mark.parametrize("case", list(FILE_CASES))
def test_bad_file_is_refused_naming_the_file(tmp_path, case):
    content, text = FILE_CASES[case]
    path = tmp_path / "broken.yaml"
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert_refused(info.value, str(path), text)


def test_missing_file_and_directory(tmp_path):
    missing = tmp_path / "nope.yaml"
    with pytest.raises(ConfigError) as info:
        load_config(missing)
    assert_refused(info.value, str(missing), "no such config file")
    with pytest.raises(ConfigError) as info:
        load_config(tmp_path)
    assert_refused(info.value, str(tmp_path), "directory")
    assert issubclass(ConfigError, InputError)


def test_python_tag_is_refused_and_not_executed(tmp_path):
    marker = tmp_path / "executed"
    text = f"name: !!python/object/apply:os.system ['touch {marker}']\nmodel: {{family: xxz, sites: 4}}\n"
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, text))
    assert_refused(info.value, str(tmp_path / "case.yaml"), "tag that safe loading refuses")
    assert "python/object/apply" in str(info.value) and "line 1" in str(info.value)
    assert not marker.exists()


def test_error_text_is_one_line_even_for_multiline_values():
    err = ConfigError("model.family", "unknown\nfamily\n 'x'")
    assert str(err) == "model.family: unknown family 'x'"
    with pytest.raises(ConfigError) as info:
        parse_config(edit("model.family", "two\nlines"))
    assert "\n" not in str(info.value)


# ----------------------------------------------------------------------------- defaults


def test_defaults_are_resolved(tmp_path):
    cfg = load_config(write(tmp_path, {"model": {"family": "xxz", "sites": 9}}, "my-chain.yaml"))
    assert cfg.name == "my-chain"
    assert cfg.model.couplings == {"J": 1.0, "Delta": 1.0, "h": 0.0, "h_stag": 0.0, "dimer": 0.0}
    assert cfg.model.charge == {"Sz": 0.5}  # odd chain: the default sector is S^z = 1/2
    assert cfg.model.integer_charge() == (1,)
    assert [(s.bond, s.sweeps, s.admix) for s in cfg.solver.stages] == [(32, 2, 1e-5), (128, 6, 0.0)]
    s = cfg.solver
    assert (s.discard, s.energy_tol, s.seed, s.lanczos_vectors, s.init) == (1e-10, 1e-9, 1, 24, "random")
    a = cfg.analysis
    assert a.renyi == (1.0, 2.0, 3.0, math.inf) and all(isinstance(n, float) for n in a.renyi)
    assert (a.cuts, a.flux_points, a.spectrum_levels, a.weight_floor, a.resolve) == ("all", 65, 20, 1e-12, "Sz")
    assert a.cut_list(9) == list(range(1, 9))
    assert (cfg.output.dir, cfg.output.plots) == ("runs/my-chain", True)
    fermi = parse_config({"model": {"family": "fermions", "sites": 9}})
    assert fermi.model.charge == {"N": 4.0} and fermi.analysis.resolve == "N"


def test_noise_default_on_all_but_the_last_stage():
    stages = [
        {"bond": 8, "sweeps": 1},
        {"bond": 16, "sweeps": 1, "admix": 1e-3},
        {"bond": 32, "sweeps": 1},
        {"bond": 64, "sweeps": 2},
    ]
    cfg = parse_config(edit("solver.stages", stages))
    assert [s.admix for s in cfg.solver.stages] == [1e-5, 1e-3, 1e-5, 0.0]


def test_empty_sections_and_numeric_strings():
    cfg = parse_config({"model": {"family": "xxz", "sites": 4, "couplings": None}, "solver": None,
                        "analysis": {"cuts": [3, 1], "renyi": [0.5, math.inf]}})
    assert cfg.analysis.cuts == (1, 3)
    assert cfg.analysis.renyi == (0.5, math.inf)
    # YAML 1.1 reads 1e-8 (no decimal point) as a string; it is accepted as the number it means.
    text = "model: {family: fermions, sites: 6, couplings: {mu: -1e-2}}\nsolver: {discard: 1e-8}\n"
    cfg = parse_config(yaml.safe_load(text))
    assert cfg.solver.discard == 1e-8 and cfg.model.couplings["mu"] == -0.01


def test_records_are_frozen():
    cfg = parse_config(BASE)
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.model.sites = 4


def test_round_trip_through_yaml():
    cfg = parse_config(BASE)
    text = dump_config(cfg)
    again = parse_config(yaml.safe_load(text))
    assert again == cfg
    assert again.to_dict() == cfg.to_dict()
    assert yaml.safe_load(text)["analysis"]["renyi"] == [1.0, 2.0, "inf"]


def test_demo_config():
    cfg = load_config(DEMO)
    assert cfg.model.family == "xxz" and cfg.model.sites == 32
    assert cfg.model.couplings["Delta"] == 0.6 and cfg.model.couplings["h_stag"] == 0.1
    assert cfg.model.charge == {"Sz": 0.0}
    assert [(s.bond, s.sweeps) for s in cfg.solver.stages] == [(16, 2), (48, 4)]


# ----------------------------------------------------------------------------- hash and charges


def test_config_hash():
    cfg = parse_config(BASE)
    h = config_hash(cfg.model)
    assert len(h) == 64 and int(h, 16) >= 0
    same = {"family": "xxz", "sites": 32, "couplings": {"Delta": 0.6, "J": 1}}  # defaults, int J
    assert config_hash(same) == h
    assert config_hash(cfg.to_dict()["model"]) == h
    assert config_hash({**same, "couplings": {"Delta": 0.61}}) != h
    assert config_hash({**same, "sites": 30}) != h
    assert config_hash({**same, "charge": {"Sz": 1}}) != h
    with pytest.raises(ConfigError):
        config_hash({**same, "sites": 0})


@pytest.mark.parametrize("raw, ok", [
    ("auto", True), ([4, 28], True), ([0, 10], False), ([10, 12], False), ([4, 40], False),
    ("wide", False), ([4.5, 20], False),
])
def test_fit_window_is_checked(raw, ok):
    data = {"model": {"family": "xxz", "sites": 32}, "analysis": {"fit_window": raw}}
    if ok:
        assert parse_config(data).analysis.to_dict()["fit_window"] == raw
    else:
        with pytest.raises(ConfigError, match="analysis.fit_window"):
            parse_config(data)


def test_correlations_switch_must_be_boolean():
    with pytest.raises(ConfigError, match="analysis.correlations"):
        parse_config({"model": {"family": "xxz", "sites": 8}, "analysis": {"correlations": "yes"}})
    assert parse_config({"model": {"family": "xxz", "sites": 8},
                         "analysis": {"correlations": False}}).analysis.correlations is False
