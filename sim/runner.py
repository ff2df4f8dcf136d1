"""Replicates and experiments: seeding, stop rules, outcomes, and streaming results to disk."""

from __future__ import annotations

import logging
import threading
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from .config import Config, SweepPoint
from .describe import preflight
from .lifecycle import initial_census
from .model import BroodModel
from .store import ResultsWriter, read_outcomes, read_points, software_version

log = logging.getLogger(__name__)

__all__ = [
    "OUTCOMES",
    "ExperimentInterrupted",
    "request_stop",
    "fixed_outcome",
    "ReplicateResult",
    "replicate_rng",
    "classify",
    "run_replicate",
    "run_replicates",
    "run_experiment",
    "summarize",
]

OUTCOMES = ("mutant-fixed", "mutant-lost", "fixed", "extinct", "undecided", "capped")


@dataclass
class ReplicateResult:
    """What one replicate left: its outcome and its recorded census trajectory."""

    point: int
    replicate: int
    seed: int
    outcome: str
    winner: int
    steps: int
    fixation_step: int
    final_census: int
    record_steps: np.ndarray  # (n_records,)
    trajectory: np.ndarray  # (n_records, n_alleles, n_ages) uint32


def replicate_rng(seed: int, point: int, replicate: int) -> np.random.Generator:
    """The replicate's own stream: ``SeedSequence(seed, spawn_key=(point, replicate))``.

    Keyed, not spawned, so any replicate can be re-run alone, on any worker,
    in any order, with the same result. ``sim.streams.keyed_generators`` builds
    the same generators for a whole batch at once.
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(point, replicate)))


def classify(totals: np.ndarray, config: Config) -> tuple[str, int]:
    """The state of a census given as counts by allele: (outcome so far, winner index).

    With ``[invasion]``: mutant-fixed when only the mutant is left, mutant-lost
    when the mutant is gone; otherwise ``fixed`` when one allele is left.
    Extinct when no one is left; undecided while several alleles remain.
    """
    present = np.flatnonzero(totals)
    if present.size == 0:
        return "extinct", -1
    winner = int(present[0]) if present.size == 1 else -1
    if config.invasion is not None:
        mutant = config.allele_index(config.invasion.mutant)
        if totals[mutant] == 0:
            return "mutant-lost", winner
        if present.size == 1:
            return "mutant-fixed", winner
        return "undecided", -1
    return ("fixed", winner) if present.size == 1 else ("undecided", -1)


def run_replicate(point: SweepPoint, replicate: int, seed: int) -> ReplicateResult:
    """Run one replicate of one sweep point to its stop rule."""
    config = point.config
    exp = config.experiment
    model = BroodModel(config, rng=replicate_rng(seed, point.index, replicate))
    census = model.census()
    steps, records = [0], [census]
    state, winner = classify(census.sum(axis=1), config)
    since = 0
    outcome = None
    while model.season < exp.max_steps:
        if state != "undecided" and (exp.stop == "fixation" or state == "extinct"):
            break
        model.step()
        census = model.census()
        total = int(census.sum())
        new_state, winner = classify(census.sum(axis=1), config)
        if new_state != state:
            state, since = new_state, model.season
        if total > exp.max_population:
            outcome = "capped"
            break
        if model.season % exp.record_every == 0:
            steps.append(model.season)
            records.append(census)
    if steps[-1] != model.season:
        steps.append(model.season)
        records.append(census)
    outcome = outcome or state
    return ReplicateResult(
        point=point.index,
        replicate=replicate,
        seed=seed,
        outcome=outcome,
        winner=winner if outcome in ("mutant-fixed", "mutant-lost", "fixed") else -1,
        steps=model.season,
        fixation_step=since if outcome in ("mutant-fixed", "mutant-lost", "fixed", "extinct") else -1,
        final_census=int(census.sum()),
        record_steps=np.asarray(steps, dtype=np.int32),
        trajectory=np.asarray(records, dtype=np.uint32),
    )


def run_replicates(point: SweepPoint, replicates, seed: int) -> list[ReplicateResult]:
    """Run a batch of replicates of one sweep point (the unit of work a worker takes).

    Each replicate uses its own keyed stream, so the results do not depend on
    how replicates are grouped into batches. Engines that hold replicates as
    an array dimension (``individual``, ``counts``) advance the batch together
    (``sim.batch.run_batch``); the result of each replicate is the one
    ``run_replicate`` gives.
    """
    from .batch import batchable, run_batch

    if batchable(point.config):
        return run_batch(point, replicates, seed)
    return [run_replicate(point, rep, seed) for rep in replicates]


def summarize(replicates: pd.DataFrame, points: pd.DataFrame | None = None) -> pd.DataFrame:
    """Per sweep point: replicates and the count of each outcome, plus the mutant-fixed fraction."""
    counts = pd.crosstab(replicates["point"], replicates["outcome"])
    for name in OUTCOMES:
        if name not in counts:
            counts[name] = 0
    table = pd.DataFrame({"replicates": counts.sum(axis=1)})
    for name in OUTCOMES:
        if counts[name].any() or name in ("mutant-fixed", "mutant-lost"):
            table[name] = counts[name]
    table["fixed_fraction"] = counts["mutant-fixed"] / table["replicates"]
    table = table.reset_index()
    if points is not None and points.shape[1] > 1:
        table = points.merge(table, on="point", how="right")
    return table


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


def fixed_outcome(config: Config) -> str:
    """The outcome counted as "fixed" in progress reports: the mutant's, with ``[invasion]``."""
    return "mutant-fixed" if config.invasion is not None else "fixed"


class _Progress:
    """One bar for the whole experiment, and a log line as each sweep point completes."""

    def __init__(self, writer: ResultsWriter, points, *, show: bool):
        self.points = points
        self.fixed_name = fixed_outcome(writer.config)
        self.n_reps = writer.replicates
        self.done = np.zeros(len(points), np.int64)
        self.fixed = np.zeros(len(points), np.int64)
        if writer.done:  # resuming: count what the shards already hold
            so_far = read_outcomes(writer.path)
            np.add.at(self.done, so_far["point"].to_numpy(), 1)
            np.add.at(self.fixed, so_far["point"].to_numpy(), so_far["outcome"].to_numpy() == self.fixed_name)
        self.bar = tqdm(total=writer.expected, initial=int(self.done.sum()), disable=not show,
                        unit="rep", desc=writer.config.experiment.name, dynamic_ncols=True)
        self.bar.set_postfix({self.fixed_name: int(self.fixed.sum())}, refresh=False)

    def update(self, batch, results) -> None:
        p = batch.point
        self.done[p] += len(results)
        self.fixed[p] += sum(r.outcome == self.fixed_name for r in results)
        self.bar.update(len(results))
        self.bar.set_postfix({self.fixed_name: int(self.fixed.sum())}, refresh=False)
        if self.done[p] == self.n_reps:
            values = self.points[p].values
            where = f" ({', '.join(f'{k} = {v!r}' for k, v in values.items())})" if values else ""
            log.info("point %d%s done: %d replicates, %s %d (%.3f)", p, where, self.n_reps,
                     self.fixed_name, self.fixed[p], self.fixed[p] / self.n_reps)

    def close(self) -> None:
        self.bar.close()


def run_experiment(config: Config, out: str | Path, *, overwrite: bool = False, resume: bool = False,
                   workers: int = 1, cluster: str | None = None, progress: bool = True,
                   batch_size: int | None = None) -> pd.DataFrame:
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
        Replace an existing file, or finish one started with the same config.
    workers : int
        Local processes; ignored with ``cluster``.
    cluster : str, optional
        Address of a running dask.distributed scheduler, e.g. ``tcp://host:8786``.
    progress : bool
        Show a progress bar.
    batch_size : int, optional
        Replicates per batch (default: about 10^5 individuals at the starting census,
        at most 1024, and about four batches per worker).

    Returns
    -------
    DataFrame
        The per-point summary (see ``summarize``).

    Raises
    ------
    ExperimentInterrupted
        On Ctrl-C: finished batches are saved; resume to finish.
    """
    from .parallel import default_batch_size, make_pool, plan_batches

    points = preflight(config)
    seed = config.experiment.seed
    _STOP.clear()
    pool = make_pool(workers=workers, cluster=cluster)  # a bad cluster address fails before any file
    try:
        writer = ResultsWriter(out, config, points, overwrite=overwrite, resume=resume)
    except BaseException:
        pool.shutdown(cancel=True)
        raise
    tracker = None
    try:
        if writer.complete:
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
        census = max(int(initial_census(p.config).sum()) for p in points)
        size = batch_size or default_batch_size(writer.expected - writer.done, pool.slots, census)
        tasks = ((batch, points[batch.point], seed) for batch in plan_batches(writer.missing(), size))
        for batch, results in pool.run(tasks):
            writer.write(results)
            tracker.update(batch, results)
            if _STOP.is_set():
                raise KeyboardInterrupt
        writer.finalize()
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
    return summarize(read_outcomes(out), read_points(out))
