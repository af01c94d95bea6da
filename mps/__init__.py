"""chargewise engine: U(1) block-sparse tensors, matrix-product states, ground-state sweeps,
charge-resolved entanglement and the pipeline that drives them from a YAML file."""

__version__ = "0.1.0"
