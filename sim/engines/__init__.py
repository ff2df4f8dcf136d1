"""Engines: each samples the same season kernel for a population, season by season.

The engine contract
-------------------
An engine is built as ``Engine(model, life, census)`` from the model (for its
``rng``), the ``LifeCycle`` (whose ``kernel`` states the season's rates) and
a starting census (counts by allele and age index); it offers ``step()`` and
``census()``. Engines differ in how they hold individuals, never in the model
they simulate: they read every rate from ``life.kernel`` and branch on no
allele, form or distribution name.

An engine whose class has a ``populations`` attribute also runs many
replicates as one batch (``populations(life, census, rngs)`` with a census of
shape (n_replicates, n_alleles, n_ages) and one generator per replicate,
offering ``step()``, ``census()``, ``keep(which)`` and ``sizes``); the
experiment runner uses it to advance small populations together.

Every engine in ``ENGINES`` must pass ``tests/test_engine_conformance.py``
(census bookkeeping, outcomes, reproducibility from keyed streams, agreement
in distribution with the ``agents`` reference): adding an engine is one
``ENGINES`` entry here plus its word in the schema (``ExperimentSection.engine``).
"""

from collections.abc import Mapping
from importlib import import_module

from .counts import CountsEngine, CountsPopulations
from .individual import IndividualEngine, IndividualPopulations

# The agents engine imports mesa (half a second): loaded when first asked for, so a worker
# process running the array engines never imports it.
_LAZY = {"AgentsEngine": ".agents"}


class _Registry(Mapping):
    """Engine word -> engine class; a class named by its module is imported when first asked for."""

    def __init__(self, entries: dict):
        self._entries = entries

    def __getitem__(self, name: str):
        entry = self._entries[name]
        if isinstance(entry, str):
            entry = self._entries[name] = __getattr__(entry)
        return entry

    def __iter__(self):
        return iter(self._entries)

    def __len__(self) -> int:
        return len(self._entries)


def __getattr__(name: str):
    if name not in _LAZY:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(_LAZY[name], __name__), name)
    globals()[name] = value
    return value


ENGINES = _Registry({"individual": IndividualEngine, "agents": "AgentsEngine", "counts": CountsEngine})
REFERENCE_ENGINE = "agents"  # the plain statement of the season the others are tested against


def batchable(engine: str) -> bool:
    """True where the engine named ``engine`` runs many replicates as one batch."""
    return hasattr(ENGINES[engine], "populations")


__all__ = ["ENGINES", "REFERENCE_ENGINE", "batchable", "IndividualEngine",
           "IndividualPopulations", "AgentsEngine", "CountsEngine", "CountsPopulations"]
