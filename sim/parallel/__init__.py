"""Where batches of replicates run: in this process, in local worker processes, or on a dask cluster.

``work`` holds the unit of work (``Batch``, ``Job``, ``run_job``); ``local``
the pools of this machine; ``cluster`` the dask pool. Every pool yields
``(batch, BatchOutput)`` as batches finish, in whatever order they finish.
Workers that share the writer's disk (local pools) save their batch as a
shard themselves and send back only its name and outcome counts; a dask
worker sends its results, which the single writer in the calling process
saves.

``start`` says how local workers start (a fork server). Names are imported from their
modules when first used (PEP 562), so importing ``sim.parallel.start`` loads nothing else.
"""

from __future__ import annotations

from ..lazy import lazy_exports

_WHERE = {
    **dict.fromkeys(["CLUSTER_INSTALL", "DaskPool"], "cluster"),
    **dict.fromkeys(["ProcessPool", "SerialPool"], "local"),
    **dict.fromkeys(["default_workers", "start_soon"], "start"),
    **dict.fromkeys(["BATCH_ENTRIES", "BATCH_REPLICATES", "Batch", "BatchClock", "BatchOutput", "Job",
                     "ClusterError", "PoolError", "default_batch_size", "plan_batches", "iter_batches",
                     "reduce_trajectory", "run_batch", "run_job", "run_kept_replicates"], "work"),
}
__all__ = [*_WHERE, "make_pool"]
__getattr__, __dir__ = lazy_exports(__name__, _WHERE, globals())


def make_pool(*, workers: int = 1, cluster: str | None = None, in_process: bool = True):
    """The pool for a run: a dask cluster at ``cluster``, else ``workers`` local processes.

    ``cluster`` is a scheduler address (``tcp://HOST:8786``) or the JSON file
    that ``dask scheduler --scheduler-file FILE`` writes. One worker is this
    process unless ``in_process`` is False (then a worker process, as for more).
    """
    if cluster is not None:
        from .cluster import DaskPool

        return DaskPool(cluster)
    if workers < 1:
        raise ValueError(f"workers must be >= 1; got {workers}")
    from .local import ProcessPool, SerialPool

    return SerialPool() if workers == 1 and in_process else ProcessPool(workers)
