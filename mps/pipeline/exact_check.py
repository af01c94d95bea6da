"""The solver against the exact lattice answer of a quadratic chain (free fermions or the free complex scalar): the largest
deviations, cut by cut and sector by sector, and the exact tables written beside the solver's
(``exact_entropies.csv``, ``exact_sectors.csv``, same columns as ``entropies.csv`` and
``sectors.csv``). Exact values: Peschel's correlation-matrix method (J. Phys. A 36, L205 (2003)),
see :mod:`mps.theory.freefermions`.
"""

from __future__ import annotations

import math

import numpy as np

from mps.analysis.resolved import CutResolved
from mps.pipeline.schema import RunConfig
from mps.pipeline.tables import Table, charge_value, record_tables, renyi_label
from mps.theory import scalar
from mps.theory.freefermions import (
    block_occupations,
    charge_correlations,
    correlation_matrix,
    resolve_correlation_cuts,
)
from mps.theory.species import resolve_species_block, species_fillings

EXACT_ENTROPIES = "exact_entropies"
EXACT_SECTORS = "exact_sectors"


def exact_records(cfg: RunConfig, cuts: list[int], renyi, alphas, component: int
                  ) -> tuple[list[CutResolved], np.ndarray, int | list[int]] | None:
    """Exact records of the cuts, exact connected correlations of the resolved charge density and
    the particle number(s), for a chain the family declares quadratic; None otherwise.

    The free complex scalar (family hook ``scalar_masses``): :mod:`mps.theory.scalar`, particle
    number None. One fermion species: H = sum h_ij c+_i c_j with q = unit N_A + offset l. Several independent species
    (family attribute ``SPECIES``, e.g. the two spin species of the Hubbard chain at U = 0): each
    is filled from the target charge, and the density correlations of charge c add up as
    sum_s (u_c a_{s,c})^2 <n_i n_j>_s^conn (independent species). Raises ValueError when the free
    ground state is degenerate.
    """
    fam = cfg.model.family_record()
    floor = cfg.analysis.weight_floor
    masses = fam.scalar_masses(cfg.model.sites, cfg.model.couplings, cfg.model.options)
    if masses is not None:   # the free complex scalar: Gaussian engine, charge Q = N_a - N_b
        V = scalar.mass_matrix(masses)
        X, P = scalar.correlations(V)
        return scalar.resolve_all_cuts(V, cuts, renyi, alphas, floor), scalar.charge_correlations(X, P), None
    sp = fam.single_particle(cfg.model.sites, cfg.model.couplings, cfg.model.options)
    if sp is None:
        return None
    h, unit, offset = sp
    if fam.species:
        units = cfg.model.space().charge_units
        fillings = species_fillings(fam.species, cfg.model.integer_charge())
        Cs = [correlation_matrix(h, n) for n in fillings]
        exact = [resolve_species_block([block_occupations(C, cut) for C in Cs], fam.species, cut, renyi, alphas,
                                       units, component, floor) for cut in cuts]
        corr = sum((units[component] * a[component]) ** 2 * charge_correlations(C) for a, C in zip(fam.species, Cs))
        return exact, corr, fillings
    total = cfg.model.charge[cfg.model.space().charge_names[component]]
    n_particles = int(round((total - offset * cfg.model.sites) / unit))
    C = correlation_matrix(h, n_particles)
    exact = resolve_correlation_cuts(C, cuts, renyi, alphas, unit, offset, floor)
    return exact, unit**2 * charge_correlations(C), n_particles


def deviations(solver: list[CutResolved], exact: list[CutResolved], rare: float = 1e-6) -> dict:
    """Largest |solver - exact| over all cuts, with where it occurs.

    p(q) over the union of sectors (a sector missing on one side counts as p = 0); S_n(q) over
    the sectors with exact p(q) > ``rare``; total S_n; charged moments Z_n(alpha)/Z_n(0) at the
    solver's fluxes for finite n (at n = inf the moment keeps only the largest level, a limit
    that jumps wherever that level is degenerate, e.g. nu = 1/2, so round-off decides it on
    both sides). ``missing_sectors`` counts sectors with exact p > ``rare`` whose entropy the
    solver does not report.
    """
    worst = {k: {"value": 0.0} for k in ("probability", "sector_entropy", "entropy", "moments")}
    missing = 0

    def note(key: str, value: float, **where) -> None:
        if value > worst[key]["value"]:
            worst[key] = {"value": float(value), **where}

    for s, e in zip(solver, exact):
        if s.cut != e.cut or s.renyi != e.renyi:
            raise ValueError(f"records do not match: cut {s.cut} vs {e.cut}, renyi {s.renyi} vs {e.renyi}")
        ps = dict(zip(s.charges.tolist(), s.probability))
        pe = dict(zip(e.charges.tolist(), e.probability))
        for q in set(ps) | set(pe):
            note("probability", abs(ps.get(q, 0.0) - pe.get(q, 0.0)), cut=s.cut, charge=charge_value(q))
        for i, n in enumerate(s.renyi):
            lab = renyi_label(n)
            note("entropy", abs(s.entropy[i] - e.entropy[i]), cut=s.cut, n=lab)
            if np.isfinite(n):
                dz = np.abs(s.moments[i] - e.moments[i])
                k = int(np.argmax(dz))
                note("moments", dz[k], cut=s.cut, n=lab, alpha=float(s.alphas[k]))
            ss = dict(zip(s.charges.tolist(), s.sector_entropy[i]))
            for q, p, v in zip(e.charges.tolist(), e.probability, e.sector_entropy[i]):
                if p <= rare:
                    continue
                mine = ss.get(q, math.nan)
                if not np.isfinite(mine):
                    missing += i == 0
                    continue
                note("sector_entropy", abs(mine - v), cut=s.cut, charge=charge_value(q), n=lab)
    return {"max_deviation": worst, "missing_sectors": int(missing)}


def exact_tables(exact: list[CutResolved]) -> dict[str, Table]:
    """exact_entropies and exact_sectors tables, with the columns of entropies.csv and sectors.csv."""
    tables = record_tables(exact, prefix="exact_")
    return {EXACT_ENTROPIES: tables[EXACT_ENTROPIES], EXACT_SECTORS: tables[EXACT_SECTORS]}
