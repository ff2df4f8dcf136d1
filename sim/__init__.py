"""broodline's simulator: configs, schedules, density dependence, engines, runs and results.

The names below are imported when first used (PEP 562), so that a worker
process, which imports ``sim.parallel.work`` and hence this package, pays
only for the modules a batch needs (not pandas, h5py readers, tqdm or mesa).
"""

from .lazy import lazy_exports

_WHERE = {
    "Config": "config", "ConfigError": "config", "load_config": "config", "parse_config": "config",
    "sweep_points": "config",
    "DensityDependence": "density", "Factors": "density",
    "run_experiment": "experiment",
    "LifeCycle": "lifecycle", "initial_census": "lifecycle",
    "Equilibrium": "meanfield", "NoEquilibriumError": "meanfield", "growth_rate": "meanfield",
    "projection_matrix": "meanfield", "solve_equilibrium": "meanfield",
    "stable_age_distribution": "meanfield",
    "BroodModel": "model",
    "ReplicateResult": "replicates", "replicate_rng": "replicates", "run_replicate": "replicates",
    "run_replicates": "replicates",
    "Schedule": "schedules", "iteroparous": "schedules", "semelparous": "schedules", "table": "schedules",
    "read_attrs": "store", "read_point_configs": "store", "read_points": "store",
    "read_replicates": "store", "read_trajectories": "store",
}


__getattr__, __dir__ = lazy_exports(__name__, _WHERE, globals())

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
