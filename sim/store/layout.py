"""The results file's layout: its tables and columns, shard names, and how to open one.

A finished experiment is one HDF5 file. While it runs, finished batches of
replicates are kept as shard files in the folder ``NAME.parts`` beside it and
merged into the file at the end; the readers below open either form, so a
file can be read while it is being written, or after its run was killed.

Layout of the finished file (``format_version`` 3; every table is a group of
equal-length column datasets, chunked and gzip-compressed)::

    /                      attrs: format = "broodline-results", format_version,
                                  software_version, created, config (resolved TOML
                                  as JSON), config_hash, seed, alleles, n_ages,
                                  resident, mutant ("" without [invasion]),
                                  trajectory ("by-age" | "by-allele" | "none"),
                                  n_points, replicates (per point),
                                  complete (True once every replicate is in),
                                  trait_efforts (only for a [trait] run: JSON list,
                                  each allele's effort E in allele order, so counts
                                  by allele are the effort distribution; see
                                  readers.read_trait),
                                  locate (only in a ``broodline locate`` file: JSON
                                  parameter, bracket, tolerance, budget; status
                                  builds its ``locate --resume`` advice from it)
    /points/               one row per sweep point
        index              int32
        config             the point's full config as JSON (str)
        <swept path>       one column per swept key, e.g. "allele.one-shot.fecundity"
    /replicates/           one row per replicate, ordered by (point, replicate)
        point, replicate   int32
        seed               uint64  (the experiment seed)
        spawn_key          int64 (n, 2): the SeedSequence spawn key (point, replicate)
        outcome            fixed-length ASCII text (numpy "S12"; format 2 and earlier: a
                           variable-length str): mutant-fixed | mutant-lost | fixed |
                           extinct | undecided | capped
        winner             int16: allele index left alone at the end, -1 if none
        steps              int32: seasons run
        fixation_step      int32: season from which the final outcome held, -1 if undecided
        final_census       int64: census size at the last season
        trajectory_start   int64: first row of this replicate in /trajectories
        trajectory_length  int32
    /trajectories/         census every record_every seasons, the first and last included
        step               int32 (n_records,)
        counts             uint32 (n_records, n_alleles, n_ages) by age,
                           (n_records, n_alleles) by allele, no rows for "none"
    /years/                only with [environment]: the year type of every season
                           attrs: names (JSON list of the year types, in config order),
                                  shared (True for shared_years)
        type               uint8 (sum of steps,): index into names of seasons 1..steps
                           of each replicate in turn, in /replicates order (a
                           replicate's years start at the sum of the steps before
                           it); with shared_years every replicate of a point holds
                           the first seasons of the point's one sequence

While running (or after a run was stopped) the file holds the attributes and
/points with ``complete = False`` and empty tables; each finished batch is a
shard ``NAME.parts/pPPPPPP-rFFFFFFFFF-LLLLLLLLL.h5`` (point P, replicates F to
L) with the same /trajectories (and /years) groups (``trajectory_start``
counted within the shard); its /replicates is one table (a compound dataset,
neither chunked nor compressed, the outcome as its index in the table's
``outcomes`` attribute, a JSON list), which makes saving a batch and merging it
a fraction of the cost of eleven column datasets (``replicate_column`` reads
either form). A shard is written as ``.tmp``, flushed, fsynced,
closed and renamed into place, so a shard either exists whole or not at all;
the final file is built the same way and replaces the running one in one
rename. ``NAME.parts/lock`` is held (``flock``) by the one writing process.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from ..version import software_version
from ..vocabulary import OUTCOMES

__all__ = [
    "FORMAT_VERSION",
    "REPLICATE_COLUMNS",
    "ResultsError",
    "ConfigMismatchError",
    "DamagedResultsError",
    "REQUIRED_ATTRS",
    "Shard",
    "parts_dir",
    "list_shards",
    "software_version",
    "open_results",
    "SHARD_ROW",
    "replicate_rows",
    "replicate_column",
    "is_complete",
    "swept_column",
]

FORMAT_VERSION = 3  # 3: the outcome as fixed-length text (2: variable-length)
_FORMAT = "broodline-results"
_STR = h5py.string_dtype()
# The outcome as fixed-length ASCII text, as long as the longest name: compressed with the
# other columns (HDF5 keeps variable-length strings uncompressed on its heap: 34 bytes a row
# against 4 for the whole row) and written at memory speed instead of one object per row.
OUTCOME_TEXT = np.dtype(f"S{max(map(len, OUTCOMES))}")
# gzip level 1: appending a K = 500 invasion's replicate table (262,144 rows) took 0.6
# microseconds a row at level 1 and 0.95 at level 4, for 3.3 and 2.7 bytes a row; its census
# records (125,000) 0.027 and 0.036 s, for 0.36 and 0.34 MB (one microbenchmark each).
_COMPRESSION = dict(compression="gzip", compression_opts=1, shuffle=True)
REPLICATE_CHUNK = 8192  # rows a chunk of a /replicates column holds (fewer, larger chunks to append)

# name: (dtype, trailing shape)
REPLICATE_COLUMNS = {
    "point": (np.int32, ()),
    "replicate": (np.int32, ()),
    "seed": (np.uint64, ()),
    "spawn_key": (np.int64, (2,)),
    "outcome": (OUTCOME_TEXT, ()),
    "winner": (np.int16, ()),
    "steps": (np.int32, ()),
    "fixation_step": (np.int32, ()),
    "final_census": (np.int64, ()),
    "trajectory_start": (np.int64, ()),
    "trajectory_length": (np.int32, ()),
}


# A shard's /replicates: one row per replicate, the columns above as fields, the outcome as
# a code (its index in the shard's ``outcomes`` attribute).
SHARD_ROW = np.dtype([(name, (np.uint8 if name == "outcome" else dtype, shape))
                      for name, (dtype, shape) in REPLICATE_COLUMNS.items()])


class ResultsError(Exception):
    """A results file cannot be written, resumed or read as asked (the message says why)."""


class DamagedResultsError(ResultsError, ValueError):
    """A results file or shard that cannot be read: a dataset or attribute missing, a corrupted
    HDF5 structure, a newer format (the message names the file and what is wrong)."""


class ConfigMismatchError(ResultsError):
    """Resuming a file with a config other than the one that started it."""

    def __init__(self, message: str, differences: list[str]):
        super().__init__(message)
        self.differences = differences


def swept_column(values: list) -> np.ndarray | None:
    """A swept key's values, one per point, as ``/points`` stores them: float64 where every
    value is a number (or a list of numbers), else None (stored as JSON text, read back as the
    values themselves)."""
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        return None


def parts_dir(path) -> Path:
    """The folder of shards beside a results file: ``NAME.parts``."""
    path = Path(path)
    return path.with_name(path.name + ".parts")


@dataclass(frozen=True, order=True)
class Shard:
    """One finished batch on disk: replicates ``first`` to ``last`` of sweep point ``point``."""

    point: int
    first: int
    last: int

    _PATTERN = re.compile(r"^p(\d+)-r(\d+)-(\d+)\.h5$")

    @property
    def name(self) -> str:
        return f"p{self.point:06d}-r{self.first:09d}-{self.last:09d}.h5"

    @property
    def size(self) -> int:
        return self.last - self.first + 1

    @classmethod
    def parse(cls, name: str) -> Shard | None:
        m = cls._PATTERN.match(name)
        return None if m is None else cls(*(int(g) for g in m.groups()))


def list_shards(parts: Path) -> list[Shard]:
    """Finished shards in canonical order (point, first replicate)."""
    try:
        names = os.listdir(parts)
    except FileNotFoundError:
        return []
    return sorted(s for s in map(Shard.parse, names) if s is not None)


def replicate_rows(f) -> int:
    """Replicates in the /replicates table of an open results file or shard."""
    return int(f["replicates"].shape[0] if isinstance(f["replicates"], h5py.Dataset)
               else f["replicates"]["replicate"].shape[0])


def replicate_column(f, name: str, rows=slice(None)) -> np.ndarray:
    """Rows ``rows`` of one /replicates column of an open results file or shard, outcomes as
    the names stored (str); a shard's table and a file's column datasets read alike."""
    reps = f["replicates"]
    if isinstance(reps, h5py.Dataset):  # a shard: one table, outcomes as codes
        values = reps.fields(name)[rows]
        if name == "outcome":
            values = np.array(json.loads(reps.attrs["outcomes"]), dtype=object)[values]
        return values
    return reps[name].asstr()[rows] if name == "outcome" else reps[name][rows]


def _column(group, name, dtype, shape, chunk, data=None):
    if data is not None and len(data) > 0:
        chunk = min(chunk, len(data))
    ds = group.create_dataset(name, shape=(0, *shape), maxshape=(None, *shape), dtype=dtype,
                              chunks=(chunk, *shape), **_COMPRESSION)
    if data is not None:
        _append(ds, data)
    return ds


def _append(ds, values) -> None:
    values = np.asarray(values, dtype=object if h5py.check_vlen_dtype(ds.dtype) else ds.dtype)
    if len(values) == 0:
        return
    n = ds.shape[0]
    ds.resize(n + len(values), axis=0)
    ds[n:] = values


YEARS = "years"  # the group of year types (variable environments)


@dataclass(frozen=True)
class YearsHeader:
    """What ``/years`` says of an ``[environment]``: its year types' names, and whether the
    replicates share one sequence of years (plain data: a worker saving a shard needs no config)."""

    names: tuple[str, ...]
    shared: bool

    @classmethod
    def of(cls, environment) -> YearsHeader | None:
        """The header of an ``[environment]`` section (None: none, so no ``/years``)."""
        if environment is None:
            return None
        return cls(tuple(y.name for y in environment.year), bool(environment.shared_years))


def _years_group(f, years: YearsHeader | None, data=None) -> None:
    """Create ``/years`` (where there is an [environment] section), holding ``data`` if given."""
    if years is None:
        return
    g = f.create_group(YEARS)
    g.attrs["names"] = json.dumps(list(years.names))
    g.attrs["shared"] = years.shared
    _column(g, "type", np.uint8, (), 4096, data)


def _pad_ages(trajectory: np.ndarray, n_ages: int) -> np.ndarray:
    """Pad a point's trajectory to the file's age axis (points may differ in schedule length)."""
    extra = n_ages - trajectory.shape[-1]
    if extra == 0:
        return trajectory
    return np.concatenate([trajectory, np.zeros((*trajectory.shape[:-1], extra), trajectory.dtype)], -1)


def _counts_shape(mode: str, n_alleles: int, n_ages: int) -> tuple:
    return (n_alleles,) if mode == "by-allele" else (n_alleles, n_ages)


def is_complete(path: Path) -> bool | None:
    """The file's ``complete`` flag; None if it is not a readable broodline results file."""
    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("format") != _FORMAT:
                return None
            return bool(f.attrs.get("complete", True))
    except OSError:
        return None


def open_results(path) -> h5py.File:
    path = Path(path)
    if path.is_dir():
        raise ValueError(f"{str(path)!r} is a folder, not a results file")
    if not path.is_file():
        raise FileNotFoundError(f"results file {str(path)!r} not found")
    try:
        f = h5py.File(path, "r")
    except OSError as err:
        raise ValueError(f"{str(path)!r} is not a broodline results file (cannot open it as "
                         f"HDF5: {err})") from None
    if f.attrs.get("format") != _FORMAT:
        f.close()
        raise ValueError(f"{str(path)!r} is not a broodline results file")
    problem = _header_problem(f)
    if problem:
        f.close()
        raise DamagedResultsError(f"{str(path)!r} cannot be read: {problem}")
    return f


# what every reader needs of the file's header; a file lacking one was cut short or damaged
REQUIRED_ATTRS = ("format_version", "config", "alleles", "n_points", "replicates")


def _header_problem(f) -> str | None:
    """Why an open results file's header cannot be read, or None."""
    try:
        written = int(f.attrs.get("format_version", 1))
        if written > FORMAT_VERSION:
            return (f"it is in results format {written}, newer than this broodline reads "
                    f"(formats 1 to {FORMAT_VERSION}): update broodline")
        missing = [a for a in REQUIRED_ATTRS if a not in f.attrs and not (written == 1 and a != "config")]
        if missing:
            return f"its header lacks {', '.join(missing)} (damaged, or cut short while it was created)"
        if "points" not in f or "config" not in f["points"]:
            return "it has no /points table (damaged, or cut short while it was created)"
    except (OSError, KeyError, ValueError, TypeError) as err:
        return f"its header is damaged ({err})"
    return None
