"""A shard: one batch of replicates saved as its own durable file, by whichever process ran it.

A worker process that sees the writer's disk makes its batch's rows
(``shard_rows``) and saves them (``save_shard``) to the folder a
``ShardTarget`` names; the writer (``sim.store.writer``) only records the
shard and merges it into the results file. This module imports no config
schema, so a worker process saving shards loads only h5py and numpy.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from ..outcomes import CODES, OUTCOMES
from . import durable
from .layout import SHARD_ROW, YEARS, Shard, YearsHeader, _column, _counts_shape, _pad_ages, _years_group

__all__ = ["ShardTarget", "ShardRows", "shard_rows", "shard_image", "save_shard", "read_shard",
           "SEND_ROWS_BYTES"]

# A worker that saves its shard sends the shard's rows along (``ShardRows``) when they are at
# most SEND_ROWS_BYTES (the writer then merges them without reading the shard back).
SEND_ROWS_BYTES = 8 << 20


@dataclass(frozen=True)
class ShardTarget:
    """Everything needed to save a batch of one sweep point as a shard, in any process:
    the shards' folder, the trajectory mode and counts shape of the file, the point's config
    hash (a shard carries it), the ``YearsHeader`` of its ``[environment]`` (None: no years)
    and ``probe``,
    a file the writer made in the folder (a process that sees it sees the writer's disk)."""

    parts: Path
    mode: str
    n_alleles: int
    n_ages: int
    point_hash: str
    years: YearsHeader | None = None
    probe: str = ""

    def reachable(self) -> bool:
        """True if this process sees the writer's folder of shards (the probe is there): a
        worker on another machine of a dask cluster may not, and then sends its results."""
        return not self.probe or (self.parts / self.probe).is_file()


@dataclass(frozen=True)
class ShardRows:
    """A shard's contents in memory: ``table`` (one ``SHARD_ROW`` per replicate, the outcome
    a code into ``outcomes``), the census records ``steps`` and ``counts`` (None when there
    are none, as with ``trajectory = "none"``) and the year types ``years`` (None without
    an ``[environment]``)."""

    table: np.ndarray
    outcomes: tuple[str, ...]
    steps: np.ndarray | None
    counts: np.ndarray | None
    years: np.ndarray | None

    @property
    def nbytes(self) -> int:
        return sum(a.nbytes for a in (self.table, self.steps, self.counts, self.years) if a is not None)

    @property
    def shard(self) -> Shard:
        """The shard these rows make: their point and first and last replicates."""
        table = self.table
        return Shard(int(table["point"][0]), int(table["replicate"][0]), int(table["replicate"][-1]))


def shard_rows(target: ShardTarget, results) -> ShardRows:
    """Finished replicates (one point, consecutive replicates, in order) as a shard holds them."""
    lengths = np.array([r.record_steps.size for r in results], dtype=np.int64)
    table = np.empty(len(results), SHARD_ROW)
    table["point"] = table["spawn_key"][:, 0] = [r.point for r in results]
    table["replicate"] = table["spawn_key"][:, 1] = [r.replicate for r in results]
    table["outcome"] = [CODES[r.outcome] for r in results]
    for name in ("seed", "winner", "steps", "fixation_step", "final_census"):
        table[name] = [getattr(r, name) for r in results]
    table["trajectory_start"] = np.concatenate([[0], np.cumsum(lengths)[:-1]])
    table["trajectory_length"] = lengths
    steps = counts = None
    if lengths.sum():  # (none with trajectory = "none": no pass over the replicates for them)
        steps = np.concatenate([r.record_steps for r in results]).astype(np.int32)
        counts = np.concatenate([r.trajectory if target.mode == "by-allele"
                                 else _pad_ages(r.trajectory, target.n_ages) for r in results])
    years = None if target.years is None else np.concatenate([r.years for r in results])
    return ShardRows(table, OUTCOMES, steps, counts, years)


def shard_image(target: ShardTarget, rows: ShardRows) -> bytes:
    """The shard file of one batch's rows, as bytes (built in memory): what a worker that
    cannot see the writer's disk sends, so that the writer only writes the bytes."""
    return durable.file_image(rows.shard.name, lambda f: _fill_shard(f, target, rows))


def save_shard(target: ShardTarget, rows: ShardRows, image: bytes | None = None) -> Shard:
    """Save one batch's rows (``image``: their ``shard_image``, if made already) as a durable shard.

    The shard is written as ``.tmp``, fsynced and renamed into place
    (``durable.write_bytes_atomic``), so it exists whole or not at all; a
    worker process that sees the writer's disk calls this for its own batch,
    and the writer only records it.
    """
    shard = rows.shard
    durable.write_bytes_atomic(target.parts / shard.name,
                               shard_image(target, rows) if image is None else image)
    return shard


def _fill_shard(f, target: ShardTarget, rows: ShardRows) -> None:
    # a shard from another run (or another point's config) is refused, never merged
    f.attrs["config_hash"] = target.point_hash
    f.create_dataset("replicates", data=rows.table).attrs["outcomes"] = json.dumps(rows.outcomes)
    traj = f.create_group("trajectories")
    counts_shape = _counts_shape(target.mode, target.n_alleles, target.n_ages)
    empty = rows.steps is None
    _column(traj, "step", np.int32, (), 4096, np.zeros(0, np.int32) if empty else rows.steps)
    _column(traj, "counts", np.uint32, counts_shape, 4096,
            np.zeros((0, *counts_shape), np.uint32) if empty else rows.counts)
    if rows.years is not None:
        _years_group(f, target.years, rows.years)


def read_shard(path) -> ShardRows:
    """A shard's contents, from its file (a shard of this results format: a run of an earlier
    format is not resumed, so its shards, which may hold column datasets, never come here)."""
    with h5py.File(path, "r") as f:
        reps = f["replicates"]
        table, outcomes = reps[()], tuple(json.loads(reps.attrs["outcomes"]))
        steps = counts = None
        if table["trajectory_length"].sum():  # (none with trajectory = "none": not opened)
            steps, counts = f["trajectories"]["step"][()], f["trajectories"]["counts"][()]
        years = f[YEARS]["type"][()] if YEARS in f else None
    return ShardRows(table, outcomes, steps, counts, years)
