"""Replicates of one sweep point, run to the stop rule: a single replicate is a batch of one.

Small populations spend their time in per-season overhead, not in
individuals; advancing a batch of replicates as one set of arrays shares that
overhead. Each replicate still draws only from its own stream
``SeedSequence(seed, spawn_key=(point, replicate))`` and consumes it exactly as
it does alone, so a replicate's result does not depend on its batch or
worker. The stop rule, the outcomes and the records are applied to the whole
batch with array operations (``run_replicates``); finished replicates leave
the batch. An engine without a batch form (the agents engine) runs each
replicate as a batch of one ``BroodModel``.
"""

from __future__ import annotations

import gc
from contextlib import contextmanager
from dataclasses import dataclass
from itertools import pairwise
from typing import TYPE_CHECKING

import numpy as np

from .engines import ENGINES
from .outcomes import CODES, DECIDED, DECIDED_WITH_WINNER, OUTCOMES, census_states
from .point_run import PointRun
from .streams import keyed_generators
from .vocabulary import MAX_COUNT
from .year_draws import SeasonYears

if TYPE_CHECKING:  # the config schema: a worker process is sent a PointRun and never loads it
    from .config import SweepPoint

__all__ = ["ReplicateResult", "replicate_rng", "run_replicates", "run_replicate"]

_UNDECIDED, _EXTINCT, _CAPPED = CODES["undecided"], CODES["extinct"], CODES["capped"]


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
    years: np.ndarray | None = None  # year type of seasons 1..steps (uint8); None: constant


def replicate_rng(seed: int, point: int, replicate: int) -> np.random.Generator:
    """The replicate's own stream: ``SeedSequence(seed, spawn_key=(point, replicate))``.

    Keyed, not spawned, so any replicate can be re-run alone, on any worker,
    in any order, with the same result. ``sim.streams.keyed_generators`` builds
    the same generators for a whole batch at once.
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(point, replicate)))


class _Models:
    """Replicates of an engine without a batch form, one ``BroodModel`` each, as a batch."""

    def __init__(self, config, rngs, years=None):
        from .model import BroodModel  # mesa: imported only where an engine without a batch form runs

        years = [None] * len(rngs) if years is None else years
        self.models = [BroodModel(config, rng=rng, years=y) for rng, y in zip(rngs, years, strict=True)]

    def step(self) -> None:
        for model in self.models:
            model.step()

    def census(self) -> np.ndarray:
        return np.stack([model.census() for model in self.models])

    def keep(self, which: np.ndarray) -> None:
        self.models = [m for m, k in zip(self.models, which, strict=True) if k]

    @property
    def year_now(self) -> np.ndarray:
        return np.concatenate([m.years.current for m in self.models])


class _Records:
    """Census records of a batch, kept as blocks and split by replicate at the end."""

    def __init__(self):
        self.replicate, self.step, self.census = [], [], []

    def add(self, replicates: np.ndarray, season: int, census: np.ndarray) -> None:
        if replicates.size:
            self.replicate.append(replicates)
            self.step.append(season)  # made into one step per record at the end
            self.census.append(census)

    def by_replicate(self, n: int):
        """(steps, censuses) of each replicate 0..n-1, in the order recorded."""
        replicate = np.concatenate(self.replicate)
        order = np.argsort(replicate, kind="stable")
        steps = np.repeat(np.array(self.step, dtype=np.int32),
                          [block.size for block in self.replicate])[order]
        # a capped replicate's last census may pass what uint32 holds: stored as its ceiling
        census = np.minimum(np.concatenate(self.census)[order], MAX_COUNT).astype(np.uint32)
        bounds = np.searchsorted(replicate[order], np.arange(n + 1))
        return [(steps[a:b], census[a:b]) for a, b in pairwise(bounds)]


def empty_records(census_shape: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """A replicate's census records when none is kept: (record_steps, trajectory), both empty,
    the trajectory's census shape (alleles, ages) ``census_shape``."""
    return np.zeros(0, dtype=np.int32), np.zeros((0, *census_shape), dtype=np.uint32)


class _NoRecords:
    """No census records (``trajectory = "none"``): every replicate is given the same empty
    ones, made read-only since they are shared, instead of records kept, split and dropped."""

    def __init__(self, census_shape: tuple[int, ...]):
        steps, census = empty_records(census_shape)
        steps.flags.writeable = census.flags.writeable = False
        self.empty = (steps, census)

    def add(self, replicates: np.ndarray, season: int, census: np.ndarray) -> None:
        pass

    def by_replicate(self, n: int):
        """(steps, censuses) of each replicate 0..n-1: none."""
        return [self.empty] * n


class _YearRecords:
    """The year type of every season of a batch's replicates, split by replicate at the end."""

    def __init__(self):
        self.replicate, self.year = [], []

    def add(self, replicates: np.ndarray, years: np.ndarray) -> None:
        self.replicate.append(replicates)
        self.year.append(years.astype(np.uint8))

    def by_replicate(self, n: int) -> list[np.ndarray]:
        """Each replicate's year types, seasons 1, 2, ... in order."""
        if not self.replicate:
            return [np.empty(0, dtype=np.uint8)] * n
        replicate = np.concatenate(self.replicate)
        order = np.argsort(replicate, kind="stable")
        years = np.concatenate(self.year)[order]
        bounds = np.searchsorted(replicate[order], np.arange(n + 1))
        return [years[a:b] for a, b in pairwise(bounds)]


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


def run_replicates(point: SweepPoint | PointRun, replicates, seed: int, *,
                   start: np.ndarray | None = None, records: bool = True) -> list[ReplicateResult]:
    """Run replicates of one sweep point to the stop rule (the unit of work a worker takes).

    Engines that hold replicates as an array dimension (``individual``,
    ``counts``) advance the replicates together; the others run each as a
    batch of one. Either way each replicate draws from its own keyed stream,
    so the results do not depend on how replicates are grouped.

    Parameters
    ----------
    point : SweepPoint or PointRun
        The sweep point, or its ``PointRun`` (what a worker process is sent).
    replicates : iterable of int
        Replicate indices (each keys its own stream).
    seed : int
        The experiment's root seed.
    start : ndarray, optional
        The point's starting census, ``initial_census(point.config)``, where the caller
        has it already and passes a ``SweepPoint`` (a ``PointRun`` holds its own).
    records : bool
        Keep the census records (default); ``False`` keeps none, as ``trajectory = "none"``
        stores them: each result's ``record_steps`` and ``trajectory`` are then empty
        (read-only, shared), and nothing else changes.

    Returns
    -------
    list of ReplicateResult, in the order of ``replicates``.
    """
    run = point if isinstance(point, PointRun) else PointRun.of(point, start)
    reps = [int(r) for r in replicates]
    with _cycle_collection_paused():
        if hasattr(ENGINES[run.engine], "populations"):
            return _run_batch(run, reps, seed, records)
        return [result for rep in reps for result in _run_batch(run, [rep], seed, records)]


def run_replicate(point: SweepPoint, replicate: int, seed: int) -> ReplicateResult:
    """Run one replicate of one sweep point to the stop rule: a batch of one."""
    return run_replicates(point, [replicate], seed)[0]


def _run_batch(run: PointRun, reps: list[int], seed: int, keep_records: bool = True
               ) -> list[ReplicateResult]:
    """The stop rule, applied to a batch: stop a replicate when its outcome is decided
    (``stop = "fixation"``; extinction always stops), at ``max_steps``, or when its
    census passes ``max_population`` (capped); record every ``record_every`` seasons
    and at the end (with ``keep_records``)."""
    n = len(reps)
    if n == 0:
        return []
    rngs = keyed_generators(seed, run.index, reps)  # replicate_rng's, built together
    engine = ENGINES[run.engine]
    years, shared = run.years, run.shared_years  # years None: a constant environment, no year stream
    if hasattr(engine, "populations"):
        batch = engine.populations(run.life, np.broadcast_to(run.start, (n, *run.start.shape)), rngs,
                                   limit=run.max_population)
        if years is not None:
            batch.years = SeasonYears.for_replicates(years, seed, run.index, reps, shared=shared)
    else:
        batch = _Models(run.config, rngs, None if years is None else [
            SeasonYears.for_replicates(years, seed, run.index, [r], shared=shared) for r in reps])
    year_records = None if years is None else _YearRecords()

    outcome = np.full(n, -1)  # codes into OUTCOMES
    steps, since_final, winner_final, final_census = (np.zeros(n, dtype=np.int64) for _ in range(4))
    active = np.arange(n)
    census = batch.census()
    records = _Records() if keep_records else _NoRecords(census.shape[1:])
    mutant = run.mutant
    totals = census.sum(axis=2)
    # a census's state and winner depend only on which alleles are present (``census_states``):
    # worked out again only in a season where that changes, looked for only in a season where
    # the classes with anyone in them (``occupied``) change
    occupied, present = census.astype(bool), totals > 0
    state, winner = census_states(totals, mutant)
    since = np.zeros(n, dtype=np.int64)
    records.add(active, 0, census)
    season = 0
    stop_decided = run.stop == "fixation"
    max_steps, max_population, record_every = run.max_steps, run.max_population, run.record_every
    changed = True  # the states changed since the stop rule last looked at them

    def finish(done: np.ndarray, codes, recorded: np.ndarray) -> None:
        ids = active[done]
        outcome[ids], steps[ids] = codes, season
        since_final[ids], winner_final[ids] = since[done], winner[done]
        final_census[ids] = census[done].sum(axis=(1, 2))
        late = ~recorded
        records.add(ids[late], season, census[done][late])

    while True:
        if changed or season >= max_steps:
            changed = False
            decided = (state != _UNDECIDED) if stop_decided else (state == _EXTINCT)
            if season >= max_steps:
                decided[:] = True
            if decided.any():
                recorded = np.full(int(decided.sum()), season == 0 or season % record_every == 0)
                finish(decided, state[decided], recorded)
                keep = ~decided
                active, state, winner, since, census, occupied, present = (
                    x[keep] for x in (active, state, winner, since, census, occupied, present))
                batch.keep(keep)
        if active.size == 0:
            break
        batch.step()
        season += 1
        if year_records is not None:
            year_records.add(active, batch.year_now if isinstance(batch, _Models)
                             else batch.years.current)
        census = batch.census()
        now_occupied = census.astype(bool)
        if now_occupied.tobytes() != occupied.tobytes():  # (cheaper than numpy's comparison)
            occupied = now_occupied
            totals = census.sum(axis=2)
            now_present = totals > 0
            if now_present.tobytes() != present.tobytes():
                new_state, winner = census_states(totals, mutant)
                since = np.where(new_state != state, season, since)
                state, present, changed = new_state, now_present, True
        # no census passes max_population while their sum does not
        capped = None
        if census.sum() > max_population:
            capped = census.sum(axis=(1, 2)) > max_population
            if not capped.any():
                capped = None
        if season % record_every == 0:
            if capped is not None:
                records.add(active[~capped], season, census[~capped])
            else:
                records.add(active, season, census)
        if capped is not None:
            finish(capped, _CAPPED, np.zeros(int(capped.sum()), dtype=bool))
            keep = ~capped
            active, state, winner, since, census, occupied, present = (
                x[keep] for x in (active, state, winner, since, census, occupied, present))
            batch.keep(keep)

    out = []
    columns = (outcome.tolist(), winner_final.tolist(), steps.tolist(), since_final.tolist(),
               final_census.tolist(), records.by_replicate(n),
               [None] * n if year_records is None else year_records.by_replicate(n))
    for i, (code, winner_i, steps_i, since_i, census_i, (record_steps, trajectory), years_i) in (
            enumerate(zip(*columns, strict=True))):
        name = OUTCOMES[code]
        out.append(ReplicateResult(
            point=run.index,
            replicate=reps[i],
            seed=seed,
            outcome=name,
            winner=winner_i if name in DECIDED_WITH_WINNER else -1,
            steps=steps_i,
            fixation_step=since_i if name in DECIDED else -1,
            final_census=census_i,
            record_steps=record_steps,
            trajectory=trajectory,
            years=years_i,
        ))
    return out
