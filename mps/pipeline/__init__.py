"""From a YAML file to a run directory: config schema and validation, HDF5 checkpoints, the run
directory and its tables, the comparison stage, plots, the benchmark and the command line. All
file I/O of the project lives in this layer.

Only the light input-boundary names are exported here; the verbs are in
:mod:`mps.pipeline.runner` (imported on demand so that ``chargewise check`` starts quickly).
"""

from mps.pipeline.config import config_hash, load_config, parse_config
from mps.pipeline.errors import ConfigError, InputError
from mps.pipeline.schema import RunConfig, dump_config

__all__ = ["ConfigError", "InputError", "RunConfig", "config_hash", "dump_config", "load_config",
           "parse_config"]
