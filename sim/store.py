"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

A finished experiment is one HDF5 file. While it runs, finished batches of
replicates are kept as shard files in the folder ``NAME.parts`` beside it and
merged into the file at the end; the readers below open either form, so a
file can be read while it is being written, or after its run was killed.

Layout of the finished file (``format_version`` 2; every table is a group of
equal-length column datasets, chunked and gzip-compressed)::

    /                      attrs: format = "broodline-results", format_version,
                                  software_version, created, config (resolved TOML
                                  as JSON), config_hash, seed, alleles, n_ages,
                                  resident, mutant ("" without [invasion]),
                                  trajectory ("by-age" | "by-allele" | "none"),
                                  n_points, replicates (per point),
                                  complete (True once every replicate is in)
    /points/               one row per sweep point
        index              int32
        config             the point's full config as JSON (str)
        <swept path>       one column per swept key, e.g. "allele.one-shot.fecundity"
    /replicates/           one row per replicate, ordered by (point, replicate)
        point, replicate   int32
        seed               uint64  (the experiment seed)
        spawn_key          int64 (n, 2): the SeedSequence spawn key (point, replicate)
        outcome            str: mutant-fixed | mutant-lost | fixed | extinct | undecided | capped
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

While running (or after a run was stopped) the file holds the attributes and
/points with ``complete = False`` and empty tables; each finished batch is a
shard ``NAME.parts/pPPPPPP-rFFFFFFFFF-LLLLLLLLL.h5`` (point P, replicates F to
L) with the same /replicates and /trajectories groups (``trajectory_start``
counted within the shard). A shard is written as ``.tmp``, flushed, fsynced,
closed and renamed into place, so a shard either exists whole or not at all;
the final file is built the same way and replaces the running one in one
rename. ``NAME.parts/lock`` is held (``flock``) by the one writing process.
"""

from __future__ import annotations

import errno
import json
import os
import re
import shutil
import socket
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

try:  # advisory locks: POSIX only; elsewhere a second writer is not detected
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None

__all__ = [
    "FORMAT_VERSION",
    "ResultsError",
    "ConfigMismatchError",
    "Shard",
    "ResultsWriter",
    "parts_dir",
    "software_version",
    "read_attrs",
    "read_points",
    "read_replicates",
    "read_trajectories",
    "read_point_configs",
    "read_outcomes",
    "writer_state",
]

FORMAT_VERSION = 2
_FORMAT = "broodline-results"
_STR = h5py.string_dtype()
_COMPRESSION = dict(compression="gzip", compression_opts=4, shuffle=True)

# name: (dtype, trailing shape)
_REPLICATE_COLUMNS = {
    "point": (np.int32, ()),
    "replicate": (np.int32, ()),
    "seed": (np.uint64, ()),
    "spawn_key": (np.int64, (2,)),
    "outcome": (_STR, ()),
    "winner": (np.int16, ()),
    "steps": (np.int32, ()),
    "fixation_step": (np.int32, ()),
    "final_census": (np.int64, ()),
    "trajectory_start": (np.int64, ()),
    "trajectory_length": (np.int32, ()),
}
# rows buffered while merging shards: bounds the merge's memory whatever the experiment's size
_MERGE_ROWS = 16384
_MERGE_RECORDS = 1 << 16


class ResultsError(Exception):
    """A results file cannot be written, resumed or read as asked (the message says why)."""


class ConfigMismatchError(ResultsError):
    """``--resume`` with a config other than the one that started the file."""

    def __init__(self, message: str, differences: list[str]):
        super().__init__(message)
        self.differences = differences


def software_version() -> str:
    try:
        return version("broodline")
    except PackageNotFoundError:  # running from a source tree
        return "0+unknown"


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


def _list_shards(parts: Path) -> list[Shard]:
    """Finished shards in canonical order (point, first replicate)."""
    try:
        names = os.listdir(parts)
    except FileNotFoundError:
        return []
    return sorted(s for s in map(Shard.parse, names) if s is not None)


# -- durable writes ------------------------------------------------------------------
def _fsync_path(path: Path, *, directory: bool = False) -> None:
    fd = os.open(path, os.O_RDONLY | (getattr(os, "O_DIRECTORY", 0) if directory else 0))
    try:
        os.fsync(fd)
    except OSError as err:  # some filesystems refuse fsync on a folder
        if not directory or err.errno not in (errno.EINVAL, errno.EBADF):
            raise
    finally:
        os.close(fd)


def _write_atomic(path: Path, fill, *, in_memory: bool = True) -> None:
    """Write an HDF5 file as ``path.tmp`` with ``fill(file)``, make it durable, rename it to ``path``.

    After a crash at any moment ``path`` is either absent, or its old
    version, or the complete new one; a leftover ``.tmp`` is never read.
    ``in_memory`` builds the file in memory and writes its bytes in one go
    (for files of a batch's size): a full disk is then a plain OSError,
    never a half-closed HDF5 file.
    """
    tmp = path.with_name(path.name + ".tmp")
    try:
        if in_memory:
            with h5py.File(tmp.name, "w", driver="core", backing_store=False) as f:
                fill(f)
                f.flush()
                image = f.id.get_file_image()
            _write_file(tmp, image)
        else:
            with _h5_write_errors(), h5py.File(tmp, "w") as f:
                fill(f)
                f.flush()
            _fsync_path(tmp)
        _commit(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _write_file(path: Path, data: bytes) -> None:
    """Write bytes to a new file and fsync it."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def _h5_write_errors():
    """HDF5 reports a failed write (a full disk) as RuntimeError; raise it as the OSError it is."""
    try:
        yield
    except RuntimeError as err:
        code = re.search(r"errno = (\d+)", str(err))
        if code is None:
            raise
        raise OSError(int(code.group(1)), os.strerror(int(code.group(1)))) from None


def _commit(tmp: Path, path: Path) -> None:
    """Rename a finished ``.tmp`` into place and make the rename durable."""
    os.replace(tmp, path)
    _fsync_path(path.parent, directory=True)


def _column(group, name, dtype, shape, chunk, data=None):
    if data is not None and len(data) > 0:
        chunk = min(chunk, len(data))
    ds = group.create_dataset(name, shape=(0, *shape), maxshape=(None, *shape), dtype=dtype,
                              chunks=(chunk, *shape), **_COMPRESSION)
    if data is not None:
        _append(ds, data)
    return ds


def _append(ds, values) -> None:
    values = np.asarray(values, dtype=object if ds.dtype == _STR else ds.dtype)
    if len(values) == 0:
        return
    n = ds.shape[0]
    ds.resize(n + len(values), axis=0)
    ds[n:] = values


def _pad_ages(trajectory: np.ndarray, n_ages: int) -> np.ndarray:
    """Pad a point's trajectory to the file's age axis (points may differ in schedule length)."""
    extra = n_ages - trajectory.shape[-1]
    if extra == 0:
        return trajectory
    return np.concatenate([trajectory, np.zeros((*trajectory.shape[:-1], extra), trajectory.dtype)], -1)


def _counts_shape(mode: str, n_alleles: int, n_ages: int) -> tuple:
    return (n_alleles,) if mode == "by-allele" else (n_alleles, n_ages)


# -- writing -------------------------------------------------------------------------
class ResultsWriter:
    """The single writer of an experiment's results file.

    Creates the file (attributes and sweep points), keeps each finished batch
    as a durable shard, and merges the shards into the one file, ordered by
    (point, replicate), once every replicate is in.

    Parameters
    ----------
    path : path-like
        The results file. An existing file is refused unless ``overwrite``
        (start again) or ``resume`` (finish it).
    config : Config
        The experiment config (with its sweep).
    points : list of SweepPoint
    overwrite, resume : bool
        ``resume`` refuses a file written by another config
        (``ConfigMismatchError``, naming each difference).
    """

    def __init__(self, path, config, points, *, overwrite: bool = False, resume: bool = False):
        from .config import config_hash  # local: store is importable without pydantic models

        if overwrite and resume:
            raise ResultsError("choose one of overwrite (start again) and resume (finish the file)")
        self.path = Path(path)
        self.parts = parts_dir(self.path)
        self.config, self.points = config, points
        self.replicates = config.experiment.replicates
        self.expected = len(points) * self.replicates
        self.mode = config.experiment.trajectory
        self.n_alleles = len(config.allele)
        self.n_ages = max(max(s.n_ages for s in p.config.schedules()) for p in points)
        self.hash = config_hash(config)
        self.complete = False
        self._lock_fd = None
        self._check_target(overwrite=overwrite, resume=resume)
        self._lock()
        try:
            if resume:
                self._open_existing()
            else:
                self._create()
            self.shards = {} if self.complete else self._scan()
        except BaseException:
            self._unlock()
            raise

    # -- setting up ------------------------------------------------------------------
    def _check_target(self, *, overwrite: bool, resume: bool) -> None:
        where = str(self.path)
        folder = self.path.parent
        if not folder.exists():
            raise FileNotFoundError(f"output folder {str(folder)!r} does not exist")
        if not folder.is_dir():
            raise ResultsError(f"cannot write {where!r}: {str(folder)!r} is not a folder")
        if self.path.is_dir():
            raise ResultsError(f"cannot write {where!r}: it is a folder")
        if resume and not self.path.exists():
            raise ResultsError(f"nothing to resume: {where!r} does not exist (run without --resume)")
        if self.path.exists() and not (overwrite or resume):
            done = _is_complete(self.path)
            hint = ("pass --overwrite to replace it" if done is not False else
                    "it is unfinished: pass --resume to finish it, or --overwrite to start again")
            raise FileExistsError(f"results file {where!r} exists; {hint}")
        if not os.access(folder, os.W_OK):
            raise PermissionError(f"cannot write {where!r}: the folder {str(folder)!r} is not writable "
                                  "(no permission, or a read-only file system)")

    def _lock(self) -> None:
        try:
            self.parts.mkdir(exist_ok=True)
            fd = os.open(self.parts / "lock", os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as err:
            raise ResultsError(f"cannot write results beside {str(self.path)!r}: "
                               f"{err.strerror or err}") from None
        if fcntl is not None:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                holder = os.read(fd, 200).decode(errors="replace").strip() or "another process"
                os.close(fd)
                raise ResultsError(f"{str(self.path)!r} is being written by another broodline run "
                                   f"({holder}); wait for it or stop it first") from None
        os.ftruncate(fd, 0)
        os.write(fd, f"pid {os.getpid()} on {socket.gethostname()}".encode())
        self._lock_fd = fd

    def _unlock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # closing releases the flock
            self._lock_fd = None

    def _create(self) -> None:
        for leftover in self.parts.iterdir():
            if leftover.name != "lock":
                leftover.unlink() if leftover.is_file() else shutil.rmtree(leftover)
        self.path.unlink(missing_ok=True)
        _write_atomic(self.path, self._write_header)

    def _write_header(self, f) -> None:
        config = self.config
        f.attrs.update(
            format=_FORMAT,
            format_version=FORMAT_VERSION,
            software_version=software_version(),
            created=datetime.now(UTC).isoformat(timespec="seconds"),
            config=json.dumps(config.model_dump(mode="json")),
            config_hash=self.hash,
            seed=config.experiment.seed,
            alleles=json.dumps(config.allele_names),
            n_ages=self.n_ages,
            resident=config.invasion.resident if config.invasion else "",
            mutant=config.invasion.mutant if config.invasion else "",
            trajectory=self.mode,
            n_points=len(self.points),
            replicates=self.replicates,
            complete=False,
        )
        pts = f.create_group("points", track_order=True)  # columns in sweep order
        pts.create_dataset("index", data=np.array([p.index for p in self.points], dtype=np.int32))
        pts.create_dataset("config", data=[json.dumps(p.config.model_dump(mode="json"))
                                           for p in self.points], dtype=_STR)
        for key in self.points[0].values:
            values = [p.values[key] for p in self.points]
            try:
                pts.create_dataset(key, data=np.asarray(values, dtype=float))
            except (TypeError, ValueError):
                pts.create_dataset(key, data=[json.dumps(v) for v in values], dtype=_STR)
        self._empty_tables(f)

    def _empty_tables(self, f) -> None:
        reps = f.create_group("replicates")
        for name, (dtype, shape) in _REPLICATE_COLUMNS.items():
            _column(reps, name, dtype, shape, 1024)
        traj = f.create_group("trajectories")
        _column(traj, "step", np.int32, (), 4096)
        _column(traj, "counts", np.uint32, _counts_shape(self.mode, self.n_alleles, self.n_ages), 4096)

    def _open_existing(self) -> None:
        from .config import config_differences

        where = str(self.path)
        try:
            attrs = read_attrs(self.path)
        except (OSError, ValueError) as err:
            raise ResultsError(f"cannot resume {where!r}: {err}") from None
        if attrs.get("format_version") != FORMAT_VERSION:
            raise ResultsError(f"cannot resume {where!r}: it has results format "
                               f"{attrs.get('format_version')}, this broodline writes {FORMAT_VERSION}")
        if attrs["config_hash"] != self.hash:
            diffs = config_differences(attrs["config"], self.config)
            raise ConfigMismatchError(
                f"cannot resume {where!r}: it was started with another config "
                f"(resolved-config hash {attrs['config_hash'][:12]} in the file, {self.hash[:12]} now). "
                "Differences (file -> now):\n  " + "\n  ".join(diffs or ["(none visible)"])
                + "\nResume with the config that started the file, or pass --overwrite to start again.",
                diffs)
        self.resumed_from_version = attrs["software_version"]
        self.complete = bool(attrs.get("complete", False))
        for leftover in self.parts.glob("*.tmp"):  # a batch or merge cut short by a crash
            leftover.unlink()
        self.path.with_name(self.path.name + ".tmp").unlink(missing_ok=True)

    def _scan(self) -> dict[tuple[int, int], Shard]:
        """Finished shards on disk; an unreadable or malformed one is deleted (its batch re-runs)."""
        shards = {}
        covered: dict[int, set] = {}
        for shard in _list_shards(self.parts):
            reps = covered.setdefault(shard.point, set())
            span = set(range(shard.first, shard.last + 1))
            ok = (shard.point < len(self.points) and shard.last < self.replicates
                  and not (reps & span) and _shard_rows(self.parts / shard.name) == shard.size)
            if not ok:
                (self.parts / shard.name).unlink()
                continue
            reps |= span
            shards[(shard.point, shard.first)] = shard
        return shards

    # -- progress -------------------------------------------------------------------
    @property
    def done(self) -> int:
        """Replicates already on disk."""
        return self.expected if self.complete else sum(s.size for s in self.shards.values())

    def missing(self) -> dict[int, list[range]]:
        """Per point, the runs of replicate indices not yet written (empty when complete)."""
        if self.complete:
            return {}
        covered: dict[int, np.ndarray] = {}
        for s in self.shards.values():
            mask = covered.setdefault(s.point, np.zeros(self.replicates, bool))
            mask[s.first:s.last + 1] = True
        out = {}
        for p in range(len(self.points)):
            mask = covered.get(p, np.zeros(self.replicates, bool))
            todo = np.flatnonzero(~mask)
            if todo.size:
                breaks = np.flatnonzero(np.diff(todo) != 1) + 1
                out[p] = [range(int(run[0]), int(run[-1]) + 1) for run in np.split(todo, breaks)]
        return out

    # -- writing batches ------------------------------------------------------------
    def write(self, results) -> None:
        """Write finished ReplicateResult objects as durable shards (one per contiguous run).

        Refuses a replicate already on disk, so no row is ever written twice.
        """
        results = sorted(results, key=lambda r: (r.point, r.replicate))
        start = 0
        for i in range(1, len(results) + 1):
            if (i == len(results) or results[i].point != results[start].point
                    or results[i].replicate != results[i - 1].replicate + 1):
                self._write_shard(results[start:i])
                start = i

    def _write_shard(self, results) -> None:
        shard = Shard(results[0].point, results[0].replicate, results[-1].replicate)
        for s in self.shards.values():
            if s.point == shard.point and s.first <= shard.last and shard.first <= s.last:
                raise ResultsError(f"replicates {shard.first}-{shard.last} of point {shard.point} "
                                   f"overlap shard {s.name}, already written")
        try:
            _write_atomic(self.parts / shard.name, lambda f: self._fill_shard(f, results))
        except OSError as err:
            raise ResultsError(self._write_failure(err)) from None
        self.shards[(shard.point, shard.first)] = shard

    def _fill_shard(self, f, results) -> None:
        lengths = np.array([r.record_steps.size for r in results], dtype=np.int64)
        starts = np.concatenate([[0], np.cumsum(lengths)[:-1]])
        columns = {
            "point": [r.point for r in results],
            "replicate": [r.replicate for r in results],
            "seed": [r.seed for r in results],
            "spawn_key": [(r.point, r.replicate) for r in results],
            "outcome": [r.outcome for r in results],
            "winner": [r.winner for r in results],
            "steps": [r.steps for r in results],
            "fixation_step": [r.fixation_step for r in results],
            "final_census": [r.final_census for r in results],
            "trajectory_start": starts,
            "trajectory_length": lengths,
        }
        reps = f.create_group("replicates")
        for name, (dtype, shape) in _REPLICATE_COLUMNS.items():
            _column(reps, name, dtype, shape, 1024, columns[name])
        traj = f.create_group("trajectories")
        counts_shape = _counts_shape(self.mode, self.n_alleles, self.n_ages)
        steps = np.concatenate([r.record_steps for r in results]).astype(np.int32)
        counts = [r.trajectory if self.mode == "by-allele" else _pad_ages(r.trajectory, self.n_ages)
                  for r in results]
        counts = np.concatenate(counts) if steps.size else np.zeros((0, *counts_shape), np.uint32)
        _column(traj, "step", np.int32, (), 4096, steps)
        _column(traj, "counts", np.uint32, counts_shape, 4096, counts)

    def _write_failure(self, err: OSError) -> str:
        reason = err.strerror or str(err)
        return (f"could not write results to {str(self.parts)!r}: {reason}. "
                f"The {self.done} replicates already saved are intact; fix the cause "
                "(free disk space, permissions) and finish with --resume")

    # -- finishing ------------------------------------------------------------------
    def finalize(self) -> bool:
        """Merge every shard into the one results file, if all replicates are in.

        The merged file is built beside the running one and renamed over it,
        then the shards are removed. Returns True when the file is complete.
        """
        if self.complete:
            self._remove_parts()
            return True
        if self.done < self.expected:
            return False
        shards = sorted(self.shards.values())
        try:
            _write_atomic(self.path, lambda f: self._merge(f, shards), in_memory=False)
        except OSError as err:
            raise ResultsError(self._write_failure(err).replace(
                "intact", "intact (as shards)")) from None
        self.complete = True
        self._remove_parts()
        return True

    def _merge(self, out, shards) -> None:
        with h5py.File(self.path, "r") as head:
            for key, value in head.attrs.items():
                out.attrs[key] = value
            head.copy("points", out)
        out.attrs["complete"] = False  # set last: a file is complete only once all rows are in
        self._empty_tables(out)
        reps, traj = out["replicates"], out["trajectories"]
        buffer: dict[str, list] = {name: [] for name in (*_REPLICATE_COLUMNS, "step", "counts")}
        rows = offset = 0

        def flush():
            for name in _REPLICATE_COLUMNS:
                if buffer[name]:
                    _append(reps[name], np.concatenate(buffer[name]))
            for name in ("step", "counts"):
                if buffer[name]:
                    _append(traj[name], np.concatenate(buffer[name]))
            for values in buffer.values():
                values.clear()

        for shard in shards:
            with h5py.File(self.parts / shard.name, "r") as f:
                table = {name: f["replicates"][name][:] for name in _REPLICATE_COLUMNS}
                table["trajectory_start"] = table["trajectory_start"] + offset
                for name, values in table.items():
                    buffer[name].append(values)
                buffer["step"].append(f["trajectories"]["step"][:])
                buffer["counts"].append(f["trajectories"]["counts"][:])
                offset += f["trajectories"]["step"].shape[0]
            rows += shard.size
            if rows >= _MERGE_ROWS or sum(len(c) for c in buffer["step"]) >= _MERGE_RECORDS:
                flush()
                rows = 0
        flush()
        out.attrs["complete"] = True

    def _remove_parts(self) -> None:
        for shard in _list_shards(self.parts):
            (self.parts / shard.name).unlink(missing_ok=True)
        shutil.rmtree(self.parts, ignore_errors=True)
        self._unlock()

    def close(self) -> None:
        """Merge if every replicate is in, else leave the shards for a resume; release the lock."""
        try:
            if not self.complete and self._lock_fd is not None and self.done == self.expected:
                self.finalize()
        finally:
            self._unlock()

    def release(self) -> None:
        """Release the lock without merging (after an interruption or a failure)."""
        if self._lock_fd is not None:
            for leftover in self.parts.glob("*.tmp"):
                leftover.unlink(missing_ok=True)
        self._unlock()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, *exc):
        if exc_type is None:
            self.close()
        else:
            self.release()


def _shard_rows(path: Path) -> int:
    """Replicate rows in a shard, or -1 if it cannot be read."""
    try:
        with h5py.File(path, "r") as f:
            return int(f["replicates"]["replicate"].shape[0])
    except (OSError, KeyError):
        return -1


def _is_complete(path: Path) -> bool | None:
    """The file's ``complete`` flag; None if it is not a readable broodline results file."""
    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("format") != _FORMAT:
                return None
            return bool(f.attrs.get("complete", True))
    except OSError:
        return None


def writer_state(path) -> str:
    """``complete``, ``running`` (a process holds the writer's lock) or ``stopped``."""
    if _is_complete(Path(path)):
        return "complete"
    lock = parts_dir(path) / "lock"
    if fcntl is None or not lock.exists():
        return "stopped"
    try:
        fd = os.open(lock, os.O_RDONLY)
    except FileNotFoundError:  # the run finished just now
        return "complete" if _is_complete(Path(path)) else "stopped"
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except OSError:
        return "running"
    finally:
        os.close(fd)  # releases the shared lock if it was taken
    return "stopped"


# -- reading ------------------------------------------------------------------------
def _open(path) -> h5py.File:
    path = Path(path)
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
    return f


class _Blocks:
    """The tables of a results file as blocks: the file itself when complete, else its shards.

    ``offsets`` are each block's first row in the concatenated /trajectories,
    so ``trajectory_start`` means the same in both forms.
    """

    def __init__(self, path):
        self.path = Path(path)
        with _open(self.path) as f:
            self.complete = bool(f.attrs.get("complete", True))
        self.files = [self.path] if self.complete else \
            [parts_dir(self.path) / s.name for s in _list_shards(parts_dir(self.path))]

    def __iter__(self):
        offset = 0
        for name in self.files:
            with h5py.File(name, "r") as f:
                yield f, offset
                offset += f["trajectories"]["step"].shape[0]


def _read_blocks(path, read):
    """``read(file, offset)`` over every block, retried if the run finished (and merged) meanwhile."""
    for attempt in range(3):
        blocks = _Blocks(path)
        try:
            return [read(f, offset) for f, offset in blocks]
        except FileNotFoundError:
            if attempt == 2:
                raise
    raise AssertionError("unreachable")


def read_attrs(path) -> dict:
    """File-level metadata: versions, seed, alleles and the resolved config (as a dict)."""
    with _open(path) as f:
        attrs = {k: (v.item() if hasattr(v, "item") else v) for k, v in f.attrs.items()}
    attrs["config"] = json.loads(attrs["config"])
    attrs["alleles"] = json.loads(attrs["alleles"])
    attrs.setdefault("complete", True)  # format 1 files were written whole
    attrs.setdefault("trajectory", "by-age")
    return attrs


def read_points(path) -> pd.DataFrame:
    """The sweep points: ``point`` and one column per swept key."""
    with _open(path) as f:
        g = f["points"]
        data = {"point": g["index"][:]}
        for key in g:
            if key not in ("index", "config"):
                col = g[key][:]
                data[key] = [json.loads(v) for v in col.astype(str)] if col.dtype.kind in "OS" else col
    return pd.DataFrame(data)


def read_point_configs(path) -> list:
    """Each sweep point's full config, validated again as a ``Config``."""
    from .config import Config

    with _open(path) as f:
        texts = f["points"]["config"].asstr()[:]
    return [Config.model_validate(json.loads(t)) for t in texts]


def _replicate_columns(f, offset, names) -> dict:
    g = f["replicates"]
    out = {}
    for name in names:
        col = g[name]
        out[name] = col.asstr()[:] if name == "outcome" else col[:]
    if "trajectory_start" in out:
        out["trajectory_start"] = out["trajectory_start"] + offset
    return out


def read_outcomes(path) -> pd.DataFrame:
    """Only ``point``, ``replicate`` and ``outcome`` of every replicate written so far (cheap)."""
    parts = _read_blocks(path, lambda f, o: _replicate_columns(f, o, ("point", "replicate", "outcome")))
    if not parts:
        return pd.DataFrame({"point": np.zeros(0, np.int32), "replicate": np.zeros(0, np.int32),
                             "outcome": np.zeros(0, object)})
    return pd.DataFrame({k: np.concatenate([p[k] for p in parts]) for k in parts[0]})


def read_replicates(path) -> pd.DataFrame:
    """One row per replicate: point, replicate, seed, spawn key, outcome, winner name, steps...

    Ordered by (point, replicate). For a run still going (or stopped before
    the end), the replicates finished so far.
    """
    alleles = read_attrs(path)["alleles"]
    parts = _read_blocks(path, lambda f, o: _replicate_columns(f, o, _REPLICATE_COLUMNS))
    data = {}
    for name, (dtype, shape) in _REPLICATE_COLUMNS.items():
        cols = [p[name] for p in parts]
        data[name] = np.concatenate(cols) if cols else np.zeros((0, *shape), object if dtype == _STR else dtype)
    data["spawn_key"] = [tuple(k) for k in data["spawn_key"]]
    df = pd.DataFrame(data)
    df["winner"] = [alleles[w] if w >= 0 else "" for w in df["winner"]]
    return df


def read_trajectories(path, *, points=None, replicates=None, by_age: bool = True) -> pd.DataFrame:
    """Census trajectories in long form: point, replicate, step, allele, [age,] count.

    ``points`` and ``replicates`` (lists of indices) select replicates before
    anything is expanded; ``by_age=False`` sums over ages. A file written with
    ``trajectory = "by-allele"`` needs ``by_age=False``; one written with
    ``"none"`` has no trajectories (an empty table).
    """
    attrs = read_attrs(path)
    alleles = attrs["alleles"]
    if attrs["trajectory"] == "by-allele" and by_age:
        raise ValueError(f"{str(path)!r} stores trajectories by allele (experiment.trajectory = "
                         "'by-allele'); call read_trajectories(..., by_age=False)")

    def read(f, offset):
        reps = _replicate_columns(f, 0, ("point", "replicate", "trajectory_start", "trajectory_length"))
        keep = np.ones(reps["point"].size, bool)
        if points is not None:
            keep &= np.isin(reps["point"], list(points))
        if replicates is not None:
            keep &= np.isin(reps["replicate"], list(replicates))
        steps_ds, counts_ds = f["trajectories"]["step"], f["trajectories"]["counts"]
        frames = []
        for i in np.flatnonzero(keep):
            start = int(reps["trajectory_start"][i])
            sl = slice(start, start + int(reps["trajectory_length"][i]))
            steps, counts = steps_ds[sl], counts_ds[sl].astype(np.int64)
            if counts.ndim == 2:
                counts = counts[:, :, None]
            elif not by_age:
                counts = counts.sum(axis=2, keepdims=True)
            t, a, g = counts.shape
            frame = pd.DataFrame({
                "point": reps["point"][i],
                "replicate": reps["replicate"][i],
                "step": np.repeat(steps, a * g),
                "allele": np.tile(np.repeat(np.array(alleles, dtype=object), g), t),
                "age": np.tile(np.arange(1, g + 1), t * a),
                "count": counts.ravel(),
            })
            frames.append(frame if by_age else frame.drop(columns="age"))
        return frames

    frames = [frame for block in _read_blocks(path, read) for frame in block]
    if not frames:
        cols = ["point", "replicate", "step", "allele", "age", "count"]
        return pd.DataFrame(columns=cols if by_age else [c for c in cols if c != "age"])
    return pd.concat(frames, ignore_index=True)
