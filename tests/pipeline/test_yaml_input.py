"""The YAML reader of the pipeline: duplicate keys, merge keys, size/depth/alias limits, one
document per file, no code executed from data, and a static look over the source for unsafe loads."""

from __future__ import annotations

import re
import resource
import time
from pathlib import Path

import pytest

from mps.pipeline import cli
from mps.pipeline.config import load_mapping
from mps.pipeline.errors import ConfigError
from mps.pipeline.yaml_input import MAX_BYTES, MAX_DEPTH, MAX_NODES, parse_yaml, read_yaml_file

REPO = Path(__file__).resolve().parents[2]
CONFIGS = sorted((REPO / "configs").glob("*.yaml"))
WHERE = "case.yaml"


def refused(text: str) -> ConfigError:
    with pytest.raises(ConfigError) as info:
        parse_yaml(text, WHERE)
    assert "\n" not in str(info.value)
    return info.value


def check(tmp_path: Path, text: str, capsys) -> tuple[int, str]:
    """``chargewise check`` on ``text`` in this process: exit code and stderr."""
    path = tmp_path / "case.yaml"
    path.write_text(text, encoding="utf-8")
    code = cli.main(["check", str(path)])
    return code, capsys.readouterr().err


# ----------------------------------------------------------------------------- duplicate keys


def test_duplicate_key_names_the_field_and_both_lines():
    text = "name: x\nmodel:\n  family: xxz\n  couplings:\n    J: 1.0\n    Delta: 0.5\n    J: 2.0\n"
    err = refused(text)
    assert err.field == "model.couplings"
    assert str(err) == "model.couplings: key 'J' appears twice (lines 5 and 7)"


def test_duplicate_key_at_top_level_names_the_file():
    err = refused("name: a\nmodel: {family: xxz, sites: 8}\nname: b\n")
    assert str(err) == f"{WHERE}: key 'name' appears twice (lines 1 and 3)"


def test_duplicate_key_inside_a_list_item():
    err = refused("solver:\n  stages:\n    - {bond: 8, sweeps: 1}\n    - bond: 8\n      bond: 16\n")
    assert err.field == "solver.stages[1]"
    assert "key 'bond' appears twice (lines 4 and 5)" in str(err)


@pytest.mark.parametrize("first, second", [("1", "0x1"), ("1", "1.0"), ("8", "010"), ("yes", "true"),
                                           ("J", "'J'"), ("~", "null")])
def test_keys_equal_once_read_are_duplicates(first, second):
    err = refused(f"grid:\n  {first}: a\n  {second}: b\n")
    assert err.field == "grid" and "appears twice (lines 2 and 3" in str(err)


def test_keys_that_differ_are_kept():
    assert parse_yaml("a: {1: x, '1': y, 1.5: z}\n", WHERE) == {"a": {1: "x", "1": "y", 1.5: "z"}}


def test_merge_keys_may_be_overridden_by_written_keys():
    text = ("base: &base {J: 1.0, Delta: 0.5}\n"
            "other: &other {J: 3.0, h: 0.1}\n"
            "one: {<<: *base, J: 2.0}\n"
            "two: {<<: [*base, *other], Delta: 0.0}\n")
    data = parse_yaml(text, WHERE)
    assert data["one"] == {"J": 2.0, "Delta": 0.5}
    # YAML's merge: the first mapping of the list wins over later ones, written keys over all.
    assert data["two"] == {"J": 1.0, "h": 0.1, "Delta": 0.0}
    assert data["base"] == {"J": 1.0, "Delta": 0.5}


def test_merge_of_a_merge_keeps_override_semantics():
    text = ("a: &a {x: 1, y: 1}\n"
            "b: &b {<<: *a, y: 2}\n"
            "c: {<<: *b, x: 3}\n")
    assert parse_yaml(text, WHERE) == {"a": {"x": 1, "y": 1}, "b": {"x": 1, "y": 2}, "c": {"x": 3, "y": 2}}


def test_two_written_keys_beside_a_merge_are_refused():
    err = refused("base: &b {J: 1}\nm:\n  <<: *b\n  J: 2\n  J: 3\n")
    assert str(err) == "m: key 'J' appears twice (lines 4 and 5)"


@pytest.mark.parametrize("text, what", [("? [1, 2]\n: x\n", "a list"), ("? {a: 1}\n: x\n", "a mapping"),
                                        ("? !!set {x}\n: 1\n", "a mapping")])
def test_unhashable_key_is_refused_in_one_line(text, what):
    err = refused(text)
    assert f"uses {what} as a key (line 1)" in str(err)


# ----------------------------------------------------------------------------- bounds


def test_file_larger_than_the_limit(tmp_path):
    path = tmp_path / "big.yaml"
    path.write_text("# padding\n" * (MAX_BYTES // 10 + 1), encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        read_yaml_file(path)
    assert info.value.field == str(path) and "larger than 1024 KiB" in str(info.value)


def test_nesting_deeper_than_the_limit():
    fine = "a: " + "[" * (MAX_DEPTH - 1) + "]" * (MAX_DEPTH - 1) + "\n"   # the mapping is level 1
    assert parse_yaml(fine, WHERE) is not None
    flow = "[" * (MAX_DEPTH + 1) + "]" * (MAX_DEPTH + 1)
    assert f"more than {MAX_DEPTH} deep (line 1)" in str(refused(flow))
    block = "".join("  " * i + f"k{i}:\n" for i in range(MAX_DEPTH + 2))
    assert f"more than {MAX_DEPTH} deep" in str(refused(block))
    assert "deep" in str(refused("[" * 100_000))   # never a RecursionError


def test_nesting_through_aliases_counts_the_expanded_depth():
    half = MAX_DEPTH // 2 + 2
    text = f"a: &a {'[' * half}{']' * half}\nb: {'[' * half}*a{']' * half}\n"
    assert "once its aliases are resolved (line 2)" in str(refused(text))


def bomb(levels: int, width: int = 10) -> str:
    lines = ["l0: &l0 [" + ", ".join(["lol"] * width) + "]"]
    lines += [f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * width) + "]" for i in range(1, levels)]
    return "\n".join(lines) + "\n"


def test_alias_bomb_is_refused_quickly_and_without_memory():
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    start = time.perf_counter()
    err = refused(bomb(levels=12))   # 10**12 values once expanded
    assert f"expands to more than {MAX_NODES} values" in str(err)
    assert time.perf_counter() - start < 2.0
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before < 200 * 1024   # kB on Linux


def test_aliases_within_the_limit_are_read():
    data = parse_yaml(bomb(levels=4), WHERE)   # 10**3 leaves, about 1100 values
    assert len(data["l3"]) == 10 and data["l3"][0][0][0][0] == "lol"


def test_merge_bomb_is_refused():
    lines = ["m0: &m0 {" + ", ".join(f"k{j}: v" for j in range(10)) + "}"]
    lines += [f"m{i}: &m{i} {{<<: [" + ", ".join([f"*m{i - 1}"] * 10) + f"], n{i}: [" +
              ", ".join([f"*m{i - 1}"] * 10) + "]}" for i in range(1, 8)]
    assert "expands to more than" in str(refused("\n".join(lines) + "\n"))


@pytest.mark.parametrize("text", ["a: &a [1, *a]\n", "a: &a {<<: *a}\n", "a: &a {b: {c: *a}}\n"])
def test_alias_inside_its_own_anchor_is_refused(text):
    assert "refers to itself through an alias (line 1)" in str(refused(text))


def test_more_than_one_document():
    err = refused("model: {family: xxz}\n---\nmodel: {family: hubbard}\n")
    assert str(err) == (f"{WHERE}: holds more than one YAML document (another starts at line 2); "
                        "a config is a single document")
    assert "more than one YAML document" in str(refused("a: 1\n--- \n"))


@pytest.mark.parametrize("text, words", [
    ("a: 2020-13-45\n", "cannot be read as !!timestamp (line 1): month must be in 1..12"),
    ("a: !!timestamp never\n", "cannot be read as !!timestamp (line 1)"),
    ("a:\n  b: !!float lots\n", "cannot be read as !!float (line 2)"),
    ("a: !!int ten\n", "cannot be read as !!int (line 1)"),
    ("a: " + "9" * 5000 + "\n", "cannot be read as !!int (line 1)"),
    ("a: {<<: 1}\n", "is not valid YAML: expected a mapping or list of mappings for merging"),
    ("a: *nowhere\n", "is not valid YAML: found undefined alias"),
    ("a: \x00\n", "is not valid YAML: unacceptable character #x0000"),
])
def test_odd_scalars_become_one_line(text, words):
    assert words in str(refused(text))


def test_refusals_of_the_cli_are_one_line_exit_2(tmp_path, capsys):
    for text in ("a: 1\na: 2\n", bomb(9), "[" * 5000, "a: 1\n---\nb: 2\n"):
        code, err = check(tmp_path, text, capsys)
        assert code == 2
        assert err.startswith(f"chargewise: {tmp_path / 'case.yaml'}: ") and err.count("\n") == 1


# ----------------------------------------------------------------------------- no code from data

MODEL = "model: {{family: xxz, sites: 4}}\n"
UNSAFE = {
    "apply": "name: !!python/object/apply:os.system ['touch {marker}']\n" + MODEL,
    "new": "name: !!python/object/new:os.system ['touch {marker}']\n" + MODEL,
    "object": "name: !!python/object:subprocess.Popen {{args: ['touch', '{marker}']}}\n" + MODEL,
    "name": "name: !!python/name:os.system\n" + MODEL,
    "module": "name: !!python/module:os\n" + MODEL,
    "nested": "model:\n  family: xxz\n  couplings:\n    J: !!python/object/apply:os.system ['touch {marker}']\n",
    "as a key": "? !!python/object/apply:os.system ['touch {marker}']\n: 1\n" + MODEL,
    "local tag": "name: !pwn 'touch {marker}'\n" + MODEL,
}


@pytest.mark.parametrize("case", list(UNSAFE))
def test_python_tags_never_run(tmp_path, capsys, case):
    marker = tmp_path / "pwned"
    code, err = check(tmp_path, UNSAFE[case].format(marker=marker), capsys)
    assert code == 2
    assert "uses a YAML tag that safe loading refuses" in err and err.count("\n") == 1
    assert not marker.exists()


# The rules below are common practice for programs that load files they did not write: no pickle
# or marshal (unpickling runs code), YAML through a safe loader only, no eval/exec on text, and
# numpy archives only with allow_pickle=False.
FORBIDDEN = {
    "import of pickle": re.compile(r"^\s*(import|from)\s+(_?pickle|cloudpickle|dill|shelve)\b", re.M),
    "pickle call": re.compile(r"\b(_?pickle|cloudpickle|dill)\.\w+\("),
    "marshal.loads": re.compile(r"\bmarshal\.loads?\("),
    "a YAML load outside yaml_input": re.compile(r"\byaml\.(safe_load|load|load_all|safe_load_all|full_load|"
                                                 r"full_load_all|unsafe_load|unsafe_load_all)\("),
    "an unsafe YAML loader": re.compile(r"\b(UnsafeLoader|FullLoader|yaml\.Loader|yaml\.CLoader)\b"),
    "eval or exec": re.compile(r"(?<![\w.])(eval|exec)\s*\("),
}


CAUGHT = {
    "import of pickle": ["import pickle", "    from cloudpickle import dumps", "import _pickle as p",
                         "import shelve"],
    "pickle call": ["x = pickle.loads(b)", "cloudpickle.load(fh)"],
    "marshal.loads": ["code = marshal.loads(blob)"],
    "a YAML load outside yaml_input": ["yaml.safe_load(text)", "yaml.load(t, Loader=L)", "yaml.full_load(t)",
                                       "yaml.unsafe_load(t)", "yaml.load_all(t)"],
    "an unsafe YAML loader": ["Loader=yaml.Loader", "yaml.UnsafeLoader", "FullLoader", "yaml.CLoader"],
    "eval or exec": ["eval(text)", "x = exec (code)"],
}
PASSED = ["yaml.safe_dump(data)", "scan_exec(points)", "model.eval(x)", "Nothing is unpickled.",
          "self._exec(task)", "yaml.SafeLoader", "yaml.dump(data)"]


@pytest.mark.parametrize("rule", list(FORBIDDEN))
def test_forbidden_patterns_catch_what_they_name(rule):
    assert all(FORBIDDEN[rule].search(line) for line in CAUGHT[rule])
    assert not any(FORBIDDEN[rule].search(line) for line in PASSED)


def sources() -> list[Path]:
    files = sorted((REPO / "mps").rglob("*.py")) + sorted((REPO / "models").rglob("*.py"))
    assert len(files) > 50
    return files


@pytest.mark.parametrize("rule", list(FORBIDDEN))
def test_source_never_loads_code_from_data(rule):
    hits = [f"{path.relative_to(REPO)}:{text[:m.start()].count(chr(10)) + 1}"
            for path in sources() for text in [path.read_text(encoding="utf-8")]
            for m in FORBIDDEN[rule].finditer(text)]
    assert hits == [], f"{rule}: {hits}"


def np_loads_with_pickle(text: str) -> list[str]:
    """The ``np.load(...)`` calls in ``text`` that do not say ``allow_pickle=False``."""
    calls = []
    for m in re.finditer(r"\b(np|numpy)\.load\(", text):
        depth, end = 1, m.end()
        while depth and end < len(text):
            depth += {"(": 1, ")": -1}.get(text[end], 0)
            end += 1
        if "allow_pickle=False" not in text[m.end():end]:
            calls.append(text[m.start():end])
    return calls


def test_numpy_archives_only_without_pickle():
    fine = "a = np.load(f(x), allow_pickle=False)\nb = numpy.load(\n  p,\n  allow_pickle=False)"
    assert np_loads_with_pickle(fine) == []
    assert np_loads_with_pickle("a = np.load(f(x))\nb = np.load(p, allow_pickle=True)") == [
        "np.load(f(x))", "np.load(p, allow_pickle=True)"]
    for path in sources():
        assert np_loads_with_pickle(path.read_text(encoding="utf-8")) == [], path


def test_every_yaml_read_goes_through_yaml_input():
    readers = [path.relative_to(REPO).as_posix() for path in sources()
               if "yaml.SafeLoader" in path.read_text(encoding="utf-8")]
    assert readers == ["mps/pipeline/yaml_input.py"]


# ----------------------------------------------------------------------------- valid configs


@pytest.mark.parametrize("path", CONFIGS, ids=[p.name for p in CONFIGS])
def test_shipped_configs_still_check(path, capsys):
    assert cli.main(["check", str(path)]) == 0, capsys.readouterr().err
    assert capsys.readouterr().err == ""


def test_load_mapping_reads_anchors_and_merges(tmp_path):
    path = tmp_path / "anchored.yaml"
    path.write_text("first: &s {bond: 8, sweeps: 1}\nlast: {<<: *s, sweeps: 4}\n", encoding="utf-8")
    assert load_mapping(path) == {"first": {"bond": 8, "sweeps": 1}, "last": {"bond": 8, "sweeps": 4}}
