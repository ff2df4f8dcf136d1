"""The Mesa reference engine: one ``mesa.Agent`` per individual.

This is the plain statement of the life cycle, written for reading, for
teaching, and as the oracle the fast engines are tested against. It loops
over agents in Python and is slow on purpose of clarity, not by accident.
"""

from __future__ import annotations

import mesa
import numpy as np

from ..density import Factors
from ..kernel import SeasonRates
from ..lifecycle import LifeCycle
from .season import DRAW_LIMIT

__all__ = ["AgentsEngine", "Breeder"]


class Breeder(mesa.Agent):
    """One individual: it carries an allele and has a census age (1, 2, ...)."""

    def __init__(self, model, allele: int, age: int = 1):
        super().__init__(model)
        self.allele = allele
        self.age = age
        self.births = 0
        self.alive = True

    @property
    def kind(self) -> int:
        """Its class in the season kernel: (allele, age index), age 1 is index 0 and the last
        index is a plus-group."""
        n_ages = self.model.engine.kernel.n_ages
        return self.allele * n_ages + min(self.age, n_ages) - 1

    def breed(self, rates: SeasonRates) -> None:
        """Draw this season's offspring number, mean m(a) f_fec."""
        mean = min(rates.breeding[self.kind], DRAW_LIMIT)  # past it the replicate ends capped anyway
        self.births = int(self.model.engine.life.offspring.draw(np.array([mean]), self.model.rng)[0])

    def survives(self, rates: SeasonRates) -> bool:
        """Survive to the next census with probability s(a) f_adult."""
        return bool(self.model.rng.random() < rates.survival[self.kind])

    def recruitment(self, factors: Factors, survived: bool) -> float:
        """A young's chance to recruit: the kernel's, for its parent's fate (``survived``:
        c_care, else c_orphan) and its brood's size."""
        kernel = self.model.engine.kernel
        return kernel.recruitment(factors, parent_survived=survived, brood=self.births)[self.kind]

    def recruit_alleles(self, factors: Factors, survived: bool, room: int) -> tuple[list[int], int]:
        """Alleles of this season's offspring that survive to age 1 (after mutation), young by
        young, and how many young are left undrawn.

        Young are drawn until ``room`` recruits are built: past that the census
        has passed ``max_population`` and the replicate ends capped, so the rest
        are only counted (``count_recruits``), never built.
        """
        if self.births == 0:
            return [], 0
        mutation, rng = self.model.engine.life.mutation, self.model.rng
        recruitment = self.recruitment(factors, survived)
        alleles = []
        for young in range(self.births):
            if rng.random() < recruitment:
                alleles.append(int(mutation.mutate(np.array([self.allele]), rng)[0]))
                if len(alleles) >= room:
                    return alleles, self.births - young - 1
        return alleles, 0

    def count_recruits(self, factors: Factors, survived: bool, young: int) -> np.ndarray:
        """Recruits by allele among ``young`` of this season's offspring, counted in one draw
        (a capped season's census stays right without building its agents)."""
        life, rng = self.model.engine.life, self.model.rng
        counts = np.zeros(life.n_alleles, dtype=np.int64)
        counts[self.allele] = rng.binomial(young, self.recruitment(factors, survived))
        return life.mutation.mutate_counts(counts, rng)

    def die(self) -> None:
        self.alive = False
        self.remove()


class AgentsEngine:
    """Seasons stepped agent by agent, in the order of the life cycle, with the kernel's rates."""

    def __init__(self, model, life: LifeCycle, census: np.ndarray):
        self.model = model
        self.life = life
        self.kernel = life.kernel
        self.unbuilt = np.zeros(life.n_alleles, dtype=np.int64)
        for allele in range(life.n_alleles):
            for age_class in range(life.n_ages):
                for _ in range(int(census[allele, age_class])):
                    Breeder(model, allele, age_class + 1)

    def census(self) -> np.ndarray:
        counts = np.zeros(self.kernel.n_classes, dtype=np.int64)
        for agent in self.model.agents:
            counts[agent.kind] += 1
        counts = counts.reshape(self.life.n_alleles, self.life.n_ages)
        counts[:, 0] += self.unbuilt  # (only in a season that ended capped)
        return counts

    def step(self) -> None:
        kernel = self.kernel
        adults = list(self.model.agents)
        # 0. this season's year type (its multipliers; None in a constant environment)
        year = None if self.model.years is None else self.model.years.advance()[0]
        # 1. density index from the census (where D counts births, after 2.)
        f = kernel.multipliers(kernel.census_factors(self.census()), year=year)
        rates = kernel.rates(f)
        # 2. breeding
        for agent in adults:
            agent.breed(rates)
        if kernel.counted_after_breeding:
            f = kernel.multipliers(kernel.birth_factors(sum(a.births for a in adults)), year=year)
            rates = kernel.rates(f)
        # 3. survival (independent of the brood) and 4. recruitment, by the parent's fate and brood
        # (a census past max_population ends the replicate capped: no more young are drawn
        # then, so an exploding population never builds its agents)
        limit = self.model.config.experiment.max_population
        survivors, newborn = [], []
        self.unbuilt[:] = 0  # recruits past max_population: counted, not built
        for agent in adults:
            survived = agent.survives(rates)
            if survived:
                survivors.append(agent)
            else:
                agent.die()
            room = limit + 1 - len(survivors) - len(newborn)
            alleles, left = agent.recruit_alleles(f, survived, room) if room > 0 else ([], agent.births)
            newborn.extend(alleles)
            if left:
                self.unbuilt += agent.count_recruits(f, survived, left)
        # 5. next census: survivors one year older, recruits at age 1
        for agent in survivors:
            agent.age += 1
        recruits = [Breeder(self.model, allele, 1) for allele in newborn]
        # then the ceiling's removal: random individuals, from the recruits or from everyone
        excess, _ = kernel.ceiling_excess(len(survivors), len(recruits))
        if excess > 0 and len(survivors) + len(recruits) <= limit:  # (past it: capped, as is)
            pool = recruits if kernel.ceiling_on_recruits else survivors + recruits
            for i in self.model.rng.choice(len(pool), size=int(excess), replace=False):
                pool[i].die()
