"""Local pools: batches run in this process, or in worker processes of this machine.

A pool's ``run_jobs(jobs)`` takes an iterator of ``Job`` and yields
(batch, BatchOutput) as batches finish, keeping at most ``2 * slots`` batches
in flight so that memory does not grow with the experiment; ``run(tasks)``
takes (batch, point, seed) and yields (batch, results). ``shutdown(cancel=)``
ends it; with ``cancel`` running batches are abandoned (they re-run on resume).
Their workers share the writer's disk, so they save their own shards.

Workers start as ``sim.parallel.start`` says (a fork server, or spawned).
"""

from __future__ import annotations

import os
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from .start import worker_context, worker_init
from .work import PoolError, jobs_of, run_job

__all__ = ["SerialPool", "ProcessPool"]


class SerialPool:
    """Batches run one after another in this process."""

    slots = 1
    description = "1 process"

    def run_jobs(self, jobs, *, idle=None):
        for job in jobs:
            yield job.batch, run_job(job)
            if idle is not None:
                idle()

    def run(self, tasks):
        return _results(self, tasks)

    def shutdown(self, *, cancel: bool = False, wait: bool = True) -> None:
        pass


def _results(pool, tasks):
    """``pool.run``: (batch, point, seed) in, (batch, results) out."""
    for batch, output in pool.run_jobs(jobs_of(tasks)):
        yield batch, output.results


def _ready() -> tuple[int, float, float]:
    """A started worker: its pid, when it was ready (perf_counter) and its CPU time so far
    (its own start-up: little for a fork of the fork server, the imports for a spawned one)."""
    return os.getpid(), time.perf_counter(), time.process_time()


class ProcessPool:
    """Batches run in ``workers`` local processes (forked from a fork server, or spawned).

    The processes are started at once (from a thread), not at the first batch: the fork
    server loads what a batch needs while the calling process checks the config and
    writes the file's header.
    """

    def __init__(self, workers: int):
        if workers < 1:
            raise ValueError(f"workers must be >= 1; got {workers}")
        self.slots = workers
        self.description = f"{workers} worker process{'es' if workers > 1 else ''}"
        self._executor = ProcessPoolExecutor(workers, mp_context=worker_context(),
                                             initializer=worker_init)
        self._exiting = []
        # each submission finding no idle worker starts one more process, up to ``workers``;
        # from a thread, as starting one may wait for the fork server to load the engines
        self._starting = []
        self._closing = threading.Event()
        self._starter = threading.Thread(target=self._start_workers, args=(workers,), daemon=True,
                                         name="start workers")
        self._starter.start()

    def _start_workers(self, workers: int) -> None:
        try:
            for _ in range(workers):
                if self._closing.is_set():
                    return
                self._starting.append(self._executor.submit(_ready))
        except RuntimeError:  # shut down before every worker started
            pass

    def _stop_starting(self) -> None:
        """Start no more workers from the background thread, and wait for one it is starting
        now: once this returns, every worker process is in the executor's list. (Stopping
        the workers listed while another was still starting left that one waiting forever
        for the queue lock of a stopped worker, and the interpreter's exit waiting for it.)"""
        self._closing.set()
        self._starter.join()

    def run(self, tasks):
        return _results(self, tasks)

    def workers_ready(self) -> list[tuple[int, float, float]]:
        """(pid, ready at, start-up CPU seconds) of the workers started so far (see ``_ready``)."""
        return [f.result() for f in self._starting if f.done() and not f.exception()]

    def run_jobs(self, jobs, *, idle=None):
        """Run ``Job``s, yielding (batch, BatchOutput) as they finish. ``idle()``, if given, is
        called whenever no batch is finished (work for the writer that must not delay a
        finished batch, e.g. merging one shard); it returns False when it has nothing to do."""
        jobs = iter(jobs)
        pending = {}

        def submit_next() -> None:
            for job in jobs:
                pending[self._executor.submit(run_job, job)] = job.batch
                return

        for _ in range(2 * self.slots):
            submit_next()
        while pending:
            done, _ = wait(pending, timeout=0, return_when=FIRST_COMPLETED)
            while not done and idle is not None and idle():
                done, _ = wait(pending, timeout=0, return_when=FIRST_COMPLETED)
            if not done:
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

    def shutdown(self, *, cancel: bool = False, wait: bool = True) -> None:
        """Stop the workers: with ``cancel`` at once (running batches are abandoned); else once
        they are idle, waiting for them to exit unless ``wait`` is False (call again to wait)."""
        self._stop_starting()
        if not cancel:
            # the processes, kept before shutdown(wait=False) forgets them, are joined when waiting
            self._exiting = self._exiting or list((getattr(self._executor, "_processes", None) or {}).values())
            self._executor.shutdown(wait=wait)
            if wait:
                for process in self._exiting:
                    process.join()
            return
        # SIGKILL: workers ignore SIGTERM, which a batch scheduler sends the whole process group
        # (sim.parallel.signals)
        kill = getattr(self._executor, "kill_workers", None)  # Python 3.14+
        if kill is not None:
            kill()
        else:  # older Pythons have no public way to stop a running worker
            for process in list((getattr(self._executor, "_processes", None) or {}).values()):
                process.kill()
        self._executor.shutdown(wait=False, cancel_futures=True)
