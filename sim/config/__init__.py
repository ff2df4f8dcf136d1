"""Experiment configuration: the schema, sweep paths, loading and provenance.

``schema`` declares the TOML vocabulary and every constraint once;
``sweep`` reads and writes paths and expands ``[sweep]`` into points;
``messages`` words validation errors; ``loading`` reads TOML;
``provenance`` hashes a config and lists the differences between two.
"""

from . import loading, provenance, schema, sweep
from .loading import *  # noqa: F403 (each module's __all__ is the package's)
from .provenance import *  # noqa: F403
from .schema import *  # noqa: F403
from .sweep import *  # noqa: F403

__all__ = [*schema.__all__, *sweep.__all__, *loading.__all__, *provenance.__all__]
