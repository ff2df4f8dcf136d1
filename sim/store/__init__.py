"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

``layout`` states the file's tables and shard names (its docstring is the
format); ``durable`` writes files that exist whole or not at all;
``writer`` is the one writer (header, shards, lock, merge); ``readers``
read a finished file or the shards of one still being written.

The readers (which need pandas) are imported when first used (PEP 562): a
worker process that saves its own shards imports the writer only.
"""

from importlib import import_module

from . import layout, writer  # noqa: F401  (sim.store.layout and .writer, named by their users)
from .layout import FORMAT_VERSION, ConfigMismatchError, ResultsError, Shard, parts_dir, software_version
from .writer import ResultsWriter, ShardRows, ShardTarget, rewrite_header, save_shard, shard_rows, writer_state

_READERS = ("read_attrs", "read_points", "read_replicates", "read_trajectories", "read_point_configs",
            "read_outcomes", "count_outcomes", "read_years", "read_trait")


def __getattr__(name: str):
    if name == "readers":
        return import_module(".readers", __name__)
    if name not in _READERS:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(".readers", __name__), name)
    globals()[name] = value
    return value


__all__ = ["FORMAT_VERSION", "ResultsError", "ConfigMismatchError", "Shard", "ResultsWriter",
           "ShardTarget", "ShardRows", "shard_rows", "save_shard", "parts_dir", "software_version", "writer_state",
           "rewrite_header", *_READERS]
