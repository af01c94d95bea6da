"""chargewise engine: U(1) block-sparse tensors, matrix-product states, ground-state sweeps,
charge-resolved entanglement and the pipeline that drives them from a YAML file.

One sub-package per layer, each importing only those below it: ``blocks`` (charges and
block-sparse tensors) < ``chain`` (local spaces, operators, states) < ``solver`` (sweeps) <
``analysis`` (resolved entanglement, correlations) < ``theory`` (exact free fields, field theory)
< ``models`` (the top-level package of lattice families) < ``pipeline`` (files and commands).
"""

import os

# OpenBLAS keeps its worker threads spinning for 2^28 cycles (~0.1 s) after every BLAS call, so
# they take a core from the per-sector factorisations that follow the Lanczos products and run
# side by side (mps.blocks.cores). 2^20 cycles (~0.3 ms) still covers the gaps between the
# products of one operator application. Measured on the 2-core development machine, SVD time of
# a bond-128 / 256 / 512 sweep: 0.41 / 1.6-2.0 / 6.8 s -> 0.33 / 0.84 / 3.2 s, the products
# unchanged (2^14 cycles made the bond-128 products 10 % slower). It only takes effect when set
# before numpy first loads OpenBLAS; a value the user has set is kept.
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "20")

__version__ = "0.1.0"
