"""Fuzzing the config boundary: whatever file ``chargewise check`` is given (random text or bytes,
YAML-like token soup, configs with random values in known fields, scans, alias bombs, deep
nesting), it ends with exit code 0, or exit code 2 and exactly one line ``chargewise: ...`` on
stderr: never a traceback, an internal error (exit 1), a hang or a memory blow-up.

``chargewise check`` runs in this process (``cli.main``) so that hypothesis can shrink failures.
The default run is 60 to 300 examples per strategy (about 16 s on two cores); the ``slow`` test
repeats the structured fuzzing with many more.
"""

from __future__ import annotations

import io
import math
import resource
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mps.pipeline import cli
from mps.pipeline.config import load_config
from mps.pipeline.errors import ConfigError
from mps.pipeline.scan_run import plan_scan
from mps.pipeline.yaml_input import parse_yaml

REPO = Path(__file__).resolve().parents[2]
# A settings object, not a loaded profile: other test files keep hypothesis's defaults.
FUZZ = settings(max_examples=150, deadline=2000, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])


@pytest.fixture(scope="module")
def case_file(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz") / "case.yaml"


def check_file(path: Path, content: str | bytes) -> None:
    """Write ``content`` to ``path``, run ``chargewise check`` on it, and assert the contract."""
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = cli.main(["check", str(path)])
    text = err.getvalue()
    assert code in (0, 2), text
    if code == 2:
        assert text.startswith("chargewise: ") and text.endswith("\n") and text.count("\n") == 1, text
        assert "Traceback" not in text
    else:
        assert text == "" and out.getvalue()


# ----------------------------------------------------------------------------- raw input


@FUZZ
@given(st.text(max_size=400))
def test_random_text(case_file, text):
    check_file(case_file, text)


@FUZZ
@given(st.binary(max_size=400))
def test_random_bytes(case_file, data):
    check_file(case_file, data)


TOKENS = ["a", "b", ":", ": ", " ", "  ", "\n", "\n  ", "- ", "[", "]", "{", "}", ", ", "&a ", "*a", "&b ",
          "*b", "<<: ", "? ", "'", '"', "#", "---\n", "...\n", "!!float ", "!!int ", "!!binary ", "!!set ",
          "!!timestamp ", "!!omap ", "!!python/object/apply:os.system ", "!!python/name:os.system ", "!x ",
          "0x1", "1", "1.0", "1e999", "-.inf", ".nan", "~", "null", "yes", "2020-13-45", "\\x00", "\t", "|\n",
          ">\n", "model:", "  family: xxz\n", "  sites: 8\n", "scan:", "  grid:", "=", "\u200f", "\x85"]


@FUZZ
@given(st.lists(st.sampled_from(TOKENS), max_size=60).map("".join))
def test_yaml_token_soup(case_file, text):
    check_file(case_file, text)


# ----------------------------------------------------------------------------- structured configs

FAMILIES = ["xxz", "fermions", "hubbard", "bosons", "spin1", "complex-scalar", "written"]
BASES = ["spin-half", "spin-one", "spinless-fermion", "spinful-fermion", "boson-mode", "boson-ab"]
CHARGES = ["Sz", "N", "Q", "Na", "Nb"]
COUPLINGS = ["J", "Delta", "h", "h_stag", "dimer", "t", "V", "mu", "U", "D", "m", "lam", "J2", "x y"]
PRODUCTS = ["S^+(j) S^-(j+1)", "S^z(j) S^z(j+1)", "S^+(j)", "n(j) n(j+1)", "c^+(j) c(j+1)", "S^z(j+99999)",
            "S^z(j+" + "9" * 5000 + ")", "S^z(j) " * 300, "", "(", "S^z(k)"]
# Integers and floats at the edges: beyond int64 and float, non-finite, signed zero, subnormal.
ODD_INTS = [10**400, -10**400, 2**63, 2**63 - 1, 2**64, 10**12, 10**6, 100_001, 0, -1, 1, 2]
ODD_FLOATS = [math.inf, -math.inf, math.nan, -0.0, 1e308, -1e308, 5e-324, 0.5]
ODD_TEXT = ["", " ", "\x00", "a\x00b", "\u200f", "\u202eabc", "a\nb", "inf", ".inf", "nan", "1e-10", "1e999",
            "-J", "0.5*J", "2*J2", "all", "auto", "joint", "exact", "sweeps", "product", "two-site", "../x", "/",
            "runs/x", "1" * 2000, "9" * 5000, " " * 3000 + "x"]

small_ints = st.integers(-1000, 1000) | st.sampled_from(ODD_INTS)
numbers = small_ints | st.floats() | st.sampled_from(ODD_FLOATS)
texts = st.text(max_size=12) | st.sampled_from(ODD_TEXT)
scalars = st.none() | st.booleans() | numbers | texts
keys = st.none() | st.booleans() | small_ints | st.floats() | texts
junk = st.recursive(scalars,
                    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(keys, inner, max_size=4),
                    max_leaves=12)
sizes = st.integers(-2, 40) | st.sampled_from(ODD_INTS)


def maybe(strategy):
    """Mostly the field's own kind of value, sometimes anything at all."""
    return strategy | junk


amount = maybe(numbers | st.sampled_from(["J", "-J", "0.5*J", "J2", "t", "-2.5*J2"]))
pattern = st.fixed_dictionaries({}, optional={
    "value": amount, "stagger": amount, "dimer": amount, "random": amount, "seed": amount,
    "per_site": maybe(st.lists(amount, max_size=8))})
term = st.fixed_dictionaries({"product": maybe(st.sampled_from(PRODUCTS))},
                             optional={"coef": amount | pattern, "add_conjugate": maybe(st.booleans())})
model = st.fixed_dictionaries(
    {"family": maybe(st.sampled_from(FAMILIES)), "sites": maybe(sizes)},
    optional={"couplings": maybe(st.dictionaries(st.sampled_from(COUPLINGS) | keys, maybe(numbers),
                                                 max_size=4)),
              "charge": maybe(st.dictionaries(st.sampled_from(CHARGES) | keys, maybe(numbers), max_size=2)),
              "nmax": maybe(sizes),
              "basis": maybe(st.sampled_from(BASES)),
              "keep_charges": maybe(st.lists(maybe(st.sampled_from(CHARGES)), max_size=3)),
              "terms": maybe(st.lists(term, max_size=3))})
stage = maybe(st.fixed_dictionaries({"bond": maybe(sizes), "sweeps": maybe(sizes)},
                                    optional={"admix": maybe(numbers), "extra": junk}))
solver = st.fixed_dictionaries({}, optional={
    "method": maybe(st.sampled_from(["sweeps", "exact"])), "stages": maybe(st.lists(stage, max_size=3)),
    "discard": maybe(numbers), "energy_tol": maybe(numbers), "seed": maybe(sizes),
    "lanczos_vectors": maybe(sizes), "lanczos_restarts": maybe(sizes), "lanczos_tol": maybe(numbers),
    "init": maybe(st.sampled_from(["random", "product"])),
    "update": maybe(st.sampled_from(["auto", "two-site"]))})
analysis = st.fixed_dictionaries({}, optional={
    "renyi": maybe(st.lists(maybe(numbers | st.just("inf")), max_size=4)),
    "cuts": maybe(st.just("all") | st.lists(maybe(sizes), max_size=4)),
    "fit_window": maybe(st.just("auto") | st.lists(maybe(sizes), max_size=3)),
    "flux_points": maybe(sizes), "spectrum_levels": maybe(sizes), "weight_floor": maybe(numbers),
    "resolve": maybe(st.sampled_from(CHARGES + ["joint"])), "correlations": maybe(st.booleans())})
output = st.fixed_dictionaries({}, optional={"dir": maybe(texts), "plots": maybe(st.booleans())})
SCAN_KEYS = ["model.sites", "model.couplings.Delta", "model.couplings.J", "model.charge.Sz", "solver.seed",
             "solver.stages", "model.family", "analysis.renyi", "name", "output.dir", "scan.grid", "model",
             "model.sites.x", "model.terms"]
axis_block = maybe(st.dictionaries(st.sampled_from(SCAN_KEYS) | keys, maybe(st.lists(junk, max_size=3)),
                                   max_size=3))
scan = st.fixed_dictionaries({}, optional={"grid": axis_block, "paired": axis_block,
                                           "warm_start": maybe(st.booleans())})
config = st.fixed_dictionaries({"model": maybe(model)}, optional={
    "name": maybe(texts), "solver": maybe(solver), "analysis": maybe(analysis), "output": maybe(output),
    "scan": scan, "extra": junk})


def as_yaml(data, unicode: bool) -> str:
    return yaml.safe_dump(data, sort_keys=False, allow_unicode=unicode)


@settings(FUZZ, max_examples=300)
@given(config, st.booleans())
def test_random_configs(case_file, data, unicode):
    check_file(case_file, as_yaml(data, unicode))


def _leaves(node, path=()):
    """Every (path) inside a loaded config, for the field mutations below."""
    yield path
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _leaves(v, (*path, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _leaves(v, (*path, i))


SHIPPED = [parse_yaml(p.read_text(encoding="utf-8"), p.name)
           for p in sorted((REPO / "configs").glob("*.yaml"))]


@settings(FUZZ, max_examples=300)
@given(st.data())
def test_shipped_configs_with_one_field_replaced(case_file, data):
    """A working config with one value (at any depth) replaced by junk, deleted, or given a junk
    sibling key: every field's validation meets every kind of value."""
    base = data.draw(st.sampled_from(SHIPPED))
    cfg = yaml.safe_load(yaml.safe_dump(base))   # a private copy
    path = data.draw(st.sampled_from([p for p in _leaves(cfg) if p]))
    parent = cfg
    for step in path[:-1]:
        parent = parent[step]
    action = data.draw(st.sampled_from(["replace", "delete", "sibling"]))
    if action == "replace":
        parent[path[-1]] = data.draw(junk | sizes | numbers)
    elif action == "delete":
        del parent[path[-1]]
    elif isinstance(parent, dict):
        parent[data.draw(keys)] = data.draw(junk)
    check_file(case_file, as_yaml(cfg, data.draw(st.booleans())))


@pytest.mark.slow
@settings(FUZZ, max_examples=4000)
@given(config, st.booleans())
def test_random_configs_long_run(case_file, data, unicode):
    check_file(case_file, as_yaml(data, unicode))


# ----------------------------------------------------------------------------- hostile structure


def alias_bomb(levels: int, width: int, merge: bool, in_field: bool) -> str:
    """Anchors that each repeat the previous one ``width`` times (``width ** levels`` values once
    expanded), as top-level keys or as the items of a list in ``model.sites``, a field whose refusal
    quotes the value."""
    if merge:
        items = ["&m0 {" + ", ".join(f"k{j}: v" for j in range(width)) + "}"]
        items += [f"&m{i} {{<<: [" + ", ".join([f"*m{i - 1}"] * width) + "], n: [" +
                  ", ".join([f"*m{i - 1}"] * width) + "]}" for i in range(1, levels)]
    else:
        items = ["&l0 [" + ", ".join(["lol"] * width) + "]"]
        items += [f"&l{i} [" + ", ".join([f"*l{i - 1}"] * width) + "]" for i in range(1, levels)]
    if in_field:
        return "model:\n  family: xxz\n  sites:\n" + "".join(f"    - {item}\n" for item in items)
    return "model: {family: xxz, sites: 8}\n" + "".join(f"k{i}: {item}\n" for i, item in enumerate(items))


def test_alias_bombs_stay_small(case_file):
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss   # kilobytes on Linux

    @settings(FUZZ, max_examples=60)
    @given(st.integers(1, 40), st.integers(1, 30), st.booleans(), st.booleans())
    def bombs(levels, width, merge, in_field):
        check_file(case_file, alias_bomb(levels, width, merge, in_field))

    bombs()
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before < 200 * 1024


NESTS = {
    "flow lists": lambda n: "model: " + "[" * n + "]" * n,
    "flow maps": lambda n: "model: " + "{a: " * n + "1" + "}" * n,
    "block maps": lambda n: "".join("  " * i + f"k{i}:\n" for i in range(n)),
    "block lists": lambda n: "model:\n" + "".join("  " * i + "-\n" for i in range(1, n)),
    "unclosed": lambda n: "[" * n,
}


@settings(FUZZ, max_examples=60)
@given(st.sampled_from(list(NESTS)), st.integers(1, 3000))
def test_deep_nesting(case_file, kind, depth):
    check_file(case_file, NESTS[kind](depth) + "\n")


# ----------------------------------------------------------------------------- bugs the fuzzing found

FOUND = {   # each made `chargewise check` exit 1 (a traceback's last line), hang, or eat gigabytes before
    "date with month 13": "model: {family: xxz, sites: 8}\nname: 2020-13-45\n",
    "deep flow nesting": "model: " + "[" * 3000 + "]" * 3000 + "\n",
    "merge-key bomb": alias_bomb(9, 10, merge=True, in_field=False),
    "alias bomb quoted in a message": alias_bomb(9, 10, merge=False, in_field=True),
    "hex integer of 5000 digits in sites": "model: {family: xxz, sites: 0x" + "f" * 5000 + "}\n",
    "huge int coupling": "model: {family: xxz, sites: 8, couplings: {J: " + "9" * 400 + "}}\n",
    "huge int Renyi index": "model: {family: xxz, sites: 8}\nanalysis: {renyi: [" + "1" + "0" * 400 + "]}\n",
    "charge beyond float in half units": "model: {family: xxz, sites: 8, charge: {Sz: 1.7e308}}\n",
    "seed with 5000 hex digits": "model: {family: xxz, sites: 8}\nsolver: {seed: 0x" + "f" * 5000 + "}\n",
    "sites 10**12": "model: {family: hubbard, sites: 1000000000000}\n",
    "long hubbard chain": "model: {family: hubbard, sites: 50000}\n",
    "exact method on a long chain": "model: {family: xxz, sites: 90000, couplings: {Delta: 0}}\n"
                                    "solver: {method: exact}\n",
    "list as a basis": "model: {family: written, basis: [spin-half], sites: 8, terms: []}\n",
    "number and word as scan keys": "model: {family: xxz, sites: 8}\nscan: {1: a, x: b, grid: {model.sites: [8]}}\n",
    "output a list in a scan": "model: {family: xxz, sites: 8}\noutput: [1]\nscan: {grid: {model.sites: [8]}}\n",
    "seed a word in a scan": "model: {family: xxz, sites: 8}\nsolver: {seed: abc}\n"
                             "scan: {grid: {model.sites: [8]}}\n",
    "scan of 10**8 points": "model: {family: xxz, sites: 8}\nscan: {grid: {" + ", ".join(
        f"model.couplings.{c}: [0, 1, 2, 3, 4, 5, 6, 7, 8, 9]" for c in ("J", "Delta", "h", "h_stag")) +
        ", solver.seed: [" + ", ".join(map(str, range(10_000))) + "]}}\n",
    "long digit string as a number": "model: {family: xxz, sites: 8, couplings: {J: '" + "1" * 300_000 + "x'}}\n",
    "long coefficient text": "model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, terms: "
                             "[{product: 'S^z(j) S^z(j+1)', coef: '" + "1" * 300_000 + "!'}]}\n",
    "site offset of 5000 digits": "model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, terms: "
                                  "[{product: 'S^z(j+" + "9" * 5000 + ")', coef: 1}]}\n",
    "keep_charges holding a huge int": "model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, "
                                       "keep_charges: [0x" + "f" * 5000 + "], terms: []}\n",
}
ACCEPTED = {   # passed `chargewise check` before, to fail only once a run started
    "overflowing written coefficient": "model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, "
                                       "couplings: {J: 1.0e+300}, terms: [{product: 'S^z(j) S^z(j+1)', "
                                       "coef: 1.0e+300*J}]}\n",
    "NUL in output.dir": "model: {family: xxz, sites: 8}\noutput: {dir: \"runs/a\\0b\"}\n",
    "lone surrogate in name": "name: \"\\ud800\"\nmodel: {family: xxz, sites: 8}\n",
    "list as output.dir of a scan": "model: {family: xxz, sites: 8}\noutput: {dir: [1]}\n"
                                    "scan: {grid: {model.sites: [8]}}\n",
}


@pytest.mark.parametrize("case", list(FOUND) + list(ACCEPTED))
def test_found_cases_are_refused_in_one_line(case_file, case):
    text = FOUND.get(case) or ACCEPTED[case]
    check_file(case_file, text)
    with pytest.raises(ConfigError):
        (plan_scan if "scan:" in text else load_config)(case_file)


LIMITS = {   # text, field, words of the refusal
    "sites beyond the sane bound": ("model: {family: xxz, sites: 1000000000000}\n", "model.sites",
                                    "must be an integer in 2..100000, got 1000000000000"),
    "charge check too long": ("model: {family: hubbard, sites: 50000}\n", "model.sites", "must be at most"),
    "exact engines": ("model: {family: fermions, sites: 20000, couplings: {V: 0}}\nsolver: {method: exact}\n",
                      "model.sites", "at most 5000 with solver.method exact"),
    "seed beyond 64 bits": ("model: {family: xxz, sites: 8}\nsolver: {seed: 0x" + "f" * 5000 + "}\n",
                            "solver.seed", "in 0..9223372036854775807, got an integer of about 6021 digits"),
    "renyi index beyond float": ("model: {family: xxz, sites: 8}\nanalysis: {renyi: [1" + "0" * 400 + "]}\n",
                                 "analysis.renyi[0]", "got an integer of about 401 digits"),
    "points": ("model: {family: xxz, sites: 8}\nscan: {grid: {solver.seed: [" + ", ".join(map(str, range(10_001)))
               + "]}}\n", "scan", "has 10001 points, more than 10000"),
    "values to copy": ("model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, terms: [" +
                       ", ".join(["{product: 'S^z(j)', coef: 1}"] * 400) + "]}\nscan: {grid: {solver.seed: [" +
                       ", ".join(map(str, range(2000))) + "]}}\n", "scan", "make more than 2000000 values"),
    "written placements": ("model: {family: written, basis: spin-half, sites: 60000, charge: {Sz: 0}, terms: [" +
                           ", ".join(["{product: 'S^z(j)', coef: 1}"] * 6) + "]}\n", "model.terms",
                           "place 360000 terms on 60000 sites; at most 300000"),
    "long product text": ("model: {family: written, basis: spin-half, sites: 8, charge: {Sz: 0}, terms: "
                          "[{product: '" + "S^z(j) " * 200 + "', coef: 1}]}\n", "model.terms[0].product",
                          "at most 1000 characters"),
}


@pytest.mark.parametrize("case", list(LIMITS))
def test_size_limits_name_the_field(case_file, case):
    text, field, words = LIMITS[case]
    case_file.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        (plan_scan if "scan:" in text else load_config)(case_file)
    assert info.value.field == field and words in str(info.value), str(info.value)
