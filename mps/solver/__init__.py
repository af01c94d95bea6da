"""The ground-state search in one charge sector: environments and the one- and two-site
effective Hamiltonians, restarted Lanczos, and two-site or single-site (subspace expansion)
sweeps as a generator of sweep records that never prints (the pipeline draws progress and writes
checkpoints).
"""

from mps.solver.krylov import EigenResult, lowest_eigenpair
from mps.solver.sweep import (
                              Progress,
                              SectorSweeper,
                              Stage,
                              SweepRecord,
                              SweepSettings,
                              SweepStopped,
                              energy_and_variance,
                              solve_sector,
)

__all__ = ["EigenResult", "Progress", "SectorSweeper", "Stage", "SweepRecord", "SweepSettings",
           "SweepStopped", "energy_and_variance", "lowest_eigenpair", "solve_sector"]
