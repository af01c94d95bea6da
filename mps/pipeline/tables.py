"""The entanglement tables of a run: entropies.csv, sectors.csv, moments.csv and spectrum.csv.

:func:`entanglement_tables` turns the sector-labelled Schmidt values stored on every bond of a
state into the rows of those tables (usable from a notebook without touching the disk);
:func:`write_tables` writes them into a run directory. Charges are reported in physical units
(S^z of the left block for spin chains, so half-integers appear; N_A for particles).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from mps.analysis.entanglement import (
    charge_moments,
    default_alphas,
    entanglement_spectrum,
    resolve_cut,
    resolve_cut_joint,
)
from mps.analysis.resolved import CutResolved
from mps.chain.state import ChainState
from mps.pipeline.errors import InputError
from mps.pipeline.rundir import write_table
from mps.pipeline.schema import AnalysisConfig


@dataclass(frozen=True)
class Table:
    columns: list[str]
    rows: list[list]

    def column(self, name: str) -> list:
        i = self.columns.index(name)
        return [r[i] for r in self.rows]


def renyi_label(n: float) -> str:
    """'1', '2', '0.5', 'inf' — the suffix of the S_n columns."""
    if math.isinf(n):
        return "inf"
    return str(int(n)) if float(n).is_integer() else repr(float(n))


def charge_value(q: float):
    """Physical charge as written: integers without '.0', half-integers as decimals."""
    q = float(q)
    return int(q) if q.is_integer() else q


def resolve_state(state: ChainState, units: tuple[float, ...], analysis: AnalysisConfig,
                  charge_names: tuple[str, ...], renyi=None, cuts=None) -> list[CutResolved]:
    """CutResolved records of the requested cuts (by the configured charge component)."""
    renyi = tuple(analysis.renyi if renyi is None else renyi)
    if 1.0 not in renyi:
        renyi = renyi + (1.0,)   # S_config needs the von Neumann entropy of every sector
    cuts = analysis.cut_list(state.sites) if cuts is None else list(cuts)
    component = 0 if analysis.resolve == "joint" else charge_names.index(analysis.resolve)
    alphas = default_alphas(analysis.flux_points)
    out = []
    for cut in cuts:
        if not 1 <= cut < state.sites:
            raise InputError(f"cuts: {cut} is not a cut of a {state.sites}-site chain (1..{state.sites - 1})")
        spec = state.spectra[cut]
        if spec is None:
            raise InputError(f"cut {cut}: the stored state has no Schmidt values there (run more sweeps)")
        out.append(resolve_cut(spec.as_dict(), cut, renyi, alphas, units, None, component,
                               analysis.weight_floor))
    return out


def entanglement_tables(state: ChainState, units: tuple[float, ...], analysis: AnalysisConfig,
                        charge_names: tuple[str, ...], renyi=None, cuts=None) -> dict[str, Table]:
    """Rows of entropies.csv, sectors.csv, moments.csv and spectrum.csv (keys without .csv).

    Resolved by one charge, every column refers to it. Resolved jointly (``analysis.resolve:
    joint`` with several charges), sectors.csv has one charge column per charge
    (``charge_<name>``) and S_number, S_config are those of the joint distribution, while the
    cumulant columns, moments.csv and spectrum.csv refer to the first charge. Chains with several charges also
    get ``charge_mean_<name>`` and ``charge_var_<name>`` for every charge.
    """
    wanted = tuple(analysis.renyi if renyi is None else renyi)
    records = resolve_state(state, units, analysis, charge_names, wanted, cuts)
    labels = [renyi_label(n) for n in wanted]
    idx = [records[0].renyi.index(n) for n in wanted] if records else []
    several = len(charge_names) > 1
    per_charge = ([f"charge_mean_{n}" for n in charge_names] + [f"charge_var_{n}" for n in charge_names]
                  if several else [])
    ent_cols = (["cut"] + [f"S_{x}" for x in labels]
                + ["charge_mean", "charge_var", "S_number", "S_config", "charge_k3", "charge_k4"] + per_charge)
    ent_rows, sec_rows, mom_rows, spec_rows = [], [], [], []
    component = 0 if analysis.resolve == "joint" else charge_names.index(analysis.resolve)
    joint = analysis.resolve == "joint" and several
    for rec in records:
        spec = state.spectra[rec.cut].as_dict()
        weights = rec
        if joint:
            weights = resolve_cut_joint(spec, rec.cut, rec.renyi, units, None, None, analysis.weight_floor)
            for s in range(len(weights.probability)):
                sec_rows.append([rec.cut] + [charge_value(c) for c in weights.charges[s]]
                                + [float(weights.probability[s])]
                                + [float(weights.sector_entropy[i][s]) + 0.0 for i in idx]
                                + [int(weights.counts[s])])
        else:
            for s, q in enumerate(rec.charges):
                sec_rows.append([rec.cut, charge_value(q), float(rec.probability[s])]
                                + [float(rec.sector_entropy[i][s]) + 0.0 for i in idx] + [int(rec.counts[s])])
        extra = []
        if several:
            mean, cov = charge_moments(spec, units)
            extra = [float(m) for m in mean] + [float(v) for v in np.diag(cov)]
        ent_rows.append([rec.cut] + [float(rec.entropy[i]) for i in idx]
                        + [rec.cumulant(1), rec.cumulant(2), weights.number_entropy, weights.config_entropy,
                           rec.cumulant(3), rec.cumulant(4)] + extra)
        for n, i in zip(labels, idx):
            for a, z in zip(rec.alphas, rec.moments[i]):
                mom_rows.append([rec.cut, n, float(a), float(z.real), float(z.imag)])
        for q, level, value in entanglement_spectrum(spec, units, None, component, analysis.spectrum_levels):
            spec_rows.append([rec.cut, charge_value(q), level, value])
    charge_cols = [f"charge_{n}" for n in charge_names] if joint else ["charge"]
    return {
        "entropies": Table(ent_cols, ent_rows),
        "sectors": Table(["cut"] + charge_cols + ["probability"] + [f"S_{x}" for x in labels] + ["count"],
                         sec_rows),
        "moments": Table(["cut", "n", "alpha", "re", "im"], mom_rows),
        "spectrum": Table(["cut", "charge", "level", "value"], spec_rows),
    }


def record_tables(records: list[CutResolved], prefix: str = "", renyi=None) -> dict[str, Table]:
    """entropies, sectors and moments tables (names with ``prefix``) of records computed elsewhere
    (the exact engines), with the columns of :func:`entanglement_tables` for one charge; ``renyi``
    selects the written Renyi columns (default: all of the records').

    ``count`` is written as an integer below 2^53 and as a float above (inf for bosonic sectors,
    which hold infinitely many levels).
    """
    wanted = tuple(records[0].renyi if renyi is None else renyi) if records else ()
    idx = [records[0].renyi.index(n) for n in wanted]
    labels = [renyi_label(n) for n in wanted]
    ent_cols = ["cut"] + [f"S_{x}" for x in labels] + ["charge_mean", "charge_var", "S_number", "S_config",
                                                       "charge_k3", "charge_k4"]
    ent_rows, sec_rows, mom_rows = [], [], []
    for r in records:
        ent_rows.append([r.cut] + [float(r.entropy[i]) for i in idx]
                        + [r.cumulant(1), r.cumulant(2), r.number_entropy, r.config_entropy,
                           r.cumulant(3), r.cumulant(4)])
        for s, q in enumerate(r.charges):
            count = float(r.counts[s])
            sec_rows.append([r.cut, charge_value(q), float(r.probability[s])]
                            + [float(r.sector_entropy[i][s]) + 0.0 for i in idx]
                            + [int(count) if count < 2.0**53 else count])
        for n, row in zip(labels, r.moments[idx]):
            for a, z in zip(r.alphas, row):
                mom_rows.append([r.cut, n, float(a), float(z.real), float(z.imag)])
    return {
        f"{prefix}entropies": Table(ent_cols, ent_rows),
        f"{prefix}sectors": Table(["cut", "charge", "probability"] + [f"S_{x}" for x in labels] + ["count"],
                                  sec_rows),
        f"{prefix}moments": Table(["cut", "n", "alpha", "re", "im"], mom_rows),
    }


def write_tables(directory: Path, tables: dict[str, Table]) -> None:
    for name, table in tables.items():
        write_table(Path(directory) / f"{name}.csv", table.columns, table.rows)

