"""Tables of a results file written as CSV (or Parquet), for other tools: ``broodline export``.

``replicates``: one row per replicate (the ``sim.store.read_replicates``
columns, the spawn key as ``spawn_point`` and ``spawn_replicate``).
``trajectories``: the census in long form, one row per (replicate, season,
allele[, age]), written point by point so memory stays bounded.
``points``: one row per sweep point: with ``[invasion]`` the ``compare``
table, otherwise the swept values and the outcome counts.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pandas as pd

from sim.outputs import check_output_file
from sim.store import read_attrs, read_points, read_replicates, read_trajectories

from .comparison import IncompleteResultsWarning, compare, experiment_config

__all__ = ["TABLES", "export"]

TABLES = ("replicates", "trajectories", "points")


class _Sink:
    """Appends DataFrames to one CSV or Parquet file."""

    def __init__(self, out: Path):
        self.out, self.parquet, self.writer, self.first = out, out.suffix.lower() == ".parquet", None, True
        if self.parquet:
            try:
                import pyarrow  # noqa: F401
            except ImportError:
                raise ValueError(
                    f"-o {out}: writing Parquet needs pyarrow (pip install pyarrow); or write .csv"
                ) from None

    def write(self, frame: pd.DataFrame) -> None:
        if self.parquet:
            import pyarrow as pa
            import pyarrow.parquet as pq

            table = pa.Table.from_pandas(frame, preserve_index=False)
            if self.writer is None:
                self.writer = pq.ParquetWriter(self.out, table.schema)
            self.writer.write_table(table.cast(self.writer.schema))
        else:
            frame.to_csv(self.out, mode="w" if self.first else "a", header=self.first, index=False)
        self.first = False

    def close(self) -> None:
        if self.writer is not None:
            self.writer.close()
            self.writer = None


def _replicates(path) -> pd.DataFrame:
    reps = read_replicates(path)
    keys = reps.pop("spawn_key")
    reps.insert(4, "spawn_point", [k[0] for k in keys])
    reps.insert(5, "spawn_replicate", [k[1] for k in keys])
    return reps


def _points(path) -> pd.DataFrame:
    if experiment_config(path).invasion is not None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", IncompleteResultsWarning)
            return compare(path)
    from .reporting import outcome_counts

    return outcome_counts(path)


def export(path, what: str, out, *, overwrite: bool = False) -> Path:
    """Write one table of a results file to ``out`` (.csv, or .parquet with pyarrow).

    Parameters
    ----------
    path : path-like
        A results file.
    what : {"replicates", "trajectories", "points"}
    out : path-like
        The file to write; its suffix chooses the format.
    overwrite : bool, optional
        Replace ``out`` if it exists (otherwise FileExistsError).

    Returns
    -------
    Path
        ``out``.
    """
    if what not in TABLES:
        raise ValueError(f"--what must be one of {', '.join(TABLES)}; got {what!r}")
    out = Path(out)
    check_output_file(out, inputs=[path])
    if out.suffix.lower() not in (".csv", ".parquet"):
        raise ValueError(f"-o {out}: the file name must end in .csv or .parquet")
    if not out.parent.exists():
        raise FileNotFoundError(f"output folder {str(out.parent)!r} does not exist")
    if out.exists() and not overwrite:
        raise FileExistsError(f"{out} exists; pass --overwrite to replace")
    attrs = read_attrs(path)
    sink = _Sink(out)
    tmp = out.with_name(out.name + ".tmp")
    sink.out = tmp
    try:
        if what == "replicates":
            sink.write(_replicates(path))
        elif what == "points":
            sink.write(_points(path))
        else:
            by_age = attrs.get("trajectory") == "by-age"
            frame = None
            for point in read_points(path)["point"]:
                frame = read_trajectories(path, points=[int(point)], by_age=by_age)
                if len(frame):
                    sink.write(frame)
            if sink.first:  # no rows at all (trajectory = "none"): the header alone
                sink.write(frame if frame is not None else read_trajectories(path, points=[], by_age=by_age))
                if attrs.get("trajectory") == "none":
                    warnings.warn(f"{path} keeps no trajectories (trajectory = \"none\"): {out} holds "
                                  "the header only", stacklevel=2)
        sink.close()
        tmp.replace(out)
    finally:
        sink.close()
        tmp.unlink(missing_ok=True)
    return out
