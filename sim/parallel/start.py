"""How local worker processes start: how many, and from a fork server that has loaded the engines.

Worker processes are forked from a fork server (``multiprocessing``'s
``forkserver``; spawned where there is none, e.g. Windows) that has imported
the engines and set up numba once (``sim.parallel.warm``): a worker is ready
in milliseconds however many there are, instead of each importing numpy,
pydantic, h5py and numba for a second or more. The server is a fresh process,
not a fork of the caller (it inherits no threads or open files), and it
serves the calling process for its whole life, so later runs reuse it.
``start_soon`` starts it while the caller does other work
(``broodline run`` calls it before reading the config). This module imports
nothing heavy, so the command line can call it first.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
import time

from .signals import ignore_stop_signals

__all__ = ["default_workers", "separate_workers", "worker_context", "start_soon", "stop_fork_server",
           "worker_init"]

_PRELOAD = ["sim.parallel.warm"]


def default_workers() -> int:
    """The cores this process may use (a batch scheduler's CPU set, where it sets one)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        return os.cpu_count() or 1


def separate_workers(workers: int) -> bool:
    """Whether a local run of ``workers`` runs its batches in worker processes (the command
    line's choice): for more than one, and for one where this process may use another core
    (the worker's fork server then loads the engines while this process reads and checks the
    config, instead of after it); on a single core one worker is this process."""
    return workers > 1 or default_workers() > 1


def worker_context():
    """The ``multiprocessing`` context worker processes start from: a fork server that loads
    ``sim.parallel.warm`` before forking any worker, or spawn where there is no fork server."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(_PRELOAD)
    return context


def start_soon() -> None:
    """Start the fork server, which loads the engines while this process goes on (the first
    worker waits for it; without a fork server, nothing to do).

    Starting it takes about a millisecond (``ensure_running`` starts the process and does not
    wait for it to load), so it is called here, not from a thread: from a thread it waited
    for the interpreter while this process imported, and the server started 10 to 40 ms
    later (`broodline run` of one replicate on 2 workers, 10 alternating runs: median 0.529 s
    against 0.540 s).
    """
    context = worker_context()
    if context.get_start_method() != "forkserver":
        return
    from multiprocessing import forkserver

    try:
        forkserver.ensure_running()
    except OSError:  # (no socket or process here): the pool's first worker tries again and says why
        pass


def stop_fork_server() -> None:
    """Stop the fork server, if one is running, and wait for it: its workers' CPU time is then
    counted in this process's children (``broodline bench --scaling`` measures it so)."""
    from multiprocessing import forkserver

    stop = getattr(getattr(forkserver, "_forkserver", None), "_stop", None)  # private in CPython
    if stop is not None:
        stop()


def _watch_writer(writer) -> None:
    while True:
        time.sleep(0.5)
        if not writer.is_alive():  # the writer died (kill -9): do not run on as an orphan
            os._exit(1)


def worker_init() -> None:
    """A worker process's start: Ctrl-C and SIGTERM left to the writer, an exit when the writer
    dies, and what a batch needs loaded (already there in a fork server's worker)."""
    ignore_stop_signals()
    # the process that asked for this worker (the writer), whether it spawned it or a fork
    # server forked it (the server outlives the writer while its workers live)
    writer = multiprocessing.parent_process()
    if writer is not None:
        threading.Thread(target=_watch_writer, args=(writer,), daemon=True).start()
    from . import warm  # noqa: F401
