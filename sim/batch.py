"""Many replicates of one sweep point advanced together, with ``run_replicate``'s results.

Small populations spend their time in per-season overhead, not in
individuals; advancing a batch of replicates as one set of arrays shares that
overhead. Each replicate still draws only from its own stream
``SeedSequence(seed, spawn_key=(point, replicate))`` and consumes it exactly as
it does alone (the single-replicate engine is the batch code with one
replicate), so a replicate's result does not depend on its batch or worker.
The stop rules, outcomes and records are ``run_replicate``'s, applied to the
whole batch with array operations; finished replicates leave the batch.
"""

from __future__ import annotations

import gc
from contextlib import contextmanager
from itertools import pairwise

import numpy as np

from .config import Config, SweepPoint
from .engines import ENGINES
from .lifecycle import LifeCycle, initial_census
from .streams import keyed_generators

__all__ = ["STATES", "classify_many", "run_batch", "batchable"]

# codes for the state of a census; index into this tuple
STATES = ("undecided", "mutant-fixed", "mutant-lost", "fixed", "extinct")
_UNDECIDED, _MUTANT_FIXED, _MUTANT_LOST, _FIXED, _EXTINCT = range(5)
_DECIDED_WINNER = ("mutant-fixed", "mutant-lost", "fixed")


def batchable(config: Config) -> bool:
    """True when the config's engine can advance a batch of replicates together."""
    return hasattr(ENGINES[config.experiment.engine], "populations")


def classify_many(totals: np.ndarray, config: Config) -> tuple[np.ndarray, np.ndarray]:
    """``runner.classify`` for many censuses at once.

    Parameters
    ----------
    totals : ndarray, shape (n, n_alleles)
        Counts by allele, one row per census.

    Returns
    -------
    states : ndarray of int
        Index into ``STATES``.
    winners : ndarray of int
        The only allele present, or -1.
    """
    present = totals > 0
    n_present = present.sum(axis=1)
    winners = np.where(n_present == 1, present.argmax(axis=1), -1)
    one = np.where(n_present == 1, _FIXED, _UNDECIDED)
    if config.invasion is not None:
        mutant = config.allele_index(config.invasion.mutant)
        one = np.where(n_present == 1, _MUTANT_FIXED, _UNDECIDED)
        one = np.where(totals[:, mutant] == 0, _MUTANT_LOST, one)
    states = np.where(n_present == 0, _EXTINCT, one)
    return states, winners


class _Records:
    """Census records of a batch, kept as blocks and split by replicate at the end."""

    def __init__(self):
        self.replicate, self.step, self.census = [], [], []

    def add(self, replicates: np.ndarray, season: int, census: np.ndarray) -> None:
        if replicates.size:
            self.replicate.append(replicates)
            self.step.append(np.full(replicates.size, season, dtype=np.int32))
            self.census.append(census)

    def by_replicate(self, n: int):
        """(steps, censuses) of each replicate 0..n-1, in the order recorded."""
        replicate = np.concatenate(self.replicate)
        order = np.argsort(replicate, kind="stable")
        steps = np.concatenate(self.step)[order]
        census = np.concatenate(self.census)[order].astype(np.uint32)
        bounds = np.searchsorted(replicate[order], np.arange(n + 1))
        return [(steps[a:b], census[a:b]) for a, b in pairwise(bounds)]


@contextmanager
def _cycle_collection_paused():
    """Pause Python's cyclic garbage collector (a batch makes no reference cycles).

    A batch creates a generator and a result per replicate; their number
    triggers full collections that walk every object of the process (all
    of numpy, scipy, pandas...): about a tenth of a K = 200 experiment's
    time, measured. Reference counting still frees everything as usual.
    """
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def run_batch(point: SweepPoint, replicates, seed: int) -> list:
    """Run replicates of one sweep point together; the same results as ``run_replicate`` on each.

    Parameters
    ----------
    point : SweepPoint
    replicates : iterable of int
        Replicate indices (each keys its own stream).
    seed : int
        The experiment's root seed.

    Returns
    -------
    list of ReplicateResult, in the order of ``replicates``.
    """
    with _cycle_collection_paused():
        return _run_batch(point, replicates, seed)


def _run_batch(point: SweepPoint, replicates, seed: int) -> list:
    from .runner import ReplicateResult

    config = point.config
    exp = config.experiment
    reps = [int(r) for r in replicates]
    n = len(reps)
    if n == 0:
        return []
    life = LifeCycle.from_config(config)
    start = initial_census(config, life)
    rngs = keyed_generators(seed, point.index, reps)  # replicate_rng's, built together
    batch = ENGINES[exp.engine].populations(life, np.broadcast_to(start, (n, *start.shape)), rngs)

    outcome = np.full(n, -1)  # code into STATES, or len(STATES) for capped
    capped_code = len(STATES)
    steps, since_final, winner_final, final_census = (np.zeros(n, dtype=np.int64) for _ in range(4))
    records = _Records()

    active = np.arange(n)
    census = batch.census()
    state, winner = classify_many(census.sum(axis=2), config)
    since = np.zeros(n, dtype=np.int64)
    records.add(active, 0, census)
    season = 0
    stop_decided = exp.stop == "fixation"

    def finish(done: np.ndarray, codes: np.ndarray, recorded: np.ndarray) -> None:
        ids = active[done]
        outcome[ids], steps[ids] = codes, season
        since_final[ids], winner_final[ids] = since[done], winner[done]
        final_census[ids] = census[done].sum(axis=(1, 2))
        late = ~recorded
        records.add(ids[late], season, census[done][late])

    while True:
        decided = (state != _UNDECIDED) & (stop_decided | (state == _EXTINCT))
        if season >= exp.max_steps:
            decided[:] = True
        if decided.any():
            recorded = np.full(int(decided.sum()), season == 0 or season % exp.record_every == 0)
            finish(decided, state[decided], recorded)
            keep = ~decided
            active, state, winner, since, census = (x[keep] for x in (active, state, winner, since, census))
            batch.keep(keep)
        if active.size == 0:
            break
        batch.step()
        season += 1
        census = batch.census()
        new_state, winner = classify_many(census.sum(axis=2), config)
        since = np.where(new_state != state, season, since)
        state = new_state
        capped = census.sum(axis=(1, 2)) > exp.max_population
        if season % exp.record_every == 0:
            records.add(active[~capped], season, census[~capped])
        if capped.any():
            finish(capped, capped_code, np.zeros(int(capped.sum()), dtype=bool))
            keep = ~capped
            active, state, winner, since, census = (x[keep] for x in (active, state, winner, since, census))
            batch.keep(keep)

    names = STATES + ("capped",)
    out = []
    columns = (outcome.tolist(), winner_final.tolist(), steps.tolist(), since_final.tolist(),
               final_census.tolist(), records.by_replicate(n))  # Python numbers: one conversion each
    for i, (code, winner_i, steps_i, since_i, census_i, (record_steps, trajectory)) in enumerate(
            zip(*columns, strict=True)):
        name = names[code]
        out.append(ReplicateResult(
            point=point.index,
            replicate=reps[i],
            seed=seed,
            outcome=name,
            winner=winner_i if name in _DECIDED_WINNER else -1,
            steps=steps_i,
            fixation_step=since_i if name in _DECIDED_WINNER + ("extinct",) else -1,
            final_census=census_i,
            record_steps=record_steps,
            trajectory=trajectory,
        ))
    return out
