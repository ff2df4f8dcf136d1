"""The dask pool: batches farmed out to a running dask.distributed scheduler (an optional extra)."""

from __future__ import annotations

import json
import logging
import socket
import threading
import time
import uuid
from pathlib import Path

from .work import ClusterError, jobs_of, run_job

__all__ = ["DaskPool", "CLUSTER_INSTALL"]

CLUSTER_INSTALL = "pip install 'broodline[cluster]'"
# Seconds without a single connected worker, while batches wait, before the run says so (and
# how often that is checked). The scheduler keeps the batches and hands them to workers that
# join later, so the run waits rather than fails.
NO_WORKERS_WARNING_AFTER = 60.0
NO_WORKERS_CHECK_EVERY = 5.0

log = logging.getLogger(__name__)


def _scheduler_address(address: str) -> str:
    """An address as given, or the one in a scheduler file (``dask scheduler --scheduler-file``)."""
    path = Path(address)
    if not address.endswith(".json"):
        return address
    if not path.is_file():
        raise ClusterError(f"cluster: scheduler file {address!r} not found (an address is "
                           "tcp://HOST:PORT; a scheduler file is the .json `dask scheduler "
                           "--scheduler-file` writes)")
    try:
        return json.loads(path.read_text())["address"]
    except (OSError, ValueError, KeyError, TypeError) as err:
        raise ClusterError(f"cluster: cannot read a scheduler address from {address!r}: "
                           f"{type(err).__name__}: {err}") from None


def _check_reachable(address: str, timeout: float) -> None:
    """Refuse a malformed or unreachable TCP scheduler address quickly, with a plain message."""
    from distributed.comm import parse_address, parse_host_port

    try:
        scheme, location = parse_address(address)
    except (ValueError, TypeError) as err:
        raise ClusterError(f"cluster: {address!r} is not a dask scheduler address "
                           f"(e.g. tcp://HOST:8786): {err}") from None
    if scheme == "inproc":
        return  # a scheduler in this very process (a LocalCluster(processes=False))
    if scheme not in ("tcp", "tls"):
        raise ClusterError(f"cluster: {address!r}: broodline reaches a dask scheduler over tcp:// "
                           f"(or tls://), not {scheme}://; give tcp://HOST:PORT or a scheduler file")
    try:
        host, port = parse_host_port(location, default_port=8786)
    except ValueError as err:
        raise ClusterError(f"cluster: {address!r} is not a dask scheduler address "
                           f"(e.g. tcp://HOST:8786): {err}") from None
    try:
        connection = socket.create_connection((host, port), timeout=timeout)
    except OSError as err:
        reason = getattr(err, "strerror", None) or str(err) or type(err).__name__
        raise ClusterError(f"cannot reach the dask scheduler at {address!r}: {reason}. "
                           "Is it running, and is the address (host and port) right?") from None
    with connection:
        if scheme == "tcp" and not _greets_like_dask(connection, timeout):
            raise ClusterError(f"{address!r} is not a dask scheduler: something listens there but "
                               f"did not greet as one within {timeout:g} s (a web server, another "
                               "program?); check the port")


def _greets_like_dask(connection, timeout: float) -> bool:
    """True if the peer speaks first, as a dask comm does: its handshake's frame header (two
    little-endian 64-bit counts, both small) within ``timeout`` seconds."""
    connection.settimeout(timeout)
    head = b""
    try:
        while len(head) < 16:
            chunk = connection.recv(16 - len(head))
            if not chunk:
                return False
            head += chunk
    except OSError:  # timed out, or reset
        return False
    first, second = int.from_bytes(head[:8], "little"), int.from_bytes(head[8:], "little")
    return 0 < first < 2**24 and second < 2**16


class DaskPool:
    """Batches farmed out to an existing dask.distributed scheduler and its workers.

    Each batch is one task with its own key, so no two batches are merged. A
    worker lost mid-batch has its task rerun elsewhere by the scheduler (up
    to its ``allowed-failures``); the result still comes back once, so no
    row is written twice. A worker that sees the writer's disk (a shared file
    system: ``ShardTarget.reachable``) saves its batch as a shard itself, as a
    local worker does; any other sends its results back to the writer.
    """

    def __init__(self, address: str, *, timeout: float = 10.0):
        try:
            from distributed import Client
        except ImportError:
            raise ClusterError(f"a dask cluster needs dask.distributed, an optional extra: "
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
        for batch, output in self.run_jobs(jobs_of(tasks)):
            yield batch, output.results

    def run_jobs(self, jobs, *, idle=None):
        from distributed import as_completed

        jobs = iter(jobs)
        queue = as_completed(loop=self.client.loop)
        futures = self._futures

        def submit_next() -> None:
            for job in jobs:
                batch = job.batch
                key = f"broodline-{self._run_id}-p{batch.point}-r{batch.first}-{batch.last}"
                future = self.client.submit(run_job, job, key=key, pure=False)
                futures[future.key] = (future, batch)
                queue.add(future)
                return

        slots = self.slots
        for _ in range(2 * slots):
            submit_next()
        watch = _WorkerWatch(self.client, self.address, lambda: bool(futures))
        try:
            yield from self._collect(queue, futures, submit_next, slots, idle)
        finally:
            watch.stop()

    def _collect(self, queue, futures, submit_next, slots, idle):
        from distributed.client import FutureCancelledError
        from distributed.scheduler import KilledWorker

        for n, future in enumerate(queue, 1):
            _, batch = futures.pop(future.key)
            where = f"point {batch.point}, replicates {batch.first}-{batch.last}"
            try:
                results = future.result()
            except KilledWorker as err:
                raise ClusterError(f"the cluster lost {where} with its worker too many times "
                                   f"({err}); finished batches are saved") from None
            except FutureCancelledError:
                raise ClusterError(f"the cluster cancelled {where} (did the scheduler stop?); finished "
                                   "batches are saved: finish with resume=True") from None
            except (OSError, TimeoutError) as err:  # distributed's CommClosedError is an OSError
                raise ClusterError(
                    f"lost the dask scheduler at {self.address!r} while waiting for {where} "
                    f"({type(err).__name__}); finished batches are saved: restart the scheduler "
                    "and its workers, then finish with resume=True") from None
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
            if idle is not None:
                idle()
            if n % 16 == 0:
                slots = self.slots
            while len(futures) < 2 * slots:
                before = len(futures)
                submit_next()
                if len(futures) == before:
                    break

    def shutdown(self, *, cancel: bool = False, wait: bool = True) -> None:
        if not (cancel or wait):  # the workers belong to the cluster: nothing to let go early
            return
        try:
            if cancel and self._futures:
                self.client.cancel([f for f, _ in self._futures.values()])
        finally:
            self._futures.clear()
            self.client.close()


class _WorkerWatch:
    """A background check that says, once per spell, when no worker has been connected for
    ``NO_WORKERS_WARNING_AFTER`` seconds while batches wait (and again when workers return)."""

    def __init__(self, client, address: str, waiting):
        self._client, self._address, self._waiting = client, address, waiting
        self._stopped = threading.Event()
        self._thread = threading.Thread(target=self._watch, name="broodline-worker-watch", daemon=True)
        self._thread.start()

    def _watch(self) -> None:
        idle_since, warned = None, False
        while not self._stopped.wait(NO_WORKERS_CHECK_EVERY):
            try:
                connected = len(self._client.nthreads())
            except Exception:  # the scheduler is gone: the main thread reports that
                return
            now = time.monotonic()
            if connected or not self._waiting():
                if warned and connected:
                    log.warning("dask workers are back (%d connected): the run goes on", connected)
                idle_since, warned = None, False
                continue
            idle_since = now if idle_since is None else idle_since
            if not warned and now - idle_since >= NO_WORKERS_WARNING_AFTER:
                warned = True
                log.warning(
                    "warning: no dask worker has been connected to %s for %.0f s; the run waits "
                    "for workers. Start workers for this scheduler, or stop with Ctrl-C: finished "
                    "batches are saved and `--resume` finishes the run", self._address,
                    now - idle_since)

    def stop(self) -> None:
        self._stopped.set()
        self._thread.join(timeout=2 * NO_WORKERS_CHECK_EVERY)
