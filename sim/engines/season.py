"""The season's rules on a flat class axis, shared by the array engines.

A class is one (allele, age index) pair, numbered allele-major:
``class = allele * n_ages + age``. The array engines (``individual`` and
``counts``) hold many replicate populations at once (a *batch*, replicate as
the first array dimension); each replicate draws from its own generator, so a
replicate's path does not depend on which others share its batch.

What the two engines share is what happens to a class as a whole: the density
factors of each replicate, and a class's recruits. Recruits are drawn per
class, not per parent: the parents of a class are exchangeable and carry
nothing but their allele, so the class's recruit total (births thinned by the
juvenile survival, see ``draw_thinned_total``) is exact in distribution.
"""

from __future__ import annotations

import numpy as np

from ..density import Factors
from ..lifecycle import LifeCycle
from ..offspring import Poisson
from . import compiled

__all__ = ["ClassRules", "ReplicateBatch", "OneReplicate"]


class ClassRules:
    """A ``LifeCycle`` laid out on the class axis, with the season's class-level draws.

    Attributes
    ----------
    n_classes : int
        n_alleles * n_ages.
    survival, fecundity, juvenile : ndarray, shape (n_classes,)
        s(a), m(a) and the juvenile survival c of the class's allele.
    aged : ndarray, shape (n_classes,)
        The class a survivor moves to (age + 1; the plus-group stays).
    first : ndarray, shape (n_alleles,)
        The class of a recruit of each allele (age 1, index 0).
    """

    def __init__(self, life: LifeCycle):
        self.life = life
        n_alleles, n_ages = life.n_alleles, life.n_ages
        self.n_alleles, self.n_ages = n_alleles, n_ages
        self.n_classes = n_alleles * n_ages
        self.survival = life.S.ravel().astype(float)
        self.fecundity = life.M.ravel().astype(float)
        self.juvenile = np.repeat(life.C, n_ages).astype(float)
        self.allele_of = np.repeat(np.arange(n_alleles), n_ages)
        ages = np.tile(np.arange(n_ages), n_alleles)
        self.aged = self.allele_of * n_ages + np.minimum(ages + 1, n_ages - 1)
        self.first = np.arange(n_alleles) * n_ages
        self.weights = life.density.index_weights(life.M).ravel().astype(float)
        density = life.density
        self.after_breeding = density.counted_after_breeding
        self.ceiling = None if density.ceiling is None else int(density.ceiling)
        self.ceiling_on_recruits = density.acts_on == "recruitment"
        self.adult_density = density.placed(0.5).adult != 1.0
        # (class, allele, m, c) of each class that breeds, as Python numbers
        self._breeders = [(int(c), int(self.allele_of[c]), float(self.fecundity[c]),
                           float(self.juvenile[c])) for c in np.flatnonzero(self.fecundity > 0)]
        self._mutation = life.mutation if life.mutation.active else None
        # an allele's recruits are one Poisson total (see recruit_means), drawn by a compiled
        # engine where births need not be drawn first
        self.recruits_in_pass = isinstance(life.offspring, Poisson) and not self.after_breeding

    # -- step 1: density ------------------------------------------------------------
    def factors(self, counts: np.ndarray) -> Factors:
        """Each replicate's factors from its census counts (n_replicates, n_classes).

        Returns ``Factors`` of arrays of length n_replicates.
        """
        n = counts.shape[0]
        if self.after_breeding:
            return Factors(np.ones(n), np.ones(n), np.ones(n))
        return self._placed(counts @ self.weights, n)

    def open_season(self, counts: np.ndarray, rngs) -> tuple[np.ndarray | None, Factors]:
        """Step 1 for a batch: the factors, and the births where D counts them.

        Births are drawn first (step 2) where ``counted = "offspring"``;
        elsewhere they are not needed and None is returned for them.
        """
        if not self.after_breeding:
            return None, self.factors(counts)
        births = self.births(counts, rngs)
        return births, self._placed(births.sum(axis=1).astype(float), counts.shape[0])

    def _placed(self, d, n) -> Factors:
        f = self.life.density.placed(self.life.density.form.factor(d))
        # contiguous float arrays: what the compiled passes take
        return Factors(*(np.ascontiguousarray(np.broadcast_to(np.asarray(x, dtype=float), (n,)))
                         for x in f))

    # -- steps 2 and 4: births and recruits ------------------------------------------
    # Draws go class by class across the batch, each replicate from its own generator;
    # within a replicate they come in the same order whatever its batch.
    def births(self, counts: np.ndarray, rngs) -> np.ndarray:
        """Offspring born to each class, (n_replicates, n_classes) (drawn where D counts them)."""
        out = np.zeros(counts.shape, dtype=np.int64)
        draw = self.life.offspring.draw_total
        for c, _, fecundity, _ in self._breeders:
            out[:, c] = [int(draw(n, fecundity, g)) if n else 0
                         for n, g in zip(counts[:, c].tolist(), rngs)]
        return out

    def recruits(self, counts: np.ndarray, births, f: Factors, rngs) -> np.ndarray:
        """Recruits by (replicate, allele), after mutation.

        ``births`` are the births by class where they were drawn (else None:
        each class's recruit total is then drawn at once, births thinned by
        c f_rec, see ``draw_thinned_totals``).
        """
        out = np.zeros((counts.shape[0], self.n_alleles), dtype=np.int64)
        if births is None:
            draw = self.life.offspring.draw_thinned_totals
            present = counts.any(axis=0)
            for c, allele, fecundity, juvenile in self._breeders:
                if not present[c]:
                    continue  # no replicate has this class: no draws to make
                out[:, allele] += draw(counts[:, c], fecundity * f.fecundity,
                                       juvenile * f.recruitment, rngs)
        else:
            for c, allele, _, juvenile in self._breeders:
                out[:, allele] += [g.binomial(n, k) if n else 0 for n, k, g in
                                   zip(births[:, c].tolist(), (juvenile * f.recruitment).tolist(), rngs)]
        return self.mutated(out, rngs)

    def pass_recruits(self, counts: np.ndarray, f: Factors) -> tuple[np.ndarray, np.ndarray]:
        """What a compiled pass takes for recruits: their means by (replicate, allele) and the
        array it draws them into; both (n_replicates, 0) where the pass draws none
        (``recruits_in_pass`` false: ``recruits_after_pass`` draws them)."""
        n = counts.shape[0]
        means = self.recruit_means(counts, f) if self.recruits_in_pass else np.empty((n, 0))
        return means, np.empty(means.shape, dtype=np.int64)

    def recruits_after_pass(self, drawn: np.ndarray, counts: np.ndarray, births, f: Factors,
                            rngs) -> np.ndarray:
        """Recruits by (replicate, allele) after mutation: the pass's draws ``drawn``, or,
        where the pass drew none, drawn now (``recruits``)."""
        if self.recruits_in_pass:
            return self.mutated(drawn, rngs)
        return self.recruits(counts, births, f, rngs)

    def recruit_means(self, counts: np.ndarray, f: Factors) -> np.ndarray:
        """Mean recruits by (replicate, allele) under Poisson offspring, before mutation.

        A class's recruits are Poisson(n m f_fec c f_rec); an allele's, the sum
        over its classes, are Poisson with the summed mean (superposition).
        """
        mean = np.zeros((counts.shape[0], self.n_alleles))
        for c, allele, fecundity, juvenile in self._breeders:  # elementwise: the same in any batch
            mean[:, allele] += counts[:, c] * (fecundity * f.fecundity) * (juvenile * f.recruitment)
        return mean

    def mutated(self, recruits: np.ndarray, rngs) -> np.ndarray:
        """Recruits by (replicate, allele) after mutation (each replicate from its generator)."""
        if self._mutation is not None:
            for r, g in enumerate(rngs):
                recruits[r] = self._mutation.mutate_counts(recruits[r], g)
        return recruits

    # -- the ceiling ------------------------------------------------------------------
    def ceiling_excess(self, survivors: np.ndarray, recruits: np.ndarray):
        """Individuals a ceiling removes per replicate, and the size of the pool they come from.

        ``survivors`` and ``recruits`` are totals per replicate. The pool is
        the recruits (acting on recruitment) or everyone (all-survival).
        """
        if self.ceiling_on_recruits:
            room = np.maximum(self.ceiling - survivors, 0)
            return np.maximum(recruits - room, 0), recruits
        pool = survivors + recruits
        return np.maximum(pool - self.ceiling, 0), pool


class ReplicateBatch:
    """What the array engines hold alike: each replicate's stream, its census by class
    and its last season's recruits (the engines add how individuals are kept).

    Parameters
    ----------
    life : LifeCycle
    census : ndarray, shape (n_replicates, n_alleles, n_ages)
        Starting counts.
    rngs : sequence of numpy.random.Generator
        One stream per replicate; replicate ``r`` draws only from ``rngs[r]``
        (held as an object array, so leaving replicates is one array operation).
    """

    def __init__(self, life: LifeCycle, census: np.ndarray, rngs):
        self.life = life
        self.rules = ClassRules(life)
        self.rngs = np.empty(len(rngs), dtype=object)
        self.rngs[:] = list(rngs)
        # their state's addresses, for compiled passes (valid while rngs holds the generators)
        self.bitgens = compiled.bitgen_addresses(self.rngs)
        self.counts = np.asarray(census, dtype=np.int64).reshape(
            len(self.rngs), self.rules.n_classes).copy()
        self.recruits = np.zeros(len(self.rngs), dtype=np.int64)

    def census(self) -> np.ndarray:
        """Counts by (replicate, allele, age index)."""
        return self.counts.reshape(-1, self.rules.n_alleles, self.rules.n_ages).copy()

    def keep(self, which) -> None:
        """Keep only the replicates where ``which`` (bool, one per replicate) is true."""
        which = np.asarray(which, dtype=bool)
        self.rngs, self.bitgens = self.rngs[which], self.bitgens[which]
        self.counts, self.recruits = self.counts[which], self.recruits[which]


class OneReplicate:
    """An array engine's batch of one, with the ``Engine(model, life, census)`` interface.

    Subclasses name their batched form in ``populations``; the single
    replicate runs the very same code as a batch, so a replicate gives the
    same result alone or batched with others.
    """

    populations: type

    def __init__(self, model, life: LifeCycle, census: np.ndarray):
        self.model = model
        self.life = life
        self.batch = self.populations(life, np.asarray(census)[None], [model.rng])

    def step(self) -> None:
        """Advance one season."""
        self.batch.step()

    def census(self) -> np.ndarray:
        """Counts by (allele, age index)."""
        return self.batch.census()[0]
