"""A sweep point as the batches of a run need it: plain data, worked out once.

``PointRun.of(point)`` reads a sweep point's config once, in the process that
plans the run, into what ``run_replicates`` reads: the life cycle (whose
season kernel the engines sample), the starting census, the year types, the
mutant and the stop rule. Worker processes are sent a ``PointRun`` with each
batch, so they never import the config schema (pydantic and the schema's
classes, about a tenth of a second on the path from ``broodline run`` to its
first batch, measured). The config itself travels as pickled bytes and is
opened only where it is read: by the engine without a batch form (the Mesa
``agents`` engine), whose ``BroodModel`` takes the config.
"""

from __future__ import annotations

import pickle
from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

from .lifecycle import LifeCycle, initial_census
from .outcomes import mutant_index
from .vocabulary import COUNTING_ENGINES
from .years import YearTypes

if TYPE_CHECKING:
    from .config import Config, SweepPoint

__all__ = ["PointRun"]


@dataclass(frozen=True)
class PointRun:
    """One sweep point's replicates as an engine runs them (see the module's docstring).

    Attributes
    ----------
    index : int
        The sweep point (the first key of each replicate's stream).
    engine : str
        ``experiment.engine``.
    life : LifeCycle
    start : ndarray, shape (n_alleles, n_ages)
        The starting census (``sim.lifecycle.initial_census``).
    mutant : int or None
        The mutant allele's index (None without an ``[invasion]``).
    years : YearTypes or None
        The year types (None: a constant environment); ``shared_years`` as the config says.
    stop, max_steps, max_population, record_every, trajectory
        ``[experiment]``'s stop rule and records.
    """

    index: int
    engine: str
    life: LifeCycle
    start: np.ndarray
    mutant: int | None
    years: YearTypes | None
    shared_years: bool
    stop: str
    max_steps: int
    max_population: int
    record_every: int
    trajectory: str
    config_bytes: bytes

    @classmethod
    def of(cls, point: SweepPoint, start: np.ndarray | None = None) -> PointRun:
        """The run of ``point`` (its starting census ``start`` if the caller has it)."""
        config = point.config
        exp = config.experiment
        life = LifeCycle.from_config(config)
        years = config.year_types()
        return cls(
            index=point.index, engine=exp.engine, life=life,
            start=initial_census(config, life) if start is None else np.asarray(start),
            mutant=mutant_index(config), years=years,
            shared_years=years is not None and config.environment.shared_years,
            stop=exp.stop, max_steps=exp.max_steps, max_population=exp.max_population,
            record_every=exp.record_every, trajectory=exp.trajectory,
            config_bytes=pickle.dumps(config, protocol=pickle.HIGHEST_PROTOCOL),
        )

    @property
    def held(self) -> int:
        """Entries a batch holds for one replicate at its start: a count per class with an
        engine that counts classes (``COUNTING_ENGINES``), else each individual."""
        return int(self.start.size if self.engine in COUNTING_ENGINES else self.start.sum())

    @cached_property
    def config(self) -> Config:
        """The point's config (imports the config schema where it was not loaded)."""
        return pickle.loads(self.config_bytes)

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state.pop("config", None)  # travels as config_bytes only, opened where it is read
        return state
