"""The unit of work: a ``Batch`` of replicates of one point, and ``run_batch``, which runs one.

``run_batch`` is a top-level function, so spawned processes and dask workers
import it by name. Results do not depend on how replicates are cut into
batches, because each replicate draws from its own stream
``SeedSequence(seed, spawn_key=(point, replicate))``.
"""

from __future__ import annotations

import math
import os
import time
from collections import Counter
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # the engines (numba) are imported where a batch runs, not by the writer;
    # the config schema (pydantic) by neither worker processes nor this module
    from ..config import SweepPoint
    from ..point_run import PointRun
    from ..replicates import ReplicateResult

__all__ = [
    "Batch",
    "PoolError",
    "ClusterError",
    "plan_batches",
    "iter_batches",
    "default_batch_size",
    "run_batch",
    "run_kept_replicates",
    "reduce_trajectory",
    "Job",
    "jobs_of",
    "BatchClock",
    "BatchOutput",
    "run_job",
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


# Entries a batch holds at once by default (an individual, for the engines that hold
# individuals; a count per class, for ``counts``: ``sim.engines.held_per_replicate``): enough
# that a batch's fixed cost per season (array calls around the compiled pass; numpy calls per
# replicate for some laws) is spread over many replicates, few enough that a batch finishes
# (and is saved) quickly. In an invasion most replicates leave early and a few run long: the
# larger the batch, the more replicates share the long tail's seasons (K = 500, one worker:
# 1000 replicates a batch ran 20,000 replicates in 4.2 s, 200 a batch in 7.2 s, measured in
# one run). A batch's results stay in memory until saved, trajectories included, so a batch
# that keeps them holds at most ``BATCH_REPLICATES``. Without trajectories (``trajectory =
# "none"``) they are a few numbers a replicate, so such batches hold four times the entries
# and up to ``UNRECORDED_REPLICATES`` replicates (K = 500, 16,384 replicates on one core: 4096
# a batch took 64 microseconds of CPU a replicate against 84 at 1024 with `counts`, 200
# against 243 with `individual`; 300,000 replicates of the same invasion on one worker took
# 5.05 s in batches of 16,384 against 5.70 s in 4096 with `counts`, and at K = 50 100,000
# replicates 1.84 s against 2.10 s with `individual`: medians of 3 and single runs, one
# session; 65,536 was slower again).
BATCH_ENTRIES = 500_000
BATCH_REPLICATES = 1024
UNRECORDED_FACTOR = 4
UNRECORDED_REPLICATES = 16_384


def default_batch_size(n_replicates: int, slots: int, held: int = 1, *,
                       records: bool = True) -> int:
    """Replicates per batch: about ``BATCH_ENTRIES`` entries when each replicate holds
    ``held`` (``sim.engines.held_per_replicate``: its individuals, or its classes), at
    most ``BATCH_REPLICATES`` replicates; without trajectories (``records=False``)
    ``UNRECORDED_FACTOR`` times the entries and at most ``UNRECORDED_REPLICATES``; and
    small enough that every slot gets about four batches."""
    if records:
        cap = min(BATCH_REPLICATES, BATCH_ENTRIES // max(held, 1))
    else:
        cap = min(UNRECORDED_REPLICATES, UNRECORDED_FACTOR * BATCH_ENTRIES // max(held, 1))
    return max(1, min(max(cap, 1), math.ceil(n_replicates / (4 * max(slots, 1)))))


def plan_batches(missing: dict[int, list[range]], batch_size: int) -> list[Batch]:
    """Cut each point's runs of missing replicates into batches of at most ``batch_size``."""
    return list(iter_batches(missing, batch_size))


def iter_batches(missing: dict[int, list[range]], batch_size: int, *, taper: int = 0):
    """``plan_batches`` one batch at a time: planning a billion replicates holds one batch.

    With ``taper`` (the number of workers), the last batches get smaller: none is larger
    than the replicates left divided by ``2 * taper`` (guided self-scheduling, Polychronopoulos
    & Kuck 1987), down to ``batch_size // TAPER_FLOOR``, so that the workers finish close
    together instead of all but one waiting for the last full batch. Results do not depend
    on how replicates are cut into batches.
    """
    if batch_size < 1:
        raise ValueError(f"batch_size must be >= 1; got {batch_size}")
    return _batches(missing, batch_size, taper)


TAPER_FLOOR = 16  # the smallest tapered batch is batch_size // TAPER_FLOOR (at least 1)


def _batches(missing: dict[int, list[range]], batch_size: int, taper: int):
    left = sum(len(run) for runs in missing.values() for run in runs) if taper > 0 else 0
    smallest = max(1, batch_size // TAPER_FLOOR)
    for point in sorted(missing):
        for run in missing[point]:
            first = run.start
            while first < run.stop:
                size = (batch_size if taper < 1 else
                        min(batch_size, max(smallest, math.ceil(left / (2 * taper)))))
                last = min(first + size, run.stop) - 1
                yield Batch(point, first, last)
                left -= last - first + 1
                first = last + 1


def reduce_trajectory(result: ReplicateResult, mode: str) -> ReplicateResult:
    """Keep the trajectory by age, sum it over ages (``by-allele``), or drop it (``none``)."""
    if mode == "by-age":
        return result
    if mode == "by-allele":
        return replace(result, trajectory=result.trajectory.sum(axis=2, dtype=np.uint64)
                       .astype(np.uint32))
    if mode == "none":
        from ..replicates import empty_records

        steps, trajectory = empty_records(result.trajectory.shape[1:])
        return replace(result, record_steps=steps, trajectory=trajectory)
    raise ValueError(f"trajectory must be 'by-age', 'by-allele' or 'none'; got {mode!r}")


def run_batch(point: SweepPoint, first: int, last: int, seed: int) -> list[ReplicateResult]:
    """Run replicates ``first`` to ``last`` of one point; trajectories kept as the config says.

    This is what a worker runs: a top-level function (spawned processes and
    dask workers import it by name) around ``replicates.run_replicates``.
    """
    return run_kept_replicates(point, range(first, last + 1), seed, point.config.experiment.trajectory)


def run_kept_replicates(point: SweepPoint | PointRun, replicates, seed: int,
                        mode: str) -> list[ReplicateResult]:
    """``replicates.run_replicates`` with the census records kept as the trajectory ``mode``
    says (``reduce_trajectory``). With ``"none"`` none is made: recording them, splitting
    them by replicate and then dropping them took a fifth of the ``counts`` engine's CPU time
    and a seventh of the ``individual`` engine's (K = 500 invasion: the median of 10
    alternating rounds in worker processes)."""
    from ..replicates import run_replicates

    if mode == "none":
        return run_replicates(point, replicates, seed, records=False)
    return [reduce_trajectory(r, mode) for r in run_replicates(point, replicates, seed)]


@dataclass(frozen=True)
class Job:
    """One batch as a pool runs it: the batch, its point's ``PointRun`` (plain data: the
    worker imports no config schema) and the root seed; optionally a ``ShardTarget`` (then
    a worker that reaches it saves its batch as a shard and sends back only a
    ``BatchOutput`` without results)."""

    batch: Batch
    point: PointRun
    seed: int
    target: object = None  # sim.store.ShardTarget


def jobs_of(tasks):
    """``Job``s for (batch, sweep point, seed) tasks (what ``pool.run`` takes): each point's
    ``PointRun`` is worked out once, when its first batch comes."""
    from ..point_run import PointRun

    runs: dict[int, tuple] = {}
    for batch, point, seed in tasks:
        known = runs.get(point.index)
        if known is None or known[0] is not point:
            known = runs[point.index] = (point, PointRun.of(point))
        yield Job(batch, known[1], seed)


@dataclass(frozen=True)
class BatchClock:
    """When and how long a batch ran, as its worker saw it.

    ``started``/``finished`` are ``time.perf_counter()`` readings (CLOCK_MONOTONIC on
    Linux: one clock for every process of the machine); ``cpu`` is the process CPU time
    the batch took (``time.process_time``: not stretched by other programs' load), of
    which ``save_cpu`` building and writing its shard, and ``write_cpu`` writing the built
    file (what the writer does for a worker that cannot see its disk); ``process_cpu`` the
    worker process's CPU time before its first batch (interpreter start-up and imports)."""

    pid: int
    started: float
    finished: float
    cpu: float
    save_cpu: float
    process_cpu: float
    write_cpu: float = 0.0


@dataclass
class BatchOutput:
    """What a pool yields for a finished ``Job``: the batch saved by the worker as ``shard``
    (with its ``rows`` when they are small, ``SEND_ROWS_BYTES``, so that the writer merges
    them without reading the shard back), or, from a worker that cannot reach the writer's
    disk, the ``rows`` and their shard file's bytes (``image``) for the writer to write; each
    outcome's count, and the batch's ``BatchClock``. ``results`` are sent instead of rows
    for a job without a target."""

    results: list[ReplicateResult] | None
    shard: object  # sim.store.Shard, or None
    outcomes: Counter = field(default_factory=Counter)
    clock: BatchClock | None = None
    rows: object = None  # sim.store.ShardRows, or None
    image: bytes | None = None


_FIRST_BATCH_CPU: list[float] = []  # this process's CPU time when its first job started


def run_job(job: Job) -> BatchOutput:
    """Run one ``Job`` (what a worker process runs): the batch, saved as a shard if the job
    has a target this process can reach (the writer's disk), else sent back as rows (as
    results without a target)."""
    cpu0, wall0 = time.process_time(), time.perf_counter()
    if not _FIRST_BATCH_CPU:
        _FIRST_BATCH_CPU.append(cpu0)
    batch = job.batch
    results = run_kept_replicates(job.point, batch.replicates, job.seed, job.point.trajectory)
    outcomes = Counter(r.outcome for r in results)
    shard = rows = image = None
    if job.target is not None:  # the rows made here: the writer's work per replicate is a copy
        from ..store.shards import SEND_ROWS_BYTES, save_shard, shard_image, shard_rows

        rows, results = shard_rows(job.target, results), None
    cpu1 = time.process_time()  # saving, from here
    if rows is not None:  # the shard's file, built here: for a worker that cannot see the
        image = shard_image(job.target, rows)  # writer's disk, the writer writes only its bytes
    cpu2 = time.process_time()
    if image is not None and job.target.reachable():
        shard, image = save_shard(job.target, rows, image), None
        if rows.nbytes > SEND_ROWS_BYTES:
            rows = None
    cpu3 = time.process_time()
    clock = BatchClock(os.getpid(), wall0, time.perf_counter(), cpu3 - cpu0, cpu3 - cpu1,
                       _FIRST_BATCH_CPU[0], cpu3 - cpu2)
    return BatchOutput(results, shard, outcomes, clock, rows, image)
