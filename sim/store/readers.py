"""Readers of a results file, finished or still being written (then its shards are read)."""

from __future__ import annotations

import json
from contextlib import contextmanager
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

from ..config import Config
from ..vocabulary import outcome_name
from .layout import (
    REPLICATE_COLUMNS,
    YEARS,
    DamagedResultsError,
    list_shards,
    open_results,
    parts_dir,
    replicate_column,
    replicate_rows,
)

__all__ = [
    "read_attrs",
    "read_points",
    "read_replicates",
    "read_trajectories",
    "read_point_configs",
    "read_outcomes",
    "count_outcomes",
    "read_years",
    "read_trait",
]


@contextmanager
def _reading(path, *, shard: bool = False):
    """A failed read of a results file or shard (a dataset deleted, a corrupted B-tree, a
    truncated or garbage shard) as one ``DamagedResultsError`` naming the file."""
    try:
        yield
    except FileNotFoundError:
        raise
    except (OSError, KeyError, ValueError, TypeError, json.JSONDecodeError) as err:
        if isinstance(err, DamagedResultsError):
            raise
        reason = str(err).strip("'\"") or type(err).__name__
        if shard:
            raise DamagedResultsError(
                f"shard {str(path)!r} cannot be read ({reason}): finishing the run with resume=True "
                "deletes it and runs its batch again") from None
        raise DamagedResultsError(f"{str(path)!r} cannot be read: {reason} (damaged or incomplete "
                                  "results file)") from None


def _valid_shards(parts, n_points: int, replicates: int) -> list:
    """The shards a writer would keep: inside the experiment, none overlapping an earlier one."""
    kept, end = [], {}
    for shard in list_shards(parts):
        if shard.point < n_points and shard.last < replicates and shard.first > end.get(shard.point, -1):
            end[shard.point] = shard.last
            kept.append(shard)
    return kept


class _Blocks:
    """The tables of a results file as blocks: the file itself when complete, else its shards.

    ``offsets`` are each block's first row in the concatenated /trajectories,
    so ``trajectory_start`` means the same in both forms. Shards outside the
    experiment or overlapping another are not read (a resume deletes them).
    """

    def __init__(self, path):
        self.path = Path(path)
        with open_results(self.path) as f, _reading(self.path):
            self.complete = bool(f.attrs.get("complete", True))
            shape = (int(f.attrs.get("n_points", 0)), int(f.attrs.get("replicates", 0)))
        self.files = [self.path] if self.complete else \
            [parts_dir(self.path) / s.name for s in _valid_shards(parts_dir(self.path), *shape)]

    def __iter__(self):
        offset = 0
        for name in self.files:
            with _reading(name, shard=not self.complete):
                f = h5py.File(name, "r")
            with f, _reading(name, shard=not self.complete):
                yield f, offset
                offset += f["trajectories"]["step"].shape[0]


def _read_blocks(path, read):
    """``read(file, offset)`` over every block, retried if the run finished (and merged) meanwhile."""
    for attempt in range(3):
        blocks = _Blocks(path)
        out = []
        try:
            for f, offset in blocks:
                with _reading(f.filename, shard=not blocks.complete):
                    out.append(read(f, offset))
            return out
        except FileNotFoundError:
            if attempt == 2:
                raise
    raise AssertionError("unreachable")


def read_attrs(path) -> dict:
    """File-level metadata: versions, seed, alleles and the resolved config (as a dict)."""
    with open_results(path) as f, _reading(path):
        attrs = {k: (v.item() if hasattr(v, "item") else v) for k, v in f.attrs.items()}
        attrs["config"] = json.loads(attrs["config"])
        attrs["alleles"] = json.loads(attrs["alleles"])
        if "trait_efforts" in attrs:
            attrs["trait_efforts"] = json.loads(attrs["trait_efforts"])
    attrs.setdefault("complete", True)  # format 1 files were written whole
    attrs.setdefault("trajectory", "by-age")
    return attrs


def read_points(path) -> pd.DataFrame:
    """The sweep points: ``point`` and one column per swept key."""
    with open_results(path) as f, _reading(path):
        g = f["points"]
        data = {"point": g["index"][:]}
        for key in g:
            if key not in ("index", "config"):
                col = g[key][:]
                data[key] = [json.loads(v) for v in col.astype(str)] if col.dtype.kind in "OS" else col
    return pd.DataFrame(data)


def read_point_configs(path) -> list:
    """Each sweep point's full config, validated again as a ``Config``."""
    with open_results(path) as f, _reading(path):
        texts = f["points"]["config"].asstr()[:]
    return [Config.model_validate(json.loads(t)) for t in texts]


def _outcome_names(stored: np.ndarray) -> np.ndarray:
    """Outcomes as this version names them (files from other versions are read alike)."""
    names, codes = np.unique(stored, return_inverse=True)
    return np.array([outcome_name(n) for n in names], dtype=object)[codes.reshape(-1)]


def _replicate_columns(f, offset, names) -> dict:
    out = {}
    for name in names:
        col = replicate_column(f, name)
        out[name] = _outcome_names(col) if name == "outcome" else col
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


_CHUNK_ROWS = 1 << 18  # rows read at once by count_outcomes: its memory is flat in replicates


def count_outcomes(path) -> pd.DataFrame:
    """How many replicates of each point ended in each outcome so far: ``point``, ``outcome``,
    ``count``; read in chunks, so a billion replicates cost what a million do."""
    def read(f, offset):
        counts = {}
        for start in range(0, replicate_rows(f), _CHUNK_ROWS):
            rows = slice(start, start + _CHUNK_ROWS)
            chunk = pd.DataFrame({"point": replicate_column(f, "point", rows),
                                  "outcome": _outcome_names(replicate_column(f, "outcome", rows))})
            for key, n in chunk.value_counts(sort=False).items():
                counts[key] = counts.get(key, 0) + n
        return counts

    total = {}
    for counts in _read_blocks(path, read):
        for key, n in counts.items():
            total[key] = total.get(key, 0) + n
    keys = sorted(total)  # typed columns even before the first batch is saved (no rows yet)
    return pd.DataFrame({"point": np.array([p for p, _ in keys], np.int64),
                         "outcome": pd.Series([o for _, o in keys], dtype=object),
                         "count": np.array([total[k] for k in keys], np.int64)})


def read_replicates(path) -> pd.DataFrame:
    """One row per replicate: point, replicate, seed, spawn key, outcome, winner name, steps...

    Ordered by (point, replicate). For a run still going (or stopped before
    the end), the replicates finished so far.
    """
    alleles = read_attrs(path)["alleles"]
    parts = _read_blocks(path, lambda f, o: _replicate_columns(f, o, REPLICATE_COLUMNS))
    data = {}
    for name, (dtype, shape) in REPLICATE_COLUMNS.items():
        cols = [p[name] for p in parts]
        data[name] = np.concatenate(cols) if cols else np.zeros((0, *shape), object if name == "outcome" else dtype)
    data["spawn_key"] = [tuple(k) for k in data["spawn_key"]]
    df = pd.DataFrame(data)
    df["winner"] = [alleles[w] if w >= 0 else "" for w in df["winner"]]
    return df


def _selected(reps: dict, points, replicates) -> np.ndarray:
    """Which replicate rows the ``points`` and ``replicates`` selections keep (None: all)."""
    keep = np.ones(reps["point"].size, bool)
    if points is not None:
        keep &= np.isin(reps["point"], list(points))
    if replicates is not None:
        keep &= np.isin(reps["replicate"], list(replicates))
    return keep


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
        keep = _selected(reps, points, replicates)
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


def read_years(path, *, points=None, replicates=None) -> pd.DataFrame:
    """The year type of every season, in long form: point, replicate, step, year.

    ``step`` is the season (1 for the first season run; the census at step t
    follows the season of year type ``year`` at step t). ``points`` and
    ``replicates`` select as in ``read_trajectories``. A file without
    ``[environment]`` has no years (an empty table).
    """
    def read(f, offset):
        if YEARS not in f:
            return []
        names = np.array(json.loads(f[YEARS].attrs["names"]), dtype=object)
        reps = _replicate_columns(f, 0, ("point", "replicate", "steps"))
        starts = np.concatenate([[0], np.cumsum(reps["steps"].astype(np.int64))[:-1]])
        keep = _selected(reps, points, replicates)
        types = f[YEARS]["type"]
        frames = []
        for i in np.flatnonzero(keep):
            n = int(reps["steps"][i])
            frames.append(pd.DataFrame({
                "point": reps["point"][i], "replicate": reps["replicate"][i],
                "step": np.arange(1, n + 1), "year": names[types[starts[i]:starts[i] + n]]}))
        return frames

    frames = [frame for block in _read_blocks(path, read) for frame in block]
    if not frames:
        return pd.DataFrame(columns=["point", "replicate", "step", "year"])
    return pd.concat(frames, ignore_index=True)


def read_trait(path, *, points=None, replicates=None) -> pd.DataFrame:
    """The effort distribution of a ``[trait]`` run over time, one row per recorded census.

    Each allele of a trait run is one grid value of effort (the file's
    ``trait_efforts`` attribute, in allele order), so the census counts by
    allele are the distribution of effort among individuals.

    Parameters
    ----------
    path : path-like
        A results file of a config with ``[trait]`` and trajectories recorded
        (``experiment.trajectory`` "by-allele" or "by-age").
    points, replicates : list of int, optional
        Select replicates before anything is read.

    Returns
    -------
    DataFrame
        ``point``, ``replicate``, ``step``, ``census`` (individuals counted),
        ``mean_effort`` and ``sd_effort`` (mean and standard deviation of E
        over the census's individuals; NaN for an empty census).
    """
    attrs = read_attrs(path)
    if "trait_efforts" not in attrs:
        raise ValueError(f"{str(path)!r} is not a [trait] run (no trait_efforts attribute)")
    if attrs["trajectory"] == "none":
        raise ValueError(f"{str(path)!r} recorded no trajectories (experiment.trajectory = 'none')")
    efforts = np.asarray(attrs["trait_efforts"], dtype=float)

    def read(f, offset):
        reps = _replicate_columns(f, 0, ("point", "replicate", "trajectory_start", "trajectory_length"))
        keep = _selected(reps, points, replicates)
        frames = []
        for i in np.flatnonzero(keep):
            start = int(reps["trajectory_start"][i])
            sl = slice(start, start + int(reps["trajectory_length"][i]))
            counts = f["trajectories"]["counts"][sl].astype(np.float64)
            if counts.ndim == 3:
                counts = counts.sum(axis=2)
            n = counts.sum(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                mean = counts @ efforts / n
                var = counts @ efforts**2 / n - mean**2
            frames.append(pd.DataFrame({
                "point": reps["point"][i], "replicate": reps["replicate"][i],
                "step": f["trajectories"]["step"][sl], "census": n.astype(np.int64),
                "mean_effort": mean, "sd_effort": np.sqrt(np.clip(var, 0.0, None)),
            }))
        return frames

    frames = [frame for block in _read_blocks(path, read) for frame in block]
    if not frames:
        return pd.DataFrame(columns=["point", "replicate", "step", "census", "mean_effort", "sd_effort"])
    return pd.concat(frames, ignore_index=True)
