"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

Layout (``format_version`` 1; every table is a group of equal-length column
datasets, chunked and gzip-compressed)::

    /                      attrs: format = "broodline-results", format_version,
                                  software_version, created, config (resolved TOML
                                  as JSON), config_hash, seed, alleles, n_ages,
                                  resident, mutant ("" without [invasion])
    /points/               one row per sweep point
        index              int32
        config             the point's full config as JSON (str)
        <swept path>       one column per swept key, e.g. "allele.one-shot.fecundity"
    /replicates/           one row per finished replicate, in the order written
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
        counts             uint32 (n_records, n_alleles, n_ages)
"""

from __future__ import annotations

import json
import os
from datetime import UTC, datetime
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

__all__ = [
    "FORMAT_VERSION",
    "ResultsWriter",
    "software_version",
    "read_attrs",
    "read_points",
    "read_replicates",
    "read_trajectories",
    "read_point_configs",
]

FORMAT_VERSION = 1
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


def software_version() -> str:
    try:
        return version("broodline")
    except PackageNotFoundError:  # running from a source tree
        return "0+unknown"


def _column(group, name, dtype, shape, chunk):
    return group.create_dataset(name, shape=(0, *shape), maxshape=(None, *shape), dtype=dtype,
                                chunks=(chunk, *shape), **_COMPRESSION)


def _append(ds, values) -> None:
    values = np.asarray(values, dtype=object if ds.dtype == _STR else ds.dtype)
    n = ds.shape[0]
    ds.resize(n + len(values), axis=0)
    ds[n:] = values


class ResultsWriter:
    """Create a results file and append finished replicates in batches.

    Parameters
    ----------
    path : path-like
        The results file. An existing file is refused unless ``overwrite``.
    config : Config
        The experiment config (with its sweep).
    points : list of SweepPoint
    """

    def __init__(self, path, config, points, *, overwrite: bool = False):
        from .config import config_hash  # local: store is importable without pydantic models

        self.path = Path(path)
        if self.path.exists() and not overwrite:
            raise FileExistsError(f"results file {str(self.path)!r} exists; pass --overwrite to replace it")
        if not self.path.parent.exists():
            raise FileNotFoundError(f"output folder {str(self.path.parent)!r} does not exist")
        n_alleles = len(config.allele)
        self.n_ages = max(max(s.n_ages for s in p.config.schedules()) for p in points)
        self._file = h5py.File(self.path, "w")
        f = self._file
        f.attrs.update(
            format=_FORMAT,
            format_version=FORMAT_VERSION,
            software_version=software_version(),
            created=datetime.now(UTC).isoformat(timespec="seconds"),
            config=json.dumps(config.model_dump(mode="json")),
            config_hash=config_hash(config),
            seed=config.experiment.seed,
            alleles=json.dumps(config.allele_names),
            n_ages=self.n_ages,
            resident=config.invasion.resident if config.invasion else "",
            mutant=config.invasion.mutant if config.invasion else "",
        )
        pts = f.create_group("points")
        pts.create_dataset("index", data=np.array([p.index for p in points], dtype=np.int32))
        pts.create_dataset("config", data=[json.dumps(p.config.model_dump(mode="json")) for p in points],
                           dtype=_STR)
        for key in (config.sweep or {}):
            values = [p.values[key] for p in points]
            try:
                pts.create_dataset(key, data=np.asarray(values, dtype=float))
            except (TypeError, ValueError):
                pts.create_dataset(key, data=[json.dumps(v) for v in values], dtype=_STR)
        reps = f.create_group("replicates")
        for name, (dtype, shape) in _REPLICATE_COLUMNS.items():
            _column(reps, name, dtype, shape, 1024)
        traj = f.create_group("trajectories")
        _column(traj, "step", np.int32, (), 4096)
        _column(traj, "counts", np.uint32, (n_alleles, self.n_ages), 4096)
        self._rows = 0
        self.flush()

    def write(self, results) -> None:
        """Append a batch of ReplicateResult objects, then flush to disk."""
        if not results:
            return
        f = self._file
        traj = f["trajectories"]
        start = traj["step"].shape[0]
        lengths = [r.record_steps.size for r in results]
        starts = start + np.concatenate([[0], np.cumsum(lengths)[:-1]])
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
        for name, values in columns.items():
            _append(f["replicates"][name], values)
        _append(traj["step"], np.concatenate([r.record_steps for r in results]))
        _append(traj["counts"], np.concatenate([_pad_ages(r.trajectory, self.n_ages) for r in results]))
        self._rows += len(results)
        self.flush()

    def flush(self) -> None:
        self._file.flush()
        try:
            os.fsync(self._file.id.get_vfd_handle())
        except (OSError, AttributeError, ValueError):
            pass  # fsync is best effort on drivers without a file handle

    def close(self) -> None:
        if self._file.id.valid:
            self.flush()
            self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _pad_ages(trajectory: np.ndarray, n_ages: int) -> np.ndarray:
    """Pad a point's trajectory to the file's age axis (points may differ in schedule length)."""
    extra = n_ages - trajectory.shape[-1]
    if extra == 0:
        return trajectory
    return np.concatenate([trajectory, np.zeros((*trajectory.shape[:-1], extra), trajectory.dtype)], -1)


# -- reading ------------------------------------------------------------------------
def _open(path) -> h5py.File:
    path = Path(path)
    if not path.is_file():
        raise FileNotFoundError(f"results file {str(path)!r} not found")
    f = h5py.File(path, "r")
    if f.attrs.get("format") != _FORMAT:
        f.close()
        raise ValueError(f"{str(path)!r} is not a broodline results file")
    return f


def read_attrs(path) -> dict:
    """File-level metadata: versions, seed, alleles and the resolved config (as a dict)."""
    with _open(path) as f:
        attrs = {k: (v.item() if hasattr(v, "item") else v) for k, v in f.attrs.items()}
    attrs["config"] = json.loads(attrs["config"])
    attrs["alleles"] = json.loads(attrs["alleles"])
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


def read_replicates(path) -> pd.DataFrame:
    """One row per replicate: point, replicate, seed, spawn key, outcome, winner name, steps..."""
    with _open(path) as f:
        g = f["replicates"]
        alleles = json.loads(f.attrs["alleles"])
        data = {}
        for name in _REPLICATE_COLUMNS:
            col = g[name]
            if name == "outcome":
                data[name] = col.asstr()[:]
            elif name == "spawn_key":
                key = col[:]
                data["spawn_key"] = [tuple(k) for k in key]
            else:
                data[name] = col[:]
    df = pd.DataFrame(data)
    df["winner"] = [alleles[w] if w >= 0 else "" for w in df["winner"]]
    return df


def read_trajectories(path, *, points=None, replicates=None, by_age: bool = True) -> pd.DataFrame:
    """Census trajectories in long form: point, replicate, step, allele, [age,] count.

    ``points`` and ``replicates`` (lists of indices) select replicates before
    anything is expanded; ``by_age=False`` sums over ages.
    """
    reps = read_replicates(path)
    if points is not None:
        reps = reps[reps["point"].isin(points)]
    if replicates is not None:
        reps = reps[reps["replicate"].isin(replicates)]
    attrs = read_attrs(path)
    alleles = attrs["alleles"]
    frames = []
    with _open(path) as f:
        steps_ds, counts_ds = f["trajectories"]["step"], f["trajectories"]["counts"]
        for row in reps.itertuples(index=False):
            sl = slice(int(row.trajectory_start), int(row.trajectory_start + row.trajectory_length))
            steps, counts = steps_ds[sl], counts_ds[sl].astype(np.int64)
            if not by_age:
                counts = counts.sum(axis=2, keepdims=True)
            t, a, g = counts.shape
            frame = pd.DataFrame({
                "point": row.point,
                "replicate": row.replicate,
                "step": np.repeat(steps, a * g),
                "allele": np.tile(np.repeat(np.array(alleles, dtype=object), g), t),
                "age": np.tile(np.arange(1, g + 1), t * a),
                "count": counts.ravel(),
            })
            frames.append(frame if by_age else frame.drop(columns="age"))
    if not frames:
        cols = ["point", "replicate", "step", "allele", "age", "count"]
        return pd.DataFrame(columns=cols if by_age else [c for c in cols if c != "age"])
    return pd.concat(frames, ignore_index=True)
