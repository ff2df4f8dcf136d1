"""The unit of work: a ``Batch`` of replicates of one point, and ``run_batch``, which runs one.

``run_batch`` is a top-level function, so spawned processes and dask workers
import it by name. Results do not depend on how replicates are cut into
batches, because each replicate draws from its own stream
``SeedSequence(seed, spawn_key=(point, replicate))``.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace

import numpy as np

from ..config import SweepPoint
from ..replicates import ReplicateResult, run_replicates

__all__ = [
    "Batch",
    "PoolError",
    "ClusterError",
    "plan_batches",
    "iter_batches",
    "default_batch_size",
    "default_workers",
    "run_batch",
    "reduce_trajectory",
]


class PoolError(RuntimeError):
    """The machinery that runs batches failed (a worker died, a scheduler is out of reach...)."""


class ClusterError(PoolError):
    """A dask cluster cannot be used: not installed, not reachable, or it lost a batch for good."""


@dataclass(frozen=True, order=True)
class Batch:
    """Replicates ``first`` to ``last`` (inclusive) of sweep point ``point``."""

    point: int
    first: int
    last: int

    @property
    def replicates(self) -> range:
        return range(self.first, self.last + 1)

    def __len__(self) -> int:
        return self.last - self.first + 1


def default_workers() -> int:
    """The cores this process may use (a batch scheduler's CPU set, where it sets one)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        return os.cpu_count() or 1


# Individuals a batch holds at once by default: enough that a batch's fixed cost per season
# (array calls around the compiled pass; numpy calls per replicate for some laws) is spread
# over many individuals, few enough that a batch finishes (and is saved) quickly.
BATCH_INDIVIDUALS = 100_000


def default_batch_size(n_replicates: int, slots: int, census_size: int = 1) -> int:
    """Replicates per batch: about ``BATCH_INDIVIDUALS`` individuals at the starting census
    (at most 1024 replicates), and small enough that every slot gets about four batches."""
    cap = max(1, min(1024, BATCH_INDIVIDUALS // max(census_size, 1)))
    return max(1, min(cap, math.ceil(n_replicates / (4 * max(slots, 1)))))


def plan_batches(missing: dict[int, list[range]], batch_size: int) -> list[Batch]:
    """Cut each point's runs of missing replicates into batches of at most ``batch_size``."""
    return list(iter_batches(missing, batch_size))


def iter_batches(missing: dict[int, list[range]], batch_size: int):
    """``plan_batches`` one batch at a time: planning a billion replicates holds one batch."""
    if batch_size < 1:
        raise ValueError(f"batch_size must be >= 1; got {batch_size}")
    return (Batch(point, first, min(first + batch_size, run.stop) - 1)
            for point in sorted(missing) for run in missing[point]
            for first in range(run.start, run.stop, batch_size))


def reduce_trajectory(result: ReplicateResult, mode: str) -> ReplicateResult:
    """Keep the trajectory by age, sum it over ages (``by-allele``), or drop it (``none``)."""
    if mode == "by-age":
        return result
    if mode == "by-allele":
        return replace(result, trajectory=result.trajectory.sum(axis=2, dtype=np.uint64)
                       .astype(np.uint32))
    if mode == "none":
        return replace(result, record_steps=np.zeros(0, np.int32),
                       trajectory=np.zeros((0, *result.trajectory.shape[1:]), np.uint32))
    raise ValueError(f"trajectory must be 'by-age', 'by-allele' or 'none'; got {mode!r}")


def run_batch(point: SweepPoint, first: int, last: int, seed: int) -> list[ReplicateResult]:
    """Run replicates ``first`` to ``last`` of one point; trajectories kept as the config says.

    This is what a worker runs: a top-level function (spawned processes and
    dask workers import it by name) around ``replicates.run_replicates``.
    """
    mode = point.config.experiment.trajectory
    return [reduce_trajectory(r, mode) for r in run_replicates(point, range(first, last + 1), seed)]
