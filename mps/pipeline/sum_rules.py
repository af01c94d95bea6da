"""Exact identities every run must satisfy, checked on its records and reported in comparison.json.

- Normalisation: sum_q p(q) = 1 (the Schmidt weights of a normalised state; for the bosonic exact
  engine up to the stated truncation bound).
- S_1 = S_number + S_config, S_number = -sum_q p log p, S_config = sum_q p(q) S_1(q) (Lukin et al.,
  Science 364, 256 (2019); Wiseman and Vaccaro, PRL 91, 097902 (2003)); exact when every sector's
  entropy is reported (sectors below the weight floor are left out of S_config, so the deviation is
  bounded by their total weight times their entropies).
- Charge conjugation: a chain whose Hamiltonian is invariant under exchanging particles and
  antiparticles (the complex scalar: a <-> b maps Q to -Q and leaves every term invariant, for any
  m_j and lam) has a neutral ground state in Q = 0 with p(q) = p(-q) at every cut.
"""

from __future__ import annotations

import numpy as np

from mps.analysis.resolved import CutResolved

CONJUGATION_SYMMETRIC = ("complex-scalar",)


def sum_rules(records: list[CutResolved], family: str, total_charge: float) -> dict:
    """Largest violations over all cuts: ``normalisation``, ``entropy_split`` and, for a
    charge-conjugation symmetric chain at total charge 0, ``conjugation`` (else null); each
    {value, cut}."""
    out: dict = {"normalisation": _worst(records, lambda r: abs(float(np.sum(r.probability)) - 1.0))}
    if 1.0 in records[0].renyi:
        i = records[0].renyi.index(1.0)
        out["entropy_split"] = _worst(
            records, lambda r: abs(float(r.entropy[i]) - r.number_entropy - r.config_entropy))
    out["conjugation"] = None
    if family in CONJUGATION_SYMMETRIC and total_charge == 0:
        out["conjugation"] = _worst(records, _asymmetry)
    return out


def _asymmetry(r: CutResolved) -> float:
    """max_q |p(q) - p(-q)| (a sector missing on one side counts with p = 0)."""
    p = dict(zip(np.round(r.charges, 9), r.probability))
    return max(abs(v - p.get(-q, 0.0)) for q, v in p.items())


def _worst(records: list[CutResolved], measure) -> dict:
    values = [measure(r) for r in records]
    k = int(np.argmax(values))
    return {"value": float(values[k]), "cut": records[k].cut}
