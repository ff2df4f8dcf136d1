"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

``layout`` states the file's tables and shard names (its docstring is the
format); ``durable`` writes files that exist whole or not at all;
``writer`` is the one writer (header, shards, lock, merge); ``readers``
read a finished file or the shards of one still being written.
"""

from .layout import (
    FORMAT_VERSION,
    ConfigMismatchError,
    ResultsError,
    Shard,
    parts_dir,
    software_version,
)
from .readers import (
    read_attrs,
    read_outcomes,
    read_point_configs,
    read_points,
    read_replicates,
    read_trajectories,
)
from .writer import ResultsWriter, writer_state

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
