"""The Mesa reference engine: one ``mesa.Agent`` per individual.

This is the plain statement of the life cycle, written for reading, for
teaching, and as the oracle the fast engines are tested against. It loops
over agents in Python and is slow on purpose of clarity, not by accident.
"""

from __future__ import annotations

import mesa
import numpy as np

from ..lifecycle import LifeCycle

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
    def age_class(self) -> int:
        """Row of the schedule arrays: age 1 is class 0; the last class is a plus-group."""
        return min(self.age, self.model.engine.life.n_ages) - 1

    def breed(self, f_fecundity: float) -> None:
        """Draw this season's offspring number, mean m(a) f_fec."""
        life = self.model.engine.life
        mean = life.M[self.allele, self.age_class] * f_fecundity
        self.births = int(life.offspring.draw(np.array([mean]), self.model.rng)[0])

    def survives(self, f_adult: float) -> bool:
        """Survive to the next census with probability s(a) f_adult."""
        life = self.model.engine.life
        return bool(self.model.rng.random() < life.S[self.allele, self.age_class] * f_adult)

    def recruit_alleles(self, f_recruitment: float) -> list[int]:
        """Alleles of this season's offspring that survive to age 1 (after mutation)."""
        life, rng = self.model.engine.life, self.model.rng
        alleles = []
        for _ in range(self.births):
            if rng.random() < life.C[self.allele] * f_recruitment:
                alleles.append(int(life.mutation.mutate(np.array([self.allele]), rng)[0]))
        return alleles

    def die(self) -> None:
        self.alive = False
        self.remove()


class AgentsEngine:
    """Seasons stepped agent by agent, in the order of DESIGN.md's life cycle."""

    def __init__(self, model, life: LifeCycle, census: np.ndarray):
        self.model = model
        self.life = life
        for allele in range(life.n_alleles):
            for age_class in range(life.n_ages):
                for _ in range(int(census[allele, age_class])):
                    Breeder(model, allele, age_class + 1)

    def census(self) -> np.ndarray:
        counts = np.zeros((self.life.n_alleles, self.life.n_ages), dtype=np.int64)
        for agent in self.model.agents:
            counts[agent.allele, agent.age_class] += 1
        return counts

    def _density_index(self, agents) -> float:
        weights = self.life.density.index_weights(self.life.M)
        return float(sum(weights[a.allele, a.age_class] for a in agents))

    def step(self) -> None:
        density, rng = self.life.density, self.model.rng
        adults = list(self.model.agents)
        # 1. density index from the census
        if density.counted_after_breeding:
            f = density.factors(0.0)
        else:
            f = density.factors(self._density_index(adults))
        # 2. breeding
        for agent in adults:
            agent.breed(f.fecundity)
        if density.counted_after_breeding:
            f = density.factors(float(sum(a.births for a in adults)))
        # 3. survival (independent of the brood) and 4. recruitment
        survivors, newborn = [], []
        for agent in adults:
            if agent.survives(f.adult):
                survivors.append(agent)
            else:
                agent.die()
            newborn.extend(agent.recruit_alleles(f.recruitment))
        # 5. next census: survivors one year older, recruits at age 1
        for agent in survivors:
            agent.age += 1
        recruits = [Breeder(self.model, allele, 1) for allele in newborn]
        if density.ceiling is not None:
            self._apply_ceiling(survivors, recruits, int(density.ceiling), rng)

    def _apply_ceiling(self, survivors, recruits, capacity, rng) -> None:
        """Remove random individuals down to the capacity (recruits only, or anyone)."""
        pool = recruits if self.life.density.acts_on == "recruitment" else survivors + recruits
        room = capacity - (len(survivors) if pool is recruits else 0)
        excess = len(pool) - max(room, 0)
        if excess > 0:
            for i in rng.choice(len(pool), size=excess, replace=False):
                pool[i].die()
