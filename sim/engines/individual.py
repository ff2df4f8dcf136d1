"""The default engine: individuals as numpy arrays, one vectorised pass per season."""

from __future__ import annotations

import numpy as np

from ..lifecycle import LifeCycle

__all__ = ["IndividualEngine"]


class IndividualEngine:
    """Each individual is an entry of two arrays: its allele and its age index.

    One season follows the life cycle of DESIGN.md: density index, breeding,
    survival, recruitment, next census (and a ceiling's removal). Every draw
    is per individual (or per offspring), as in the agents engine, but made
    for all individuals in one numpy call.
    """

    def __init__(self, model, life: LifeCycle, census: np.ndarray):
        self.rng = model.rng
        self.life = life
        self._cell_weights = life.density.index_weights(life.M).ravel()
        counts = np.asarray(census, dtype=np.int64)
        cells = np.repeat(np.arange(counts.size), counts.ravel())
        self.allele = (cells // life.n_ages).astype(np.int16)
        self.age = (cells % life.n_ages).astype(np.int16)

    def census(self) -> np.ndarray:
        """Counts by (allele, age index)."""
        life = self.life
        cells = self.allele.astype(np.int64) * life.n_ages + self.age
        return np.bincount(cells, minlength=life.n_alleles * life.n_ages).reshape(
            life.n_alleles, life.n_ages)

    def step(self) -> None:
        life, rng = self.life, self.rng
        allele, age = self.allele, self.age
        n = allele.size
        if n == 0:
            return
        density = life.density
        # 1. density index from the census (unless it is the offspring born)
        if density.counted_after_breeding:
            f = density.factors(0.0)
        else:
            cells = allele.astype(np.int64) * life.n_ages + age
            d = float(np.bincount(cells, weights=self._cell_weights[cells], minlength=1).sum()) \
                if density.counted != "census" else float(n)
            f = density.factors(d)
        # 2. breeding
        births = life.offspring.draw(life.M[allele, age] * f.fecundity, rng)
        if density.counted_after_breeding:
            f = density.factors(float(births.sum()))
        # 3. survival, independent of the realised brood
        survives = rng.random(n) < life.S[allele, age] * f.adult
        # 4. recruitment: each offspring survives to age 1 on its own
        recruits = rng.binomial(births, life.C[allele] * f.recruitment)
        recruit_allele = life.mutation.mutate(np.repeat(allele, recruits), rng)
        # 5. next census: survivors one year older (plus-group stays), recruits at age 1
        new_allele = np.concatenate([allele[survives], recruit_allele])
        new_age = np.concatenate([np.minimum(age[survives] + 1, life.n_ages - 1),
                                  np.zeros(recruit_allele.size, dtype=age.dtype)])
        if density.ceiling is not None:
            keep = _ceiling_keep(int(survives.sum()), recruit_allele.size, density, rng)
            if keep is not None:
                new_allele, new_age = new_allele[keep], new_age[keep]
        self.allele, self.age = new_allele, new_age


def _ceiling_keep(n_survivors: int, n_recruits: int, density, rng):
    """Indices kept by a ceiling (survivors first, then recruits), or None to keep all."""
    k = int(density.ceiling)
    total = n_survivors + n_recruits
    if density.acts_on == "recruitment":
        room = max(k - n_survivors, 0)
        if n_recruits <= room:
            return None
        chosen = np.sort(rng.choice(n_recruits, size=room, replace=False))
        return np.concatenate([np.arange(n_survivors), n_survivors + chosen])
    if total <= k:
        return None
    return np.sort(rng.choice(total, size=k, replace=False))
