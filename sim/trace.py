"""One replicate, season by season: ``broodline trace CONFIG [--point I] [--replicate R]``.

The replicate draws from its own keyed stream, ``SeedSequence(seed,
spawn_key=(point, replicate))``, exactly as in an experiment, so a trace
reproduces a stored replicate (every season is shown, whatever the
experiment's ``record_every``; recording draws nothing).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .config import Config, ConfigError, sweep_points
from .replicates import run_replicate

__all__ = ["Trace", "trace_replicate"]


@dataclass(frozen=True)
class Trace:
    """A traced replicate: its outcome and the census by allele and age at every season.

    ``census`` has columns ``season``, ``allele``, ``age 1`` ... ``age A`` and
    ``total``, one row per (season, allele).
    """

    point: int
    replicate: int
    outcome: str
    steps: int
    values: dict
    census: pd.DataFrame


def trace_replicate(config: Config, *, point: int = 0, replicate: int = 0) -> Trace:
    """Run replicate ``replicate`` of sweep point ``point`` and keep every season's census."""
    points = sweep_points(config)
    if not 0 <= point < len(points):
        raise ConfigError(f"point must be in [0, {len(points) - 1}]; got {point}")
    if not 0 <= replicate < config.experiment.replicates:
        raise ConfigError(
            f"replicate must be in [0, {config.experiment.replicates - 1}]; got {replicate}"
        )
    sp = points[point]
    every = sp.config.model_copy(
        update={"experiment": sp.config.experiment.model_copy(update={"record_every": 1})}
    )
    result = run_replicate(sp.model_copy(update={"config": every}), replicate, config.experiment.seed)
    counts = np.asarray(result.trajectory, dtype=np.int64)  # (seasons, alleles, ages)
    names = [a.name for a in config.allele]
    rows = []
    for step, census in zip(result.record_steps, counts):
        for name, by_age in zip(names, census):
            rows.append([int(step), name, *by_age.tolist(), int(by_age.sum())])
    columns = ["season", "allele", *[f"age {a + 1}" for a in range(counts.shape[2])], "total"]
    census = pd.DataFrame(rows, columns=columns)
    return Trace(point, replicate, result.outcome, result.steps, dict(sp.values), census)
