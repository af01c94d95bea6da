"""chargewise engine: U(1) block-sparse tensors, matrix-product states, ground-state sweeps,
charge-resolved entanglement and the pipeline that drives them from a YAML file.

One sub-package per layer, each importing only those below it: ``blocks`` (charges and
block-sparse tensors) < ``chain`` (local spaces, operators, states) < ``solver`` (sweeps) <
``analysis`` (resolved entanglement, correlations) < ``theory`` (exact free fields, field theory)
< ``models`` (the top-level package of lattice families) < ``pipeline`` (files and commands).
"""

import os

# OpenBLAS keeps its worker threads spinning for 2^28 cycles (~0.1 s) after every BLAS call, so
# on a small machine they take a core from the work that follows a matrix product: the per-sector
# factorisations that run side by side (mps.blocks.cores) and the single-threaded kernels.
# 2^14 cycles (a few microseconds) lets them sleep at once; it only takes effect when set before
# numpy first loads OpenBLAS, and a value the user has set is kept.
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "14")

__version__ = "0.1.0"
