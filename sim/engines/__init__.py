"""Engines: each advances a population through one season of the same life cycle.

An engine is built as ``Engine(model, life, census)`` from the model (for its
``rng``), the ``LifeCycle`` and a starting census (counts by allele and age
index); it offers ``step()`` and ``census()``. Engines differ in how they hold
individuals, never in the model they simulate.
"""

from .agents import AgentsEngine
from .individual import IndividualEngine

ENGINES = {"individual": IndividualEngine, "agents": AgentsEngine}

__all__ = ["ENGINES", "IndividualEngine", "AgentsEngine"]
