"""Where batches of replicates run: in this process, in local worker processes, or on a dask cluster.

``work`` holds the unit of work (``Batch``, ``Job``, ``run_job``); ``local``
the pools of this machine; ``cluster`` the dask pool. Every pool yields
``(batch, BatchOutput)`` as batches finish, in whatever order they finish.
Workers that share the writer's disk (local pools) save their batch as a
shard themselves and send back only its name and outcome counts; a dask
worker sends its results, which the single writer in the calling process
saves.
"""

from __future__ import annotations

from .cluster import CLUSTER_INSTALL, DaskPool
from .local import ProcessPool, SerialPool
from .work import (
    BATCH_INDIVIDUALS,
    Batch,
    BatchClock,
    BatchOutput,
    Job,
    ClusterError,
    PoolError,
    default_batch_size,
    default_workers,
    plan_batches,
    iter_batches,
    reduce_trajectory,
    run_batch,
    run_job,
)

__all__ = [
    "Batch",
    "PoolError",
    "ClusterError",
    "BATCH_INDIVIDUALS",
    "CLUSTER_INSTALL",
    "plan_batches",
    "iter_batches",
    "default_batch_size",
    "default_workers",
    "run_batch",
    "run_job",
    "Job",
    "BatchOutput",
    "BatchClock",
    "reduce_trajectory",
    "make_pool",
    "SerialPool",
    "ProcessPool",
    "DaskPool",
]


def make_pool(*, workers: int = 1, cluster: str | None = None):
    """The pool for a run: a dask cluster at ``cluster``, else ``workers`` local processes.

    ``cluster`` is a scheduler address (``tcp://HOST:8786``) or the JSON file
    that ``dask scheduler --scheduler-file FILE`` writes.
    """
    if cluster is not None:
        return DaskPool(cluster)
    if workers < 1:
        raise ValueError(f"workers must be >= 1; got {workers}")
    return SerialPool() if workers == 1 else ProcessPool(workers)
