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

from .agents import AgentsEngine
from .counts import CountsEngine, CountsPopulations
from .individual import IndividualEngine, IndividualPopulations

ENGINES = {"individual": IndividualEngine, "agents": AgentsEngine, "counts": CountsEngine}
REFERENCE_ENGINE = "agents"  # the plain statement of the season the others are tested against


def batchable(engine: str) -> bool:
    """True where the engine named ``engine`` runs many replicates as one batch."""
    return hasattr(ENGINES[engine], "populations")


__all__ = ["ENGINES", "REFERENCE_ENGINE", "batchable", "IndividualEngine",
           "IndividualPopulations", "AgentsEngine", "CountsEngine", "CountsPopulations"]
