"""An experiment's life cycle as the engines take it, and the starting census.

A ``LifeCycle`` holds what a config says about the season (the alleles'
schedules on one age axis, density dependence, the offspring law, mutation);
its ``kernel`` (``sim.kernel.SeasonKernel``) states the season's rates from
them. Engines take a ``LifeCycle`` and never branch on allele, form or
distribution names.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

from .care import ParentalCare
from .density import DensityDependence
from .kernel import SeasonKernel
from .meanfield import solve_equilibrium, stable_age_distribution
from .mutation import Mutation
from .schedules import stack_schedules
from .vocabulary import MAX_COUNT

if TYPE_CHECKING:  # the config schema (pydantic) is not imported by the engines' worker processes
    from .config import Config

__all__ = ["LifeCycle", "initial_census", "round_preserving_total"]


@dataclass(frozen=True)
class LifeCycle:
    """All alleles' schedules on one age axis plus the season's shared rules.

    Attributes
    ----------
    M, S : ndarray, shape (n_alleles, n_ages)
        Mean fecundity m(a) and survival s(a) by allele and census age.
    C : ndarray, shape (n_alleles,)
        Juvenile survival c by allele.
    density : DensityDependence
    offspring : offspring distribution (``draw``, ``draw_total``, ``pgf``)
    mutation : Mutation
    care : ParentalCare or None
        Parental care and brood effects on recruitment (None: none).
    """

    M: np.ndarray
    S: np.ndarray
    C: np.ndarray
    density: DensityDependence
    offspring: object
    mutation: Mutation
    care: ParentalCare | None = None

    @classmethod
    def from_config(cls, config: Config) -> LifeCycle:
        schedules = config.schedules()
        M, S, C = stack_schedules(schedules)
        return cls(M, S, C, config.density_dependence(), config.offspring_distribution(),
                   config.mutation_model(), ParentalCare.from_schedules(schedules))

    @property
    def n_alleles(self) -> int:
        return self.M.shape[0]

    @property
    def n_ages(self) -> int:
        return self.M.shape[1]

    @cached_property
    def kernel(self) -> SeasonKernel:
        """The season kernel: every class's vital rates, what the engines sample from."""
        return SeasonKernel(self.M, self.S, self.C, self.density, self.offspring, self.mutation,
                            self.care)


def round_preserving_total(x: np.ndarray, total: int) -> np.ndarray:
    """Round non-negative ``x`` to integers summing to ``total`` (largest remainders)."""
    x = np.asarray(x, dtype=float)
    x = x * (total / x.sum()) if x.sum() > 0 else x
    base = np.floor(x).astype(np.int64)
    short = int(total - base.sum())
    if short > 0:
        order = np.argsort(-(x - base), kind="stable")
        base[order[:short]] += 1
    return base


def initial_census(config: Config, life: LifeCycle | None = None) -> np.ndarray:
    """The starting census, counts by (allele, age index), as integers.

    With ``[invasion]`` the resident starts at its mean-field equilibrium (or at
    ``resident_count``) in its stable age distribution, rounded to integers
    with the total kept, and ``mutant_count`` mutants are added at age 1.
    Without it, each allele's ``initial_count`` individuals start at age 1.
    """
    life = life or LifeCycle.from_config(config)
    census = np.zeros((life.n_alleles, life.n_ages), dtype=np.int64)
    inv = config.invasion
    if inv is None:
        census[:, 0] = [a.initial_count for a in config.alleles]
        return census
    r = config.allele_index(inv.resident)
    schedule = config.schedules()[r].padded(life.n_ages)
    if inv.resident_count == "equilibrium":
        eq = solve_equilibrium(schedule, life.density, offspring=life.offspring)
        if not eq.census_size <= MAX_COUNT:
            from .config import ConfigError

            raise ConfigError(f"density.capacity: the resident's equilibrium census is "
                              f"{eq.census_size:.3g} individuals, more than {MAX_COUNT} can be counted")
        target, shape = int(round(eq.census_size)), eq.census
    else:
        target = int(inv.resident_count)
        shape = stable_age_distribution(schedule, life.kernel.factors(0.0), offspring=life.offspring)
    census[r] = round_preserving_total(shape, target)
    census[config.allele_index(inv.mutant), 0] += inv.mutant_count
    return census
