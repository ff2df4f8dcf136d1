"""The experiment loop: every replicate of every sweep point, streamed to one results file.

``run_experiment`` is one loop in one process, the only writer: it asks the
``ResultsWriter`` which replicates are missing, cuts them into batches, hands
them to a pool (``sim.parallel``) and records each batch as it comes back:
local workers save their batch as a durable shard themselves and the writer
only indexes it; a dask worker's results are saved by the writer
(DEVELOPERS.md, "Long runs: batches, workers, the results file").
"""

from __future__ import annotations

import logging
import threading
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from tqdm import tqdm

from .config import Config
from .describe import preflight
from .outcomes import fixed_outcome, summary_of
from .parallel import BatchClock, Job, default_batch_size, iter_batches, make_pool
from .point_run import PointRun
from .store import ResultsWriter, software_version
from .store.layout import swept_column
from .vocabulary import DECIDED

log = logging.getLogger(__name__)

__all__ = ["ExperimentInterrupted", "RunTimings", "request_stop", "run_experiment", "refuse_locate_file"]


_STOP = threading.Event()


def request_stop() -> None:
    """Ask a running ``run_experiment`` to stop after saving its finished batches.

    For signal handlers: besides raising KeyboardInterrupt (which Python may
    swallow if it lands in a finalizer), they set this flag, which the run
    checks after every batch.
    """
    _STOP.set()


class ExperimentInterrupted(KeyboardInterrupt):
    """A run stopped by Ctrl-C (or SIGTERM) after saving its finished batches."""

    def __init__(self, path, done: int, total: int):
        super().__init__(f"{done} of {total} replicates are saved in {str(path)!r}")
        self.path, self.done, self.total = Path(path), done, total


class _Progress:
    """One bar for the whole experiment, and a log line as each sweep point completes."""

    def __init__(self, writer: ResultsWriter, points, *, show: bool):
        self.points = points
        self.fixed_name = fixed_outcome(writer.config)
        self.n_reps = writer.replicates
        self.done = np.zeros(len(points), np.int64)
        self.fixed = np.zeros(len(points), np.int64)
        self.outcomes = Counter()  # (point, outcome) -> replicates: the summary, without a re-read
        if writer.done:  # resuming: count what the shards already hold
            from .store.readers import count_outcomes

            so_far = count_outcomes(writer.path)
            np.add.at(self.done, so_far["point"].to_numpy(), so_far["count"].to_numpy())
            won = so_far[so_far["outcome"] == self.fixed_name]
            np.add.at(self.fixed, won["point"].to_numpy(), won["count"].to_numpy())
            self.outcomes.update({(int(p), o): int(n) for p, o, n in so_far.itertuples(index=False)})
        self.bar = tqdm(total=writer.expected, initial=int(self.done.sum()), disable=not show,
                        unit="rep", desc=writer.config.experiment.name, dynamic_ncols=True)
        self.bar.set_postfix({self.fixed_name: int(self.fixed.sum())}, refresh=False)

    def update(self, batch, outcomes) -> None:
        p = batch.point
        self.done[p] += len(batch)
        self.fixed[p] += outcomes.get(self.fixed_name, 0)
        self.outcomes.update({(p, o): n for o, n in outcomes.items()})
        self.bar.update(len(batch))
        self.bar.set_postfix({self.fixed_name: int(self.fixed.sum())}, refresh=False)
        if self.done[p] == self.n_reps:
            values = self.points[p].values
            where = f" ({', '.join(f'{k} = {v!r}' for k, v in values.items())})" if values else ""
            log.info("point %d%s done: %d replicates, %s", p, where, self.n_reps, self._fixed_words(p))

    def _fixed_words(self, p: int) -> str:
        """A finished point's fixed count and fraction, over the resolved replicates as in the
        summary's ``fixed_fraction`` (``sim.outcomes.summary_of``)."""
        resolved = sum(self.outcomes[p, o] for o in DECIDED)
        fixed = f"{self.fixed_name} {self.fixed[p]}"
        if resolved == 0:
            return f"{fixed}, none resolved"
        if resolved < self.n_reps:
            return f"{fixed} of {resolved} resolved ({self.fixed[p] / resolved:.3f})"
        return f"{fixed} ({self.fixed[p] / resolved:.3f})"

    def close(self) -> None:
        self.bar.close()


def _saving_errors(writer: ResultsWriter, outputs):
    """The pool's outputs; an OSError from a worker saving its shard (a full disk) is raised
    as the writer's ``ResultsError``, which says what is saved and how to go on."""
    try:
        yield from outputs
    except OSError as err:
        raise writer.save_error(err) from None


@dataclass
class RunTimings:
    """Where the time of one ``run_experiment`` went, for ``broodline bench --scaling``.

    Moments are ``time.perf_counter()`` readings in the writing process (the same
    clock as the workers' ``BatchClock``): ``started`` (the call), ``pool_started``,
    ``checked`` (config and sweep checked), ``file_ready`` (header written, lock
    held), ``finished_batches`` (the last batch recorded), ``finished`` (merged,
    returned). ``replicates`` were run now, in batches of ``batch_size``;
    ``writer_s`` / ``writer_cpu_s`` are the wall and CPU seconds this process spent
    recording batches (saving them, where the workers do not); ``merge_run_s`` /
    ``merge_run_cpu_s`` merging shards while waiting for workers during the run;
    ``merge_s`` / ``merge_cpu_s`` the final merge's (CPU: the writing thread's);
    ``compress_cpu_s`` the CPU of the merge's threads that compress the file's chunks.
    ``batches`` holds every batch's ``BatchClock``; ``workers`` each started worker's
    (pid, ready at, start-up CPU).
    """

    started: float = 0.0
    pool_started: float = 0.0
    checked: float = 0.0
    file_ready: float = 0.0
    finished_batches: float = 0.0
    finished: float = 0.0
    writer_s: float = 0.0
    writer_cpu_s: float = 0.0
    merge_s: float = 0.0
    merge_cpu_s: float = 0.0
    merge_run_s: float = 0.0
    merge_run_cpu_s: float = 0.0
    compress_cpu_s: float = 0.0
    replicates: int = 0
    batch_size: int = 0
    batches: list[BatchClock] = field(default_factory=list)
    workers: list[tuple[int, float, float]] = field(default_factory=list)


def _swept_values(points) -> dict[int, dict]:
    """Each point's swept values as the results file's /points holds them (``swept_column``)."""
    values: dict[int, dict] = {p.index: {} for p in points}
    for key in points[0].values:
        given = [p.values[key] for p in points]
        column = swept_column(given)
        for p, value in zip(points, given if column is None else column.tolist(), strict=True):
            values[p.index][key] = value
    return values


def refuse_locate_file(out, config_path=None) -> None:
    """Refuse to resume, as an experiment, a file that ``broodline locate`` wrote (its
    stages are sweeps of their own): the message gives the command that finishes it, with
    ``config_path`` (default ``CONFIG``)."""
    from .store import ResultsError, resumable_attrs

    if not Path(out).is_file():
        return
    try:
        attrs = resumable_attrs(out)
    except ResultsError:
        return  # not a results file of this format: the writer says why
    if "locate" in attrs:
        from .status import resume_command

        raise ResultsError(f"cannot resume {str(out)!r} with run: broodline locate wrote it; "
                           f"finish it with\n  {resume_command(out, attrs, config=config_path)}")


def run_experiment(config: Config, out: str | Path, *, overwrite: bool = False, resume: bool = False,
                   workers: int = 1, in_process: bool = True, cluster: str | None = None,
                   progress: bool = True, batch_size: int | None = None, budget: bool = True,
                   timings: RunTimings | None = None, as_frame: bool = True):
    """Run every replicate of every sweep point, streaming results to an HDF5 file.

    Batches of replicates run in this process (``workers=1``), in local
    worker processes, or on a dask cluster (``cluster``, a scheduler
    address); this process alone writes the results. Each finished batch is
    saved durably at once, so a run killed at any moment keeps what
    finished, and ``resume=True`` runs only what is missing. The datasets
    do not depend on ``workers``, ``cluster``, ``batch_size`` or resuming.

    Parameters
    ----------
    config : Config
    out : path-like
        The results file (see ``sim.store`` for its layout).
    overwrite, resume : bool
        Replace an existing file, or finish one started with the same config
        (with ``resume`` and no file yet, the run starts from the beginning).
    workers : int
        Local processes; ignored with ``cluster``.
    in_process : bool
        With ``workers=1``: run the batches in this process (default), or in one worker
        process (``False``; ``broodline run`` on a machine with more than one core), whose
        engines load while this process checks the config and writes the file's header.
    cluster : str, optional
        Address of a running dask.distributed scheduler, e.g. ``tcp://host:8786``.
    progress : bool
        Show a progress bar.
    batch_size : int, optional
        Replicates per batch (default: ``parallel.default_batch_size``: about 5 x 10^5
        individuals at the starting census, or classes with ``counts``, at most 1024
        replicates; without trajectories four times the entries and at most 16,384
        replicates; and about four batches per worker).
    budget : bool
        Refuse an experiment past ``sim.describe.BUDGET`` individual-seasons
        (``False`` lifts it).
    timings : RunTimings, optional
        Filled with where the time went (``broodline bench --scaling``).
    as_frame : bool
        Return the summary as a pandas DataFrame (default), or as a plain
        ``sim.outcomes.Summary`` (the command line: pandas is then never imported).

    Returns
    -------
    pandas.DataFrame or Summary
        The per-point summary (see ``sim.outcomes.summary_of``).

    Raises
    ------
    ExperimentInterrupted
        On Ctrl-C: finished batches are saved; resume to finish.
    """
    clock = timings if timings is not None else RunTimings()
    clock.started = time.perf_counter()
    _STOP.clear()
    # first, so that worker processes start (and import) while the config is checked and the
    # header written; a bad cluster address still fails before any file
    pool = make_pool(workers=workers, cluster=cluster, in_process=in_process)
    clock.pool_started = time.perf_counter()
    try:
        points = preflight(config, budget=budget)
        if resume:
            refuse_locate_file(out)
        clock.checked = time.perf_counter()
        writer = ResultsWriter(out, config, points, overwrite=overwrite, resume=resume)
        clock.file_ready = time.perf_counter()
    except BaseException:
        pool.shutdown(cancel=True)
        raise
    seed = config.experiment.seed
    tracker = None
    try:
        # said once the file is accepted (after any refusal), not before
        log.info("running %s on %s", out, pool.description)
        if resume and writer.fresh:
            log.info("nothing to resume at %s: starting", out)
        elif writer.complete:
            log.info("%s is already complete: nothing to run", out)
        elif writer.done:
            log.info("resuming %s: %d of %d replicates already saved", out, writer.done, writer.expected)
            if writer.resumed_from_version != software_version():
                log.warning("%s was started by broodline %s and is finished by %s: replicates run now "
                            "may differ from those %s would have drawn from the same seeds (each is "
                            "still a valid draw; one version gives the same datasets however the run "
                            "is split)", out, writer.resumed_from_version, software_version(),
                            writer.resumed_from_version)
        tracker = _Progress(writer, points, show=progress)
        # each point's life cycle and starting census, worked out here once: a worker is sent
        # plain data (no config schema to import, no equilibrium to solve)
        runs = {p.index: PointRun.of(p) for p in points}
        held = max(run.held for run in runs.values())
        size = batch_size or default_batch_size(writer.expected - writer.done, pool.slots, held,
                                                records=config.experiment.trajectory != "none")
        clock.batch_size = size
        # workers that see the writer's disk save their own shards (the writer indexes them);
        # the others (a dask worker elsewhere) send their rows, which the writer saves. The
        # default batches taper at the end, so that the workers finish together; a size the
        # caller chose is kept as it is.
        taper = pool.slots if pool.slots > 1 and not batch_size else 0
        batches = iter_batches(writer.missing(), size, taper=taper)
        jobs = (Job(batch, runs[batch.point], seed, writer.shard_target(batch.point)) for batch in batches)
        def merge_one() -> bool:  # while the writer waits for workers: merge a shard, if one is next
            wall, cpu = time.perf_counter(), time.thread_time()
            merged = writer.merge_ready(limit=1)
            clock.merge_run_s += time.perf_counter() - wall
            clock.merge_run_cpu_s += time.thread_time() - cpu
            return merged

        for batch, output in _saving_errors(writer, pool.run_jobs(jobs, idle=merge_one)):
            wall, cpu = time.perf_counter(), time.thread_time()
            if output.shard is not None:
                writer.add_shard(output.shard, output.rows)
            elif output.rows is not None:  # (a worker that cannot reach this disk)
                writer.write_rows(output.rows, output.image)
            else:
                writer.write(output.results)
            tracker.update(batch, output.outcomes)
            clock.writer_s += time.perf_counter() - wall
            clock.writer_cpu_s += time.thread_time() - cpu
            clock.replicates += len(batch)
            if timings is not None:
                clock.batches.append(output.clock)
            if _STOP.is_set():
                raise KeyboardInterrupt
        clock.finished_batches = wall = time.perf_counter()
        if timings is not None and hasattr(pool, "workers_ready"):
            timings.workers = pool.workers_ready()
        pool.shutdown(wait=False)  # idle workers exit while the last shards are merged
        cpu = time.thread_time()
        writer.finalize()
        clock.merge_s, clock.merge_cpu_s = time.perf_counter() - wall, time.thread_time() - cpu
        clock.compress_cpu_s = writer.compress_cpu_s
    except BaseException as err:
        try:
            pool.shutdown(cancel=True)
        except Exception as cleanup:  # keep the error that stopped the run, not this one
            log.warning("stopping the workers failed: %s", cleanup)
        writer.release()
        if isinstance(err, KeyboardInterrupt) and not isinstance(err, ExperimentInterrupted):
            raise ExperimentInterrupted(out, writer.done, writer.expected) from None
        raise
    finally:
        if tracker is not None:
            tracker.close()
    pool.shutdown()
    # from the outcomes counted as batches came: no pass over the file, and no pandas (whose
    # import, 0.3 s of CPU, would take a core from the workers)
    summary = summary_of(tracker.outcomes, _swept_values(points), fixed=fixed_outcome(config))
    clock.finished = time.perf_counter()
    return summary.frame() if as_frame else summary
