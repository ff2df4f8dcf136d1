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

from .config import Config, ConfigError, load_config, sweep_points
from .runner import run_replicate

__all__ = ["Trace", "trace_replicate", "register_trace"]


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
        raise ConfigError(f"--point must be in [0, {len(points) - 1}]; got {point}")
    if not 0 <= replicate < config.experiment.replicates:
        raise ConfigError(
            f"--replicate must be in [0, {config.experiment.replicates - 1}]; got {replicate}"
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


def _cmd_trace(args) -> int:
    config = load_config(args.config)
    t = trace_replicate(config, point=args.point, replicate=args.replicate)
    where = ", ".join(f"{k} = {v}" for k, v in t.values.items())
    print(f"point {t.point}{f' ({where})' if where else ''}, replicate {t.replicate}, stream "
          f"SeedSequence({config.experiment.seed}, spawn_key=({t.point}, {t.replicate}))")
    print(t.census.to_string(index=False))
    print(f"outcome: {t.outcome} after {t.steps} seasons")
    return 0


def register_trace(sub) -> None:
    """Add ``trace`` to the ``broodline`` subparsers."""
    p = sub.add_parser("trace", help="run one replicate and print its census by allele and age, season by season")
    p.add_argument("config", help="experiment config (TOML)")
    p.add_argument("--point", type=int, default=0, help="sweep point (default 0)")
    p.add_argument("--replicate", type=int, default=0, help="replicate (default 0)")
    p.set_defaults(func=_cmd_trace)
