"""The model section: chains written in YAML and the families' own keys, refused with one line
naming the term or field (exit code 2), resolved and written back unchanged."""

from __future__ import annotations

import copy

import pytest
import yaml

from mps.pipeline.cli import main
from mps.pipeline.config import config_hash, parse_config
from mps.pipeline.errors import ConfigError
from mps.pipeline.schema import dump_config

ZIGZAG = {
    "name": "zz",
    "model": {
        "family": "written", "basis": "spin-half", "sites": 10,
        "couplings": {"J1": 1.0, "J2": 0.4}, "charge": {"Sz": 0},
        "terms": [
            {"product": "S^+(j) S^-(j+1)", "coef": "0.5*J1", "add_conjugate": True},
            {"product": "S^z(j) S^z(j+1)", "coef": "J1"},
            {"product": "S^+(j) S^-(j+2)", "coef": "0.5*J2", "add_conjugate": True},
            {"product": "S^z(j) S^z(j+2)", "coef": {"value": "J2", "dimer": 0.1}},
        ],
    },
    "solver": {"stages": [{"bond": 8, "sweeps": 1}]},
}
HOPPING = {
    "name": "hop",
    "model": {
        "family": "written", "basis": "spinful-fermion", "sites": 6, "charge": {"N": 6, "Sz": 0},
        "terms": [
            {"product": "c_up^+(j) c_up(j+1)", "coef": -1.0, "add_conjugate": True},
            {"product": "c_dn^+(j) c_dn(j+1)", "coef": -1.0, "add_conjugate": True},
            {"product": "n_up(j) n_dn(j)", "coef": {"per_site": [4, 4, 4, 4, 4, 4.5]}},
        ],
    },
    "solver": {"stages": [{"bond": 8, "sweeps": 1}]},
}


def with_term(base, index, term):
    data = copy.deepcopy(base)
    data["model"]["terms"][index] = term
    return data


def with_model(base, **keys):
    data = copy.deepcopy(base)
    data["model"].update(keys)
    return data


# name -> (config, field the message names, text it must contain)
BAD = {
    "changes the charge": (with_term(ZIGZAG, 2, {"product": "S^+(j) S^+(j+1)", "coef": 1.0, "add_conjugate": True}),
                           "model.terms[2]", "S^+(j) S^+(j+1): changes Sz by 2"),
    "unknown operator": (with_term(ZIGZAG, 1, {"product": "S^x(j) S^x(j+1)", "coef": 1.0}),
                         "model.terms[1]", "unknown operator 'S^x'"),
    "unknown basis": (with_model(ZIGZAG, basis="electron"), "model.basis", "must be one of spin-half"),
    "odd fermion count": (with_term(HOPPING, 2, {"product": "c_up^+(j) n_dn(j+1)", "coef": 1.0}),
                          "model.terms[2]", "odd number (1) of fermion operators"),
    "past the chain end": (with_term(ZIGZAG, 3, {"product": "S^z(j) S^z(j+10)", "coef": "J2"}),
                           "model.terms[3]", "beyond the end of a 10-site chain for every j"),
    "unreadable product": (with_term(ZIGZAG, 0, {"product": "S^z(i) S^z(i+1)", "coef": 1.0}),
                           "model.terms[0].product", "NAME(j) or NAME(j+r)"),
    "per-site list too short": (with_term(HOPPING, 2, {"product": "n_up(j) n_dn(j)", "coef": {"per_site": [1, 2]}}),
                                "model.terms[2]", "per_site lists 2 values but the product has 6 placements"),
    "undefined coupling": (with_term(ZIGZAG, 1, {"product": "S^z(j) S^z(j+1)", "coef": "J3"}),
                           "model.terms[1]", "refers to J3, not among the couplings"),
    "unused coupling": (with_model(ZIGZAG, couplings={"J1": 1.0, "J2": 0.4, "Jx": 1.0}),
                        "model.couplings.Jx", "not used by any term"),
    "missing charge": (with_model(ZIGZAG, charge={}), "model.charge.Sz", "is required for a written chain"),
    "nmax for spins": (with_model(ZIGZAG, nmax=3), "model.nmax", "boson bases only"),
    "nmax missing": (with_model(ZIGZAG, basis="boson-mode", charge={"N": 10}), "model.nmax", "is required"),
    "keep_charges unknown": (with_model(ZIGZAG, keep_charges=["N"]), "model.keep_charges", "among Sz"),
    "no terms": (with_model(ZIGZAG, terms=[]), "model.terms", "non-empty list"),
    "term key": (with_term(ZIGZAG, 0, {"product": "S^z(j)", "coef": 1.0, "hc": True}),
                 "model.terms[0].hc", "allowed: add_conjugate, coef, product"),
    "bad coefficient": (with_term(ZIGZAG, 0, {"product": "S^z(j)", "coef": "2J"}),
                        "model.terms[0].coef", "coupling name such as J"),
    "pattern without value": (with_term(ZIGZAG, 0, {"product": "S^z(j)", "coef": {"dimer": 0.1}}),
                              "model.terms[0].coef.value", "is required"),
    "bosons nmax too large": ({"model": {"family": "bosons", "sites": 4, "nmax": 40}}, "model.nmax", "1..12"),
    "unknown key of a family": ({"model": {"family": "spin1", "sites": 4, "nmax": 2}}, "model.nmax",
                                "allowed: charge, couplings, family, sites"),
}


@pytest.mark.parametrize("case", list(BAD), ids=list(BAD))
def test_refused_naming_the_term_or_field(case):
    data, field, text = BAD[case]
    with pytest.raises(ConfigError) as info:
        parse_config(data)
    assert info.value.field == field
    assert text in info.value.message
    assert "\n" not in str(info.value)


def _run(tmp_path, data, capsys):
    path = tmp_path / "c.yaml"
    data = {**data, "output": {"dir": str(tmp_path / "out"), "plots": False}}
    path.write_text(yaml.safe_dump(data))
    code = main(["run", str(path)])
    return code, capsys.readouterr().err.strip()


@pytest.mark.parametrize("case", ["changes the charge", "unknown operator", "unknown basis", "odd fermion count",
                                  "past the chain end"])
def test_run_exits_2_with_one_line(tmp_path, capsys, case):
    data, field, text = BAD[case]
    code, err = _run(tmp_path, data, capsys)
    assert code == 2 and len(err.splitlines()) == 1
    assert f"{field}: " in err and text in err
    assert not (tmp_path / "out").exists()


def test_non_hermitian_sum_is_named_at_run(tmp_path, capsys):
    # S^+_j S^-_{j+2} alone is not Hermitian; nothing else in the list supplies its conjugate.
    data = with_term(ZIGZAG, 2, {"product": "S^+(j) S^-(j+2)", "coef": "0.5*J2"})
    code, err = _run(tmp_path, data, capsys)
    assert code == 2 and len(err.splitlines()) == 1
    assert err.startswith("chargewise: model.terms[2] (S^+(j) S^-(j+2)): is not Hermitian")
    assert "add_conjugate: true" in err


def test_conjugate_written_as_its_own_term_is_accepted(tmp_path, capsys):
    # The conjugate may be a separate entry: the sum is Hermitian, so the run goes ahead.
    data = with_term(ZIGZAG, 2, {"product": "S^+(j) S^-(j+2)", "coef": "0.5*J2"})
    data["model"]["terms"].append({"product": "S^-(j) S^+(j+2)", "coef": "0.5*J2"})
    code, err = _run(tmp_path, data, capsys)
    assert code == 0, err


@pytest.mark.parametrize("data", [ZIGZAG, HOPPING], ids=["zigzag", "hopping"])
def test_written_chain_round_trips(data):
    cfg = parse_config(data)
    again = parse_config(yaml.safe_load(dump_config(cfg)))
    assert again == cfg and config_hash(again.model) == config_hash(cfg.model)
    assert [t.product.text for t in again.model.options["terms"]] == [t["product"] for t in data["model"]["terms"]]


def test_coupling_values_enter_the_hash_and_the_terms():
    base = parse_config(ZIGZAG)
    other = parse_config(with_model(ZIGZAG, couplings={"J1": 1.0, "J2": 0.5}))
    assert config_hash(base.model) != config_hash(other.model)
    nnn = [t for t in other.model.terms() if t.ops[-1][0] - t.ops[0][0] == 2 and t.ops[0][1] == "S^z"]
    assert [t.coef for t in nnn] == pytest.approx([0.5 * (1 + 0.1 * (-1) ** j) for j in range(8)])


def test_keep_a_subset_of_the_charges():
    # a^+ b^+ changes N = N_a + N_b by 2 but keeps Q = N_a - N_b: allowed once only Q is conserved.
    data = {"model": {"family": "written", "basis": "boson-ab", "nmax": 2, "sites": 4, "keep_charges": ["Q"],
                      "charge": {"Q": 0}, "terms": [{"product": "a^+(j) b^+(j+1)", "coef": 0.3, "add_conjugate": True},
                                                    {"product": "n(j)", "coef": 1.0}]}}
    cfg = parse_config(data)
    assert cfg.model.space().charge_names == ("Q",)
    del data["model"]["keep_charges"]
    data["model"]["charge"] = {"Q": 0, "N": 4}
    with pytest.raises(ConfigError, match="changes N by 2"):
        parse_config(data)
