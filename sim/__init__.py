"""broodline's simulator: configs, schedules, density dependence, engines, runs and results."""

from .config import Config, ConfigError, load_config, parse_config, sweep_points
from .density import DensityDependence, Factors
from .experiment import run_experiment
from .lifecycle import LifeCycle, initial_census
from .meanfield import (
    Equilibrium,
    NoEquilibriumError,
    growth_rate,
    projection_matrix,
    solve_equilibrium,
    stable_age_distribution,
)
from .model import BroodModel
from .replicates import ReplicateResult, replicate_rng, run_replicate, run_replicates
from .schedules import Schedule, iteroparous, semelparous, table
from .store import read_attrs, read_point_configs, read_points, read_replicates, read_trajectories

__all__ = [
    "Config", "ConfigError", "load_config", "parse_config", "sweep_points",
    "DensityDependence", "Factors", "LifeCycle", "initial_census",
    "Equilibrium", "NoEquilibriumError", "growth_rate", "projection_matrix",
    "solve_equilibrium", "stable_age_distribution",
    "BroodModel", "ReplicateResult", "replicate_rng", "run_experiment", "run_replicate",
    "run_replicates",
    "Schedule", "iteroparous", "semelparous", "table",
    "read_attrs", "read_point_configs", "read_points", "read_replicates", "read_trajectories",
]
