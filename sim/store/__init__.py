"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

``layout`` states the file's tables and shard names (its docstring is the
format); ``durable`` writes files that exist whole or not at all;
``shards`` saves one batch as a shard, in whichever process ran it;
``writer`` is the one writer (header, lock, merge); ``readers`` read a
finished file or the shards of one still being written.

The writer (which needs the config schema) and the readers (which need
pandas) are imported when first used (PEP 562): a worker process that saves
its own shards imports ``shards`` only.
"""

from importlib import import_module

from . import layout, shards  # noqa: F401  (sim.store.layout and .shards, named by their users)
from .layout import FORMAT_VERSION, ConfigMismatchError, ResultsError, Shard, parts_dir, software_version
from .shards import ShardRows, ShardTarget, save_shard, shard_rows

_WRITER = ("ResultsWriter", "rewrite_header", "writer_state", "resumable_attrs")

_READERS = ("read_attrs", "read_points", "read_replicates", "read_trajectories", "read_point_configs",
            "read_outcomes", "count_outcomes", "read_years", "read_trait")


def __getattr__(name: str):
    if name in ("readers", "writer"):
        return import_module(f".{name}", __name__)
    if name in _WRITER:
        value = getattr(import_module(".writer", __name__), name)
        globals()[name] = value
        return value
    if name not in _READERS:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(".readers", __name__), name)
    globals()[name] = value
    return value


__all__ = ["FORMAT_VERSION", "ResultsError", "ConfigMismatchError", "Shard", "ResultsWriter",
           "ShardTarget", "ShardRows", "shard_rows", "save_shard", "parts_dir", "software_version", "writer_state",
           "rewrite_header", "resumable_attrs", *_READERS]
