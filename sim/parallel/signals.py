"""Signals a worker process and its fork server leave to the writer.

Imports nothing heavy, so the fork server and a spawned worker set it first.
"""

import signal

__all__ = ["ignore_stop_signals"]


def ignore_stop_signals() -> None:
    """Leave Ctrl-C (SIGINT) and a batch scheduler's SIGTERM to the writer: both reach the whole
    process group, and a worker or fork server killed by one made the writer report a dead
    worker ("out of memory?") instead of a stopped run with its resume command. The writer
    stops its workers itself (SIGKILL: running batches are abandoned and re-run on resume),
    and a worker whose writer is gone exits on its own (``sim.parallel.start.worker_init``);
    the standard library's resource tracker ignores both signals likewise."""
    for stop in (signal.SIGINT, signal.SIGTERM):
        signal.signal(stop, signal.SIG_IGN)
