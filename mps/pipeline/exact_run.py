"""``solver: {method: exact}``: a quadratic chain straight through the exact free-field engines.

Free fermions (a family with a single-particle matrix: fermions with V = 0, xxz with Delta = 0) go
through Peschel's correlation-matrix method (J. Phys. A 36, L205 (2003); :mod:`mps.theory.freefermions`),
the free complex scalar through its Gaussian engine (symplectic eigenvalues of the block correlation
matrices; :mod:`mps.theory.scalar`). The run directory gets the tables of a swept run (entropies.csv,
sectors.csv, moments.csv with the same columns; no spectrum.csv and no state.h5), summary.json (with
``method: exact``, the exact ground energy, ``variance`` 0, no bond dimension), comparison.json and the
plots. The caller holds the run-directory lock.

Energies: for fermions, the sum of the filled single-particle levels plus the constant of the
Jordan-Wigner form, which is the energy of the empty (lowest-charge) product state, read off the
family's own terms; for the scalar, sum_k omega_k (the family's Hamiltonian carries the zero-point
term).
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from mps import __version__
from mps.analysis.entanglement import default_alphas
from mps.pipeline.comparison import COMPARISON, ComparisonSettings, assemble, comparison_renyi
from mps.pipeline.errors import InputError
from mps.pipeline.exact_check import exact_records
from mps.pipeline.rundir import SUMMARY, write_json
from mps.pipeline.schema import RunConfig
from mps.pipeline.tables import record_tables, write_tables
from mps.theory import scalar


def vacuum_energy(cfg: RunConfig) -> float:
    """<0|H|0> on the product state with the lowest charge on every site (the empty chain of the
    Jordan-Wigner form), from the family's terms: the constant of H = sum h_ij c+_i c_j + const."""
    space = cfg.model.space()
    vac = int(np.argmin(space.charges[:, 0]))
    total = 0.0
    for term in cfg.model.terms():
        local: dict[int, np.ndarray] = {}
        for site, name in term.ops:   # product order on each site; Jordan-Wigner strings are 1 on |0>
            op = space.ops[name]
            local[site] = local[site] @ op if site in local else op
        total += float(np.real(term.coef * np.prod([m[vac, vac] for m in local.values()])))
    return total


def exact_energy(cfg: RunConfig) -> float:
    """Ground energy of the quadratic chain (see the module docstring); a degenerate free ground state
    is refused by :func:`mps.pipeline.exact_check.exact_records`, which runs first."""
    fam, m = cfg.model.family_record(), cfg.model
    masses = fam.scalar_masses(m.sites, m.couplings, m.options)
    if masses is not None:
        return scalar.ground_energy(scalar.mass_matrix(masses))
    h, unit, offset = fam.single_particle(m.sites, m.couplings, m.options)
    n = int(round((m.charge[m.space().charge_names[0]] - offset * m.sites) / unit))
    return float(np.sum(np.linalg.eigvalsh(h)[:n])) + vacuum_energy(cfg)


def run_exact(directory: Path, cfg: RunConfig, say) -> dict:
    """Compute and write every table, summary.json and comparison.json of an exact run; return the report."""
    t0 = time.perf_counter()
    renyi = comparison_renyi(cfg)
    cuts = list(range(1, cfg.model.sites))
    say(f"{cfg.name}: {cfg.model.family}, {cfg.model.sites} sites, charge {cfg.model.charge}, exact engine "
        f"({len(cuts)} cuts)")
    try:
        # thousands of small SVDs and eigensolves: one BLAS thread each is faster than two, and far
        # faster when other processes share the cores (measured: 4 ms against up to 700 ms per SVD)
        with threadpool_limits(limits=1, user_api="blas"):
            found = exact_records(cfg, cuts, renyi, default_alphas(cfg.analysis.flux_points), 0)
        energy = exact_energy(cfg)
    except ValueError as exc:
        raise InputError(f"model: {exc}") from None
    records, corr, particles = found
    wanted = [r for r in records if r.cut in set(cfg.analysis.cut_list(cfg.model.sites))]
    write_tables(directory, record_tables(wanted, renyi=cfg.analysis.renyi))
    seconds = time.perf_counter() - t0
    summary = {
        "name": cfg.name, "family": cfg.model.family, "sites": cfg.model.sites, "method": "exact",
        "energy": energy, "energy_per_site": energy / cfg.model.sites, "variance": 0.0, "converged": True,
        "sweeps": 0, "max_bond": None, "truncation": 0.0, "seconds": seconds, "version": __version__,
        "weight_floor": cfg.analysis.weight_floor, "resolved_by": cfg.analysis.resolve,
    }
    if particles is not None:
        summary["n_particles"] = particles
    write_json(directory / SUMMARY, summary)
    say(f"E = {energy:.12f} ({energy / cfg.model.sites:.12f} per site), exact, {seconds:.1f} s")
    settings = ComparisonSettings(window=cfg.analysis.fit_window, correlations=cfg.analysis.correlations)
    result = assemble(cfg, records, corr if cfg.analysis.correlations else None, settings, None,
                      check_exact=False)
    write_json(directory / COMPARISON, result.report)
    return result.report
