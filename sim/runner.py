"""Replicates and experiments: seeding, stop rules, outcomes, and streaming results to disk."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from .config import Config, SweepPoint
from .describe import preflight
from .model import BroodModel
from .store import ResultsWriter

__all__ = [
    "OUTCOMES",
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
    in any order, with the same result.
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


def run_experiment(config: Config, out: str | Path, *, overwrite: bool = False,
                   progress: bool = True, batch_size: int = 64) -> pd.DataFrame:
    """Run every replicate of every sweep point, streaming results to an HDF5 file.

    Results are written in batches of ``batch_size`` replicates and flushed,
    so a run that stops early keeps what finished. Returns the per-point
    summary (see ``summarize``).
    """
    points = preflight(config)
    n_reps = config.experiment.replicates
    seed = config.experiment.seed
    rows = []
    with ResultsWriter(out, config, points, overwrite=overwrite) as writer, tqdm(
        total=len(points) * n_reps, disable=not progress, unit="rep", desc=config.experiment.name,
        dynamic_ncols=True,
    ) as bar:
        fixed = 0
        for point in points:
            for start in range(0, n_reps, batch_size):
                batch = run_replicates(point, range(start, min(start + batch_size, n_reps)), seed)
                writer.write(batch)
                rows += [(r.point, r.outcome) for r in batch]
                fixed += sum(r.outcome == "mutant-fixed" for r in batch)
                bar.update(len(batch))
                bar.set_postfix(mutant_fixed=fixed, refresh=False)
    reps = pd.DataFrame(rows, columns=["point", "outcome"])
    pts = pd.DataFrame({"point": [p.index for p in points],
                        **{k: [p.values[k] for p in points] for k in (config.sweep or {})}})
    return summarize(reps, pts)
