"""Engines: each advances a population through one season of the same life cycle.

An engine is built as ``Engine(model, life, census)`` from the model (for its
``rng``), the ``LifeCycle`` and a starting census (counts by allele and age
index); it offers ``step()`` and ``census()``. Engines differ in how they hold
individuals, never in the model they simulate.

An engine whose class has a ``populations`` attribute also runs many
replicates as one batch (``populations(life, census, rngs)`` with a census of
shape (n_replicates, n_alleles, n_ages) and one generator per replicate,
offering ``step()``, ``census()``, ``keep(which)`` and ``sizes``); the
experiment runner uses it to advance small populations together.
"""

from .agents import AgentsEngine
from .counts import CountsEngine, CountsPopulations
from .individual import IndividualEngine, IndividualPopulations

ENGINES = {"individual": IndividualEngine, "agents": AgentsEngine, "counts": CountsEngine}

__all__ = ["ENGINES", "IndividualEngine", "IndividualPopulations", "AgentsEngine",
           "CountsEngine", "CountsPopulations"]
