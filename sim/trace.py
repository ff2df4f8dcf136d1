"""One replicate, season by season: ``broodline trace CONFIG [--point I] [--replicate R]``.

The replicate draws from its own keyed stream, ``SeedSequence(seed,
spawn_key=(point, replicate))``, exactly as in an experiment, so a trace
reproduces a stored replicate (every season is shown, whatever the
experiment's ``record_every``; recording draws nothing). With
``[environment]`` the years come from the replicate's own year stream
(``sim.year_draws``: ``(point, replicate, 1)``, or the point's shared one), as
in the experiment, so the trace's years are the stored ones.
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
    ``total``, one row per (season, allele); with ``[environment]`` also
    ``year`` after ``season``: the type of the year whose season ended in
    this census (empty at season 0, the starting census). ``years`` holds the
    year type of seasons 1..steps (None in a constant environment).
    """

    point: int
    replicate: int
    outcome: str
    steps: int
    values: dict
    census: pd.DataFrame
    years: tuple[str, ...] | None = None


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
    year_types = sp.config.year_types()
    years = None if year_types is None else tuple(year_types.names[int(y)] for y in result.years)
    rows = []
    for step, census in zip(result.record_steps, counts):
        year = [] if years is None else [years[step - 1] if step > 0 else ""]
        for name, by_age in zip(names, census):
            rows.append([int(step), *year, name, *by_age.tolist(), int(by_age.sum())])
    columns = ["season", *([] if years is None else ["year"]), "allele",
               *[f"age {a + 1}" for a in range(counts.shape[2])], "total"]
    census = pd.DataFrame(rows, columns=columns)
    return Trace(point, replicate, result.outcome, result.steps, dict(sp.values), census, years)
