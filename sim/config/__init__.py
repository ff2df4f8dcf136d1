"""Experiment configuration: the schema, sweep paths, loading and provenance.

``schema`` declares the TOML vocabulary and every constraint once;
``sweep`` reads and writes paths and expands ``[sweep]`` into points;
``messages`` words validation errors; ``loading`` reads TOML;
``provenance`` hashes a config and lists the differences between two.
"""

from .loading import load_config, parse_config
from .provenance import config_differences, config_hash
from .schema import (
    LINKED,
    MAX_COUNT,
    AlleleSection,
    Config,
    ConfigError,
    DensitySection,
    ExperimentSection,
    InvasionSection,
    MutationSection,
    OffspringSection,
)
from .sweep import (
    SweepFactor,
    SweepPoint,
    get_path,
    set_path,
    sweep_factors,
    sweep_points,
    swept_paths,
    with_values,
)

__all__ = [
    "ConfigError",
    "Config",
    "ExperimentSection",
    "DensitySection",
    "OffspringSection",
    "AlleleSection",
    "InvasionSection",
    "MutationSection",
    "MAX_COUNT",
    "LINKED",
    "SweepPoint",
    "SweepFactor",
    "load_config",
    "parse_config",
    "sweep_points",
    "sweep_factors",
    "swept_paths",
    "get_path",
    "set_path",
    "with_values",
    "config_hash",
    "config_differences",
]
