"""Local pools: batches run in this process, or in spawned worker processes.

A pool's ``run(tasks)`` takes an iterator of (batch, point, seed) and yields
(batch, results) as batches finish, keeping at most ``2 * slots`` batches in
flight so that memory does not grow with the experiment. ``shutdown(cancel=)``
ends it; with ``cancel`` running batches are abandoned (they re-run on resume).
"""

from __future__ import annotations

import multiprocessing
import os
import signal
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from .work import PoolError, run_batch

__all__ = ["SerialPool", "ProcessPool"]


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
