"""chargewise engine: U(1) block-sparse tensors, matrix-product states, ground-state sweeps,
charge-resolved entanglement and the pipeline that drives them from a YAML file.

One sub-package per layer, each importing only those below it: ``blocks`` (charges and
block-sparse tensors) < ``chain`` (local spaces, operators, states) < ``solver`` (sweeps) <
``analysis`` (resolved entanglement, correlations) < ``theory`` (exact free fields, field theory)
< ``models`` (the top-level package of lattice families) < ``pipeline`` (files and commands).
"""

__version__ = "0.1.0"
