"""The HDF5 results file: one per experiment, written by one process, read with h5py or pandas.

``layout`` states the file's tables and shard names (its docstring is the
format); ``durable`` writes files that exist whole or not at all;
``writer`` is the one writer (header, shards, lock, merge); ``readers``
read a finished file or the shards of one still being written.
"""

from . import layout, readers, writer
from .layout import FORMAT_VERSION, ConfigMismatchError, ResultsError, Shard, parts_dir, software_version
from .readers import *  # noqa: F403 (the readers' __all__ is the package's)
from .writer import ResultsWriter, rewrite_header, writer_state

__all__ = ["FORMAT_VERSION", "ResultsError", "ConfigMismatchError", "Shard", "ResultsWriter",
           "parts_dir", "software_version", "writer_state", "rewrite_header", *readers.__all__]
