"""The single writer of an experiment's results file: header, durable shards, lock, merge."""

from __future__ import annotations

import bisect
import json
import logging
import os
import shutil
import socket
from concurrent.futures import Future, ThreadPoolExecutor
from datetime import UTC, datetime
from pathlib import Path

import h5py
import numpy as np

from ..config import config_differences, config_hash
from ..vocabulary import outcome_name
from . import durable
from . import shards as shard_files  # saved and read through the module: one place to patch
from .chunks import ChunkAppender
from .layout import (
    _FORMAT,
    _STR,
    FORMAT_VERSION,
    OUTCOME_TEXT,
    REPLICATE_CHUNK,
    REPLICATE_COLUMNS,
    YEARS,
    ConfigMismatchError,
    ResultsError,
    Shard,
    YearsHeader,
    _column,
    _counts_shape,
    _years_group,
    is_complete,
    list_shards,
    parts_dir,
    replicate_rows,
    software_version,
    swept_column,
)
from .shards import ShardRows, ShardTarget, shard_rows

try:  # advisory locks: POSIX only; elsewhere a second writer is not detected
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None

__all__ = ["ResultsWriter", "writer_state", "fill_header", "rewrite_header", "resumable_attrs"]

log = logging.getLogger(__name__)

# rows buffered while merging shards: bounds the merge's memory whatever the experiment's size
# (appending 16,384 rows at a time cost 1.0 microseconds a replicate, 65,536 0.7 and 262,144
# 0.5, in one microbenchmark of a K = 500 invasion's table)
_MERGE_ROWS = 1 << 17
_MERGE_RECORDS = 1 << 16
# The writer holds rows not yet merged up to HELD_ROWS_BYTES in all (a worker sends its shard's
# rows along when they are at most ``SEND_ROWS_BYTES``); a shard whose rows it does not hold is
# read back from disk by the merge (which reading cost about 0.7 microseconds a replicate, most
# of the merge's cost per replicate).
HELD_ROWS_BYTES = 64 << 20
# threads that write the shards of workers that cannot see this disk (each a file written,
# fsynced and renamed: mostly waiting for the disk, which a thread does without the GIL)
SAVE_THREADS = 4


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
        (``ConfigMismatchError``, naming each difference); with no file and
        no shards there is nothing to resume, and the file is started
        (``fresh`` is then True), so one command line serves a job that a
        batch scheduler may requeue at any moment.
    """

    def __init__(self, path, config, points, *, overwrite: bool = False, resume: bool = False):
        if overwrite and resume:
            raise ResultsError("choose one of overwrite (start again) and resume (finish the file)")
        self.path = Path(path)
        self.parts = parts_dir(self.path)
        self.config, self.points = config, points
        self.replicates = config.experiment.replicates
        self.expected = len(points) * self.replicates
        self.mode = config.experiment.trajectory
        self.n_alleles = len(config.allele_names)
        self.n_ages = max(max(s.n_ages for s in p.config.schedules()) for p in points)
        self.hash = config_hash(config)
        self.complete = False
        self._lock_fd = None
        self._held: dict[tuple[int, int], ShardRows] = {}  # rows of shards not yet merged
        self._held_bytes = 0
        self.compress_cpu_s = 0.0  # CPU seconds the merge's threads spent compressing
        self._check_target(overwrite=overwrite, resume=resume)
        if resume and self._resumable():
            self._checked_attrs()  # a file that cannot be resumed is refused before the lock's folder is made
        made_parts = not self.parts.exists()
        self._lock()
        try:
            self.fresh = not (resume and self._resumable())
            if self.fresh:
                self._create()
            else:
                self._open_existing()
            self.shards = {} if self.complete else self._scan()
        except BaseException:
            if made_parts and not self.path.exists():
                self._remove_lock_folder()
            self._unlock()
            raise
        # per point, the first replicates of its shards, sorted: the overlap check's index
        self._firsts: dict[int, list[int]] = {}
        for point, first in sorted(self.shards):
            self._firsts.setdefault(point, []).append(first)
        # shards being saved on threads (from workers that cannot see this disk), by key
        self._saving: dict[tuple[int, int], tuple[Shard, ShardRows, Future]] = {}
        self._savers: ThreadPoolExecutor | None = None

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
        if self.path.exists() and not self.path.is_file():  # a FIFO, a device: never replaced
            raise ResultsError(f"cannot write {where!r}: it exists and is not a regular file "
                               "(a pipe, a device...); choose another output")
        if self.path.exists() and not (overwrite or resume):
            done = is_complete(self.path)
            hint = ("pass overwrite=True to replace it" if done is not False else
                    "it is unfinished: pass resume=True to finish it, or overwrite=True to start again")
            raise FileExistsError(f"results file {where!r} exists; {hint}")
        if not os.access(folder, os.W_OK):
            raise PermissionError(f"cannot write {where!r}: the folder {str(folder)!r} is not writable "
                                  "(no permission, or a read-only file system)")

    def _resumable(self) -> bool:
        """True when there is something to resume: the file (shards alone cannot be checked)."""
        if self.path.exists():
            return True
        if list_shards(self.parts):
            raise ResultsError(f"cannot resume {str(self.path)!r}: it is missing, but "
                               f"{str(self.parts)!r} holds finished batches; restore the file, "
                               "or pass overwrite=True to start again")
        return False

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
        try:
            os.ftruncate(fd, 0)
            os.write(fd, f"pid {os.getpid()} on {socket.gethostname()}".encode())
        except OSError as err:
            os.close(fd)
            raise ResultsError(f"could not start {str(self.path)!r}: {err.strerror or err} "
                               "(nothing was written; free disk space and run again)") from None
        self._lock_fd = fd

    def _remove_lock_folder(self) -> None:
        """Remove the shards' folder this run made, holding only its lock, when starting the
        file failed (e.g. a full disk): nothing of the run is left behind. Done while the lock
        is held; a folder holding anything else is kept."""
        try:
            if [p.name for p in self.parts.iterdir()] == ["lock"]:
                (self.parts / "lock").unlink()
                self.parts.rmdir()
        except OSError:
            pass

    def _unlock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # closing releases the flock
            self._lock_fd = None

    def _create(self) -> None:
        for leftover in self.parts.iterdir():
            if leftover.name != "lock":
                leftover.unlink() if leftover.is_file() else shutil.rmtree(leftover)
        self.path.unlink(missing_ok=True)
        self.path.with_name(self.path.name + ".tmp").unlink(missing_ok=True)
        try:
            durable.write_atomic(self.path, self._write_header)
        except OSError as err:
            raise ResultsError(f"could not start {str(self.path)!r}: {err.strerror or err} "
                               "(nothing was written; free disk space and run again)") from None

    def _write_header(self, f) -> None:
        fill_header(f, self.config, self.points)

    def _checked_attrs(self) -> dict:
        """The file's attributes, once it is known to be a results file of this format and
        config (else ``ResultsError`` / ``ConfigMismatchError``); changes nothing on disk."""
        where = str(self.path)
        attrs = resumable_attrs(self.path)
        if attrs["config_hash"] != self.hash:
            diffs = config_differences(attrs["config"], self.config)
            raise ConfigMismatchError(
                f"cannot resume {where!r}: it was started with another config "
                f"(resolved-config hash {attrs['config_hash'][:12]} in the file, {self.hash[:12]} now). "
                "Differences (file -> now):\n  " + "\n  ".join(diffs or ["(none visible)"])
                + "\nResume with the config that started the file, or pass overwrite=True to start again.",
                diffs)
        return attrs

    def _open_existing(self) -> None:
        attrs = self._checked_attrs()  # again under the lock: the file may have changed since
        self.resumed_from_version = attrs["software_version"]
        self.complete = bool(attrs.get("complete", False))
        for leftover in self.parts.glob("*.tmp"):  # a batch or merge cut short by a crash
            leftover.unlink()
        self.path.with_name(self.path.name + ".tmp").unlink(missing_ok=True)

    def _scan(self) -> dict[tuple[int, int], Shard]:
        """Finished shards on disk; an unreadable or malformed one is deleted (its batch re-runs)."""
        shards = {}
        end: dict[int, int] = {}  # per point, the last replicate covered so far (shards come sorted)
        for shard in list_shards(self.parts):
            ok = (shard.point < len(self.points) and shard.last < self.replicates
                  and shard.first > end.get(shard.point, -1)
                  and _shard_rows(self.parts / shard.name, self._point_hash(shard.point)) == shard.size)
            if not ok:
                log.warning("shard %s is unreadable, overlaps another or lies outside the "
                            "experiment: deleted, its batch runs again", self.parts / shard.name)
                (self.parts / shard.name).unlink()
                continue
            end[shard.point] = shard.last
            shards[(shard.point, shard.first)] = shard
        return shards

    # -- progress -------------------------------------------------------------------
    @property
    def done(self) -> int:
        """Replicates already on disk."""
        return self.expected if self.complete else sum(s.size for s in self.shards.values())

    def missing(self) -> dict[int, list[range]]:
        """Per point, the runs of replicate indices not yet written (empty when complete).

        Read from the shards' spans, never a mask over every replicate: planning a
        billion replicates costs what planning ten does.
        """
        if self.complete:
            return {}
        spans: dict[int, list[Shard]] = {}
        for s in sorted(self.shards.values()):
            spans.setdefault(s.point, []).append(s)
        out = {}
        for p in range(len(self.points)):
            runs, start = [], 0
            for s in spans.get(p, []):
                if s.first > start:
                    runs.append(range(start, s.first))
                start = max(start, s.last + 1)
            if start < self.replicates:
                runs.append(range(start, self.replicates))
            if runs:
                out[p] = runs
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
        self.write_rows(shard_rows(self.shard_target(results[0].point), results))

    def write_rows(self, rows: ShardRows, image: bytes | None = None) -> None:
        """Save one batch's rows (``shard_rows``, made where the batch ran) as a durable shard.

        With ``image`` (the shard's file, ``shard_image``, built where the batch ran) the
        file is written on a thread and the shard counts in once it is durable (``collect``);
        without, the shard is built and saved here, at once."""
        shard = rows.shard
        self._claim(shard)
        if image is None:
            try:
                shard_files.save_shard(self.shard_target(shard.point), rows)
            except OSError as err:
                self._unclaim(shard)
                raise ResultsError(self._write_failure(err)) from None
            self._record(shard, rows)
            return
        if self._savers is None:
            self._savers = ThreadPoolExecutor(SAVE_THREADS, thread_name_prefix="broodline-save")
        self._saving[(shard.point, shard.first)] = (
            shard, rows, self._savers.submit(durable.write_bytes_atomic, self.parts / shard.name, image))
        self.collect()

    def collect(self, *, wait: bool = False) -> None:
        """Count in the shards whose files the threads have made durable (with ``wait``: every
        one, waiting for them)."""
        for key, (shard, rows, future) in list(self._saving.items()):
            if wait or future.done():
                del self._saving[key]
                try:
                    future.result()
                except OSError as err:
                    self._unclaim(shard)
                    raise ResultsError(self._write_failure(err)) from None
                self._record(shard, rows)

    def _record(self, shard: Shard, rows: ShardRows | None) -> None:
        """Count ``shard`` in, holding its ``rows`` for the merge while they fit."""
        key = (shard.point, shard.first)
        self.shards[key] = shard
        if rows is not None and self._held_bytes + rows.nbytes <= HELD_ROWS_BYTES:
            self._held[key] = rows
            self._held_bytes += rows.nbytes

    def _take_rows(self, shard: Shard) -> ShardRows:
        """The rows of ``shard`` for the merge: held in memory, else read from its file."""
        rows = self._held.pop((shard.point, shard.first), None)
        if rows is None:
            return shard_files.read_shard(self.parts / shard.name)
        self._held_bytes -= rows.nbytes
        return rows

    def _claim(self, shard: Shard) -> None:
        """Refuse ``shard`` if it overlaps one recorded or being saved; else index it.

        The shards of a point do not overlap, so the one that starts last at or before
        ``shard.last`` is the only one that can (a bisection, however many shards)."""
        firsts = self._firsts.setdefault(shard.point, [])
        i = bisect.bisect_right(firsts, shard.last)
        if i:
            key = (shard.point, firsts[i - 1])
            s = self.shards[key] if key in self.shards else self._saving[key][0]
            if s.last >= shard.first:
                raise ResultsError(f"replicates {shard.first}-{shard.last} of point {shard.point} "
                                   f"overlap shard {s.name}, already written")
        firsts.insert(i, shard.first)

    def _unclaim(self, shard: Shard) -> None:
        """Drop ``shard`` from the index (its save failed: it may be saved again)."""
        firsts = self._firsts[shard.point]
        del firsts[bisect.bisect_left(firsts, shard.first)]

    def shard_target(self, point: int) -> ShardTarget:
        """Where and how a batch of sweep point ``point`` is saved: what a worker process needs
        to write its own shard (``save_shard``), so that this writer only records it."""
        cache = self.__dict__.setdefault("_targets", {})
        if point not in cache:
            cache[point] = ShardTarget(self.parts, self.mode, self.n_alleles, self.n_ages,
                                       self._point_hash(point), YearsHeader.of(self.config.environment),
                                       self._probe())
        return cache[point]

    def _probe(self) -> str:
        """The name of this writer's probe file in the shards' folder, made on first use."""
        if "_probe_name" not in self.__dict__:
            name = f"writer-{os.getpid()}-{os.urandom(6).hex()}.probe"
            try:
                (self.parts / name).touch()
            except OSError as err:
                raise ResultsError(self._write_failure(err)) from None
            self._probe_name = name
        return self._probe_name

    def add_shard(self, shard: Shard, rows: ShardRows | None = None) -> None:
        """Record a shard a worker wrote itself (``save_shard`` with ``shard_target``), with
        its rows if the worker sent them (then the merge need not read the shard back)."""
        self._claim(shard)
        self._record(shard, rows)

    def _point_hash(self, point: int) -> str:
        """The hash of one sweep point's resolved config: what a shard of that point carries.

        Per point, not per experiment, so a design that adds sweep points as it goes
        (``analysis.locate``) keeps its earlier shards, while a shard from another seed,
        schedule or point is refused."""
        cache = self.__dict__.setdefault("_point_hashes", {})
        if point not in cache:
            cache[point] = config_hash(self.points[point].config)
        return cache[point]

    def save_error(self, err: OSError) -> ResultsError:
        """The error to raise when saving a batch failed (``err``, e.g. a full disk), wherever
        it was saved: what is saved is intact, and how to go on."""
        return ResultsError(self._write_failure(err))

    def _write_failure(self, err: OSError) -> str:
        reason = err.strerror or str(err)
        return (f"could not write results to {str(self.parts)!r}: {reason}. "
                f"The {self.done} replicates already saved are intact; fix the cause "
                "(free disk space, permissions) and finish with resume=True")

    # -- finishing ------------------------------------------------------------------
    def merge_ready(self, limit: int | None = None) -> bool:
        """Append to the merged file up to ``limit`` shards (all, by default) whose predecessors
        in (point, replicate) order are in; True if any was appended.

        The run calls it while it waits for workers, so the merge goes on with the run and
        only the last shards are left for ``finalize`` (which merges whatever is left)."""
        if self.complete:
            return False
        self.collect()
        merge = self.__dict__.get("_merging")
        if merge is None:
            merge = self._merging = _MergedFile(self)
        try:
            return merge.advance(self.shards, limit)
        except OSError as err:  # a full disk: drop the merged file; a later finalize starts it again
            merge.abandon()
            self._merging = None
            raise ResultsError(self._write_failure(err).replace("intact", "intact (as shards)")) from None

    def finalize(self) -> bool:
        """Merge every shard into the one results file, if all replicates are in.

        The merged file is built beside the running one (``NAME.tmp``, filled
        while the run goes on), made durable and renamed over it, then the
        shards are removed. Returns True when the file is complete.
        """
        if self.complete:
            self._remove_parts()
            return True
        self.collect(wait=True)
        if self.done < self.expected:
            return False
        self.merge_ready()
        try:
            self._merging.commit()
        except OSError as err:
            self._merging = None  # abandoned: a later finalize merges again from the shards
            raise ResultsError(self._write_failure(err).replace(
                "intact", "intact (as shards)")) from None
        self._merging = None
        self.complete = True
        self._remove_parts()
        return True

    def _remove_parts(self) -> None:
        for shard in list_shards(self.parts):
            (self.parts / shard.name).unlink(missing_ok=True)
        shutil.rmtree(self.parts, ignore_errors=True)
        self._unlock()

    def close(self) -> None:
        """Merge if every replicate is in, else leave the shards for a resume; release the lock."""
        try:
            if not self.complete and self._lock_fd is not None:
                self.collect(wait=True)
                if self.done == self.expected:
                    self.finalize()
        finally:
            self._stop_savers()
            self._unlock()

    def release(self) -> None:
        """Release the lock without merging (after an interruption or a failure); shards
        being saved are finished first (they are whole, or a ``.tmp`` deleted here)."""
        self._stop_savers()
        try:
            self.collect()  # (counted in, for the message of how much is saved)
        except ResultsError:
            pass
        merge = self.__dict__.pop("_merging", None)
        if merge is not None:
            merge.abandon()
        if self._lock_fd is not None:
            for leftover in [*self.parts.glob("*.tmp"), *self.parts.glob("*.probe")]:
                leftover.unlink(missing_ok=True)
        self._unlock()

    def _stop_savers(self) -> None:
        if self._savers is not None:
            self._savers.shutdown(wait=True)
            self._savers = None

    def __enter__(self):
        return self

    def __exit__(self, exc_type, *exc):
        if exc_type is None:
            self.close()
        else:
            self.release()


# each buffered column of the merge and the dataset it is appended to
_MERGED_PATHS = {**{name: f"replicates/{name}" for name in REPLICATE_COLUMNS},
                 "step": "trajectories/step", "counts": "trajectories/counts", YEARS: f"{YEARS}/type"}


class _MergedFile:
    """The finished results file under construction, as ``NAME.tmp`` beside the running one.

    Shards are read in canonical order (point, replicate) once every shard
    before them is in, while the run waits for its workers
    (``ResultsWriter.merge_ready``), so the merge goes on during the run
    instead of a second pass over every shard at its end. Rows are buffered
    (at most ``_MERGE_ROWS`` replicates or ``_MERGE_RECORDS`` census records,
    so memory stays flat) and appended to the ``.tmp`` file, which is open
    only while they are written. Until ``commit`` renames it into place
    nothing reads it: a crash leaves a ``.tmp`` that a resume deletes, and
    the shards stay until the merged file is in place.
    """

    def __init__(self, writer: ResultsWriter):
        self.writer = writer
        self.tmp = writer.path.with_name(writer.path.name + ".tmp")
        self.started = False  # the .tmp file holds the header and the rows written so far
        self.next = (0, 0)  # the (point, first replicate) of the shard needed next
        self.buffer: dict[str, list] = {name: [] for name in _MERGED_PATHS}  # rows not yet appended
        self.rows = self.records = self.offset = 0
        self.chunks = ChunkAppender()

    def _header(self, out) -> None:
        w = self.writer
        with h5py.File(w.path, "r") as head:
            for key, value in head.attrs.items():
                out.attrs[key] = value
            head.copy("points", out)
        out.attrs["complete"] = False  # set last: a file is complete only once all rows are in
        _empty_tables(out, w.mode, w.n_alleles, w.n_ages)
        _years_group(out, YearsHeader.of(w.config.environment))

    def advance(self, shards: dict, limit: int | None = None) -> bool:
        """Read up to ``limit`` (default: every) shard that comes next in order (``shards``:
        (point, first) -> Shard); True if any was read."""
        w = self.writer
        appended = 0
        while (limit is None or appended < limit) and (shard := shards.get(self.next)) is not None:
            appended += 1
            self._add(w._take_rows(shard))
            after = shard.last + 1
            self.next = (shard.point, after) if after < w.replicates else (shard.point + 1, 0)
            self.rows += shard.size
            if self.rows >= _MERGE_ROWS or self.records >= _MERGE_RECORDS:
                self._write()
        return appended > 0

    def _add(self, rows: ShardRows) -> None:
        buffer = self.buffer
        table = rows.table
        names = np.array([outcome_name(n) for n in rows.outcomes], dtype=OUTCOME_TEXT)
        for name in REPLICATE_COLUMNS:
            buffer[name].append(names[table[name]] if name == "outcome" else table[name])
        buffer["trajectory_start"][-1] = buffer["trajectory_start"][-1] + self.offset
        records = 0 if rows.steps is None else len(rows.steps)
        if records:
            buffer["step"].append(rows.steps)
            buffer["counts"].append(rows.counts)
        if rows.years is not None:
            buffer[YEARS].append(rows.years)
        self.offset += records
        self.records += records

    def _write(self, *, complete: bool = False) -> None:
        """Append the buffered rows to the ``.tmp`` file (created with the header the first
        time): whole chunks as the threads compress them, the rest when more come; with
        ``complete``, every row, and mark it complete."""
        buffer = self.buffer
        with durable.h5_write_errors(), h5py.File(self.tmp, "a" if self.started else "w") as out:
            if not self.started:
                self._header(out)
                self.started = True
            for name, path in _MERGED_PATHS.items():
                if buffer[name]:
                    self.chunks.append(out, path, buffer[name])
            for values in buffer.values():
                values.clear()
            self.rows = self.records = 0
            if complete:
                self.chunks.finish(out)
                out.attrs["complete"] = True
            out.flush()

    def commit(self) -> None:
        """Every shard is in: mark the file complete, make it durable, rename it into place."""
        try:
            self._write(complete=True)
            self.writer.compress_cpu_s += self.chunks.cpu_s
            durable.commit_file(self.tmp, self.writer.path)
        except BaseException:
            self.abandon()
            raise

    def abandon(self) -> None:
        """Stop without a file: delete the ``.tmp`` (the shards hold every row)."""
        self.started = False
        self.chunks.close()
        self.tmp.unlink(missing_ok=True)


def _empty_tables(f, mode, n_alleles, n_ages) -> None:
    reps = f.create_group("replicates")
    for name, (dtype, shape) in REPLICATE_COLUMNS.items():
        _column(reps, name, dtype, shape, REPLICATE_CHUNK)
    traj = f.create_group("trajectories")
    _column(traj, "step", np.int32, (), 4096)
    _column(traj, "counts", np.uint32, _counts_shape(mode, n_alleles, n_ages), 4096)


def fill_header(f, config, points, *, created: str | None = None, extra: dict | None = None) -> None:
    """Write a new results file's header into the open h5py file ``f``: the attributes,
    ``/points`` and the empty tables (``created`` kept when given; ``extra`` attributes added)."""
    mode = config.experiment.trajectory
    n_ages = max(max(s.n_ages for s in p.config.schedules()) for p in points)
    f.attrs.update(
        format=_FORMAT,
        format_version=FORMAT_VERSION,
        software_version=software_version(),
        created=datetime.now(UTC).isoformat(timespec="seconds"),
        config=json.dumps(config.model_dump(mode="json")),
        config_hash=config_hash(config),
        seed=config.experiment.seed,
        alleles=json.dumps(config.allele_names),
        n_ages=n_ages,
        resident=config.invasion.resident if config.invasion else "",
        mutant=config.invasion.mutant if config.invasion else "",
        trajectory=mode,
        n_points=len(points),
        replicates=config.experiment.replicates,
        complete=False,
    )
    pts = f.create_group("points", track_order=True)  # columns in sweep order
    pts.create_dataset("index", data=np.array([p.index for p in points], dtype=np.int32))
    pts.create_dataset("config", data=[json.dumps(p.config.model_dump(mode="json"))
                                       for p in points], dtype=_STR)
    for key in points[0].values:
        values = [p.values[key] for p in points]
        column = swept_column(values)
        if column is not None:
            pts.create_dataset(key, data=column)
        else:
            pts.create_dataset(key, data=[json.dumps(v) for v in values], dtype=_STR)
    if config.trait is not None:  # each allele's effort: turns counts by allele into the trait
        f.attrs["trait_efforts"] = json.dumps(config.efforts())
    _empty_tables(f, mode, len(config.allele_names), n_ages)
    _years_group(f, YearsHeader.of(config.environment))
    if created is not None:
        f.attrs["created"] = created
    f.attrs.update(extra or {})


def rewrite_header(path, config, points, *, extra: dict | None = None) -> None:
    """Replace a results file's header for a grown set of points, keeping its shards and its
    ``created`` time (a sequential design adds points as it goes). Call it while holding the
    file's lock (a ``ResultsWriter`` on it), before the shards are merged."""
    import h5py

    path = Path(path)
    created = None
    if path.exists():
        with h5py.File(path, "r") as f:
            created = f.attrs.get("created")
    durable.write_atomic(path, lambda f: fill_header(f, config, points, created=created, extra=extra))


def resumable_attrs(path) -> dict:
    """The root attributes of a results file to resume; ``ResultsError`` when it cannot be
    (not a results file: not HDF5, truncated, empty...; or another results format)."""
    from .readers import read_attrs  # pandas: only where a file is resumed

    where = str(path)
    try:
        attrs = read_attrs(path)
    except (OSError, ValueError) as err:
        raise ResultsError(f"cannot resume {where!r}: {err}") from None
    if attrs.get("format_version") != FORMAT_VERSION:
        raise ResultsError(f"cannot resume {where!r}: it has results format "
                           f"{attrs.get('format_version')} (broodline "
                           f"{attrs.get('software_version', 'unknown')}), this broodline writes "
                           f"{FORMAT_VERSION}: finish it with the version that started it, or "
                           "start it again with --overwrite")
    return attrs


def _shard_rows(path: Path, config_hash: str) -> int:
    """Replicate rows in a shard, or -1 if it cannot be read; ResultsError if another config
    wrote it (a shard from an older broodline, without the hash, is taken as it is)."""
    try:
        with h5py.File(path, "r") as f:
            written_by = f.attrs.get("config_hash", config_hash)
            rows = replicate_rows(f)
    except (OSError, KeyError):
        return -1
    if written_by != config_hash:
        raise ResultsError(f"shard {str(path)!r} was written by another config (hash "
                           f"{str(written_by)[:12]}, this run {config_hash[:12]}): it is not merged; "
                           "move it away, or pass overwrite=True to start again")
    return rows


def writer_state(path) -> str:
    """``complete``, ``running`` (a process holds the writer's lock) or ``stopped``."""
    if is_complete(Path(path)):
        return "complete"
    lock = parts_dir(path) / "lock"
    if fcntl is None or not lock.exists():
        return "stopped"
    try:
        fd = os.open(lock, os.O_RDONLY)
    except FileNotFoundError:  # the run finished just now
        return "complete" if is_complete(Path(path)) else "stopped"
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except OSError:
        return "running"
    finally:
        os.close(fd)  # releases the shared lock if it was taken
    return "stopped"
