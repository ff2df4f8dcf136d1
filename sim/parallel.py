"""Where batches of replicates run: in this process, in local worker processes, or on a dask cluster.

The unit of work is a ``Batch``: a contiguous run of replicate indices of one
sweep point, run by ``run_batch`` (a top-level function, so spawned processes
and dask workers can import it). Every pool yields ``(batch, results)`` as
batches finish, in whatever order they finish; the single writer in the
calling process stores them. Results do not depend on the pool, the number
of workers or the batching, because each replicate draws from its own stream
``SeedSequence(seed, spawn_key=(point, replicate))``.
"""

from __future__ import annotations

import json
import math
import multiprocessing
import os
import signal
import socket
import threading
import time
import uuid
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from .config import SweepPoint
from .runner import ReplicateResult, run_replicates

__all__ = [
    "Batch",
    "PoolError",
    "ClusterError",
    "plan_batches",
    "default_batch_size",
    "default_workers",
    "run_batch",
    "reduce_trajectory",
    "make_pool",
    "SerialPool",
    "ProcessPool",
    "DaskPool",
]

CLUSTER_INSTALL = "pip install 'broodline[cluster]'"


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
    if batch_size < 1:
        raise ValueError(f"batch_size must be >= 1; got {batch_size}")
    batches = []
    for point in sorted(missing):
        for run in missing[point]:
            for first in range(run.start, run.stop, batch_size):
                batches.append(Batch(point, first, min(first + batch_size, run.stop) - 1))
    return batches


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
    dask workers import it by name) around ``runner.run_replicates``.
    """
    mode = point.config.experiment.trajectory
    return [reduce_trajectory(r, mode) for r in run_replicates(point, range(first, last + 1), seed)]


# -- pools ---------------------------------------------------------------------------
# A pool's ``run(tasks)`` takes an iterator of (batch, point, seed) and yields
# (batch, results) as batches finish, keeping at most ``2 * slots`` batches in
# flight so that memory does not grow with the experiment. ``shutdown(cancel=)``
# ends it; with ``cancel`` running batches are abandoned (they re-run on resume).
class SerialPool:
    """Batches run one after another in this process."""

    slots = 1
    description = "1 process"

    def run(self, tasks):
        for batch, point, seed in tasks:
            yield batch, run_batch(point, batch.first, batch.last, seed)

    def shutdown(self, *, cancel: bool = False) -> None:
        pass


def _watch_parent(parent: int) -> None:
    while True:
        time.sleep(0.5)
        if os.getppid() != parent:  # the writer died (kill -9): do not run on as an orphan
            os._exit(1)


def _worker_init(parent: int) -> None:
    # Ctrl-C in a terminal reaches the whole process group; the writer alone handles it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_watch_parent, args=(parent,), daemon=True).start()


class ProcessPool:
    """Batches run in ``workers`` local processes (spawned: safe with mesa's start method)."""

    def __init__(self, workers: int):
        if workers < 1:
            raise ValueError(f"workers must be >= 1; got {workers}")
        self.slots = workers
        self.description = f"{workers} worker processes"
        self._executor = ProcessPoolExecutor(
            workers, mp_context=multiprocessing.get_context("spawn"),
            initializer=_worker_init, initargs=(os.getpid(),))

    def run(self, tasks):
        tasks = iter(tasks)
        pending = {}

        def submit_next() -> None:
            for batch, point, seed in tasks:
                pending[self._executor.submit(run_batch, point, batch.first, batch.last, seed)] = batch
                return

        for _ in range(2 * self.slots):
            submit_next()
        while pending:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in sorted(done, key=pending.get):
                batch = pending.pop(future)
                try:
                    results = future.result()
                except BrokenProcessPool:
                    raise PoolError(f"a worker process died while running point {batch.point}, "
                                    f"replicates {batch.first}-{batch.last} (out of memory?)") from None
                yield batch, results
                submit_next()

    def shutdown(self, *, cancel: bool = False) -> None:
        if cancel:
            terminate = getattr(self._executor, "terminate_workers", None)  # Python 3.14+
            if terminate is not None:
                terminate()
            else:  # older Pythons have no public way to stop a running worker
                for process in list((getattr(self._executor, "_processes", None) or {}).values()):
                    process.terminate()
        self._executor.shutdown(wait=not cancel, cancel_futures=cancel)


def _scheduler_address(address: str) -> str:
    """An address as given, or the one in a scheduler file (``dask scheduler --scheduler-file``)."""
    path = Path(address)
    if not address.endswith(".json") or not path.is_file():
        return address
    try:
        return json.loads(path.read_text())["address"]
    except (OSError, ValueError, KeyError, TypeError) as err:
        raise ClusterError(f"--cluster: cannot read a scheduler address from {address!r}: "
                           f"{type(err).__name__}: {err}") from None


def _check_reachable(address: str, timeout: float) -> None:
    """Refuse a malformed or unreachable TCP scheduler address quickly, with a plain message."""
    from distributed.comm import parse_address, parse_host_port

    try:
        scheme, location = parse_address(address)
    except (ValueError, TypeError) as err:
        raise ClusterError(f"--cluster: {address!r} is not a dask scheduler address "
                           f"(e.g. tcp://HOST:8786): {err}") from None
    if scheme not in ("tcp", "tls"):
        return
    try:
        host, port = parse_host_port(location, default_port=8786)
    except ValueError as err:
        raise ClusterError(f"--cluster: {address!r} is not a dask scheduler address "
                           f"(e.g. tcp://HOST:8786): {err}") from None
    try:
        socket.create_connection((host, port), timeout=timeout).close()
    except OSError as err:
        reason = getattr(err, "strerror", None) or str(err) or type(err).__name__
        raise ClusterError(f"cannot reach the dask scheduler at {address!r}: {reason}. "
                           "Is it running, and is the address (host and port) right?") from None


class DaskPool:
    """Batches farmed out to an existing dask.distributed scheduler and its workers.

    Each batch is one task with its own key, so no two batches are merged. A
    worker lost mid-batch has its task rerun elsewhere by the scheduler (up
    to its ``allowed-failures``); the result still comes back once, so no
    row is written twice.
    """

    def __init__(self, address: str, *, timeout: float = 10.0):
        try:
            from distributed import Client
        except ImportError:
            raise ClusterError(f"--cluster needs dask.distributed, an optional extra: "
                               f"{CLUSTER_INSTALL}") from None
        address = _scheduler_address(address)
        _check_reachable(address, timeout)
        try:
            self.client = Client(address, timeout=timeout, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as err:
            raise ClusterError(f"cannot reach the dask scheduler at {address!r}: {err}") from None
        self.address = address
        self.description = f"dask scheduler {address}"
        self._run_id = uuid.uuid4().hex[:8]
        self._futures = {}

    @property
    def slots(self) -> int:
        """Threads of the workers connected now (at least 1: workers may join later)."""
        return max(1, sum(self.client.nthreads().values()))

    def run(self, tasks):
        from distributed import as_completed
        from distributed.client import FutureCancelledError
        from distributed.scheduler import KilledWorker

        tasks = iter(tasks)
        queue = as_completed(loop=self.client.loop)
        futures = self._futures

        def submit_next() -> None:
            for batch, point, seed in tasks:
                key = f"broodline-{self._run_id}-p{batch.point}-r{batch.first}-{batch.last}"
                future = self.client.submit(run_batch, point, batch.first, batch.last, seed,
                                            key=key, pure=False)
                futures[future.key] = (future, batch)
                queue.add(future)
                return

        slots = self.slots
        for _ in range(2 * slots):
            submit_next()
        for n, future in enumerate(queue, 1):
            _, batch = futures.pop(future.key)
            where = f"point {batch.point}, replicates {batch.first}-{batch.last}"
            try:
                results = future.result()
            except KilledWorker as err:
                raise ClusterError(f"the cluster lost {where} with its worker too many times "
                                   f"({err}); finished batches are saved") from None
            except FutureCancelledError:
                raise ClusterError(f"the cluster cancelled {where}; finished batches are saved") from None
            except ImportError as err:
                raise ClusterError(f"a dask worker cannot import broodline ({err}); install "
                                   "broodline on every worker") from None
            except RuntimeError as err:
                if "deserializ" not in str(err):
                    raise
                raise ClusterError(
                    "the dask scheduler cannot read broodline's tasks: install broodline (the "
                    "same version) where the scheduler and the workers run, then resume") from None
            future.release()
            yield batch, results
            if n % 16 == 0:
                slots = self.slots
            while len(futures) < 2 * slots:
                before = len(futures)
                submit_next()
                if len(futures) == before:
                    break

    def shutdown(self, *, cancel: bool = False) -> None:
        try:
            if cancel and self._futures:
                self.client.cancel([f for f, _ in self._futures.values()])
        finally:
            self._futures.clear()
            self.client.close()


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
