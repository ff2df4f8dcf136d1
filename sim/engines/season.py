"""What the array engines share: a batch of replicates and the class-level draws of a season.

The array engines (``individual`` and ``counts``) hold many replicate
populations at once (a *batch*, replicate as the first array dimension);
each replicate draws from its own generator, so a replicate's path does not
depend on which others share its batch. They sample the season stated by
the kernel (``sim.kernel.SeasonKernel``, on its class axis); what they draw
alike is a class's births and recruits. Recruits are drawn per class, not
per parent: the parents of a class are exchangeable and carry nothing but
their allele, so the class's recruit total (births thinned by the juvenile
survival, see ``draw_thinned_total``) is exact in distribution.

With parental effects (``SeasonKernel.parental``: orphan survival or a brood
effect) a young's recruitment depends on its parent's fate and brood size,
so recruits are drawn by (class, fate, brood size) instead
(``parental_recruits``): the number of a class's parents with each brood
size is multinomial (broods are independent draws of the offspring law,
``pmf_table``, its tail below 1e-15 lumped into the largest size); the
survivors among them are a uniformly random subset of the class's
survivors' number (multivariate hypergeometric: survival is independent of
the brood); and the recruits of the b-young broods of one fate are
Binomial(b x (their number), c_fate x^(b - 1) f_rec).
"""

from __future__ import annotations

import numpy as np

from ..density import Factors
from ..lifecycle import LifeCycle
from ..offspring import Poisson
from . import compiled
from .compiled import DRAW_LIMIT

__all__ = ["ReplicateBatch", "OneReplicate", "DRAW_LIMIT"]

_PMF_TABLES_KEPT = 4096  # a batch's pmf tables kept between seasons (one per mean brood size met)


class ReplicateBatch:
    """What the array engines hold alike: each replicate's stream, its census by class
    and its last season's recruits (the engines add how individuals are kept), and the
    class-level draws of a season.

    Parameters
    ----------
    life : LifeCycle
    census : ndarray, shape (n_replicates, n_alleles, n_ages)
        Starting counts.
    rngs : sequence of numpy.random.Generator
        One stream per replicate; replicate ``r`` draws only from ``rngs[r]``
        (held as an object array, so leaving replicates is one array operation).
    limit : int, optional
        ``experiment.max_population``: a replicate whose census passes it in a
        season (before a ceiling's removal) is not built (the run stops it as
        capped), so no array is sized by an exploding population.

    Attributes
    ----------
    years : sim.year_draws.SeasonYears or None
        Set by the caller in a variable environment: each replicate's year
        type, drawn at the start of every season from its own year stream.
    """

    years = None

    def __init__(self, life: LifeCycle, census: np.ndarray, rngs, *, limit: int | None = None):
        self.limit = np.inf if limit is None else limit
        self.life = life
        self.kernel = kernel = life.kernel
        self.rngs = np.empty(len(rngs), dtype=object)
        self.rngs[:] = list(rngs)
        # their state's addresses, for compiled passes (valid while rngs holds the generators)
        self.bitgens = compiled.bitgen_addresses(self.rngs)
        self.counts = np.asarray(census, dtype=np.int64).reshape(
            len(self.rngs), kernel.n_classes).copy()
        self.recruits = np.zeros(len(self.rngs), dtype=np.int64)
        self._mutation = life.mutation if life.mutation.active else None
        # an allele's recruits are one Poisson total (``SeasonKernel.expected_recruits``),
        # drawn by a compiled pass where births need not be drawn first
        self.recruits_in_pass = (isinstance(life.offspring, Poisson)
                                 and not kernel.counted_after_breeding and not kernel.parental)
        self._broods = None  # brood-size counts drawn before survival (parental effects)
        self._pmf_tables = {}  # the offspring law's pmf table by mean brood (parental effects)

    def census(self) -> np.ndarray:
        """Counts by (replicate, allele, age index)."""
        return self.counts.reshape(-1, self.kernel.n_alleles, self.kernel.n_ages).copy()

    def census_index(self) -> np.ndarray:
        """Each replicate's density index D at its census (``SeasonKernel.density_index``)."""
        return self.kernel.density_index(self.counts)

    def keep(self, which) -> None:
        """Keep only the replicates where ``which`` (bool, one per replicate) is true."""
        which = np.asarray(which, dtype=bool)
        self.rngs, self.bitgens = self.rngs[which], self.bitgens[which]
        self.counts, self.recruits = self.counts[which], self.recruits[which]
        if self.years is not None:
            self.years.keep(which)

    # -- steps 1 and 2: density, and births where D counts them -------------------------
    def open_season(self) -> tuple[np.ndarray | None, Factors]:
        """Each replicate's multipliers for the season, and the births where D counts them.

        Births are drawn first (step 2) where ``counted = "offspring"``;
        elsewhere they are not needed and None is returned for them.
        """
        kernel = self.kernel
        year = None if self.years is None else self.years.advance()
        if not kernel.counted_after_breeding:
            return None, kernel.multipliers(kernel.factors(self.census_index()), year=year)
        births = self.births(None if year is None else year[:, 0])
        return births, kernel.multipliers(kernel.birth_factors(births.sum(axis=1).astype(float)),
                                          year=year)

    # Draws go class by class across the batch, each replicate from its own generator;
    # within a replicate they come in the same order whatever its batch.
    def births(self, year_fecundity=None) -> np.ndarray:
        """Offspring born to each class, (n_replicates, n_classes) (drawn where D counts them);
        ``year_fecundity``: each replicate's year multiplier on fecundity (None: 1)."""
        counts, rngs = self.counts, self.rngs
        out = np.zeros(counts.shape, dtype=np.int64)
        if self.kernel.parental:  # brood sizes kept for ``parental_recruits``
            self._broods = self.brood_counts(self.kernel.multipliers(
                self.kernel.census_factors(counts, len(counts))))
            for r, by_class in enumerate(self._broods):
                for c, (sizes, number, _) in by_class.items():
                    out[r, c] = int(sizes @ number)
            return out
        draw = self.life.offspring.draw_total
        for c, _, fecundity, _ in self.kernel.breeders:
            means = [fecundity] * len(rngs) if year_fecundity is None \
                else (fecundity * year_fecundity).tolist()
            out[:, c] = [int(draw(n, min(m, DRAW_LIMIT / n), g)) if n else 0
                         for n, m, g in zip(counts[:, c].tolist(), means, rngs)]
        return out

    # -- step 4: recruits ----------------------------------------------------------------
    def recruit_means(self, f: Factors) -> np.ndarray:
        """What a compiled pass takes for recruits: their means by (replicate, allele) (the
        pass draws at most ``DRAW_LIMIT``); (n_replicates, 0) where the pass draws none
        (``recruits_in_pass`` false: ``recruits_after_pass`` draws them)."""
        if self.recruits_in_pass:
            return self.kernel.expected_recruits(self.counts, f)
        return np.empty((self.counts.shape[0], 0))

    def recruits_after_pass(self, drawn: np.ndarray, births, f: Factors) -> np.ndarray:
        """Recruits by (replicate, allele) after mutation: the pass's draws ``drawn``, or,
        where the pass drew none, drawn now from ``births`` (None: each class's recruit
        total drawn at once, births thinned by c f_rec, see ``draw_thinned_totals``)."""
        if self.recruits_in_pass:
            return self.mutated(drawn)
        counts, rngs = self.counts, self.rngs
        out = np.zeros((counts.shape[0], self.kernel.n_alleles), dtype=np.int64)
        if births is None:
            draw = self.life.offspring.draw_thinned_totals
            present = counts.any(axis=0)
            for c, allele, fecundity, juvenile in self.kernel.breeders:
                if not present[c]:
                    continue  # no replicate has this class: no draws to make
                mean = np.minimum(fecundity * f.fecundity, DRAW_LIMIT / np.maximum(counts[:, c], 1))
                out[:, allele] += draw(counts[:, c], mean, juvenile * f.recruitment, rngs)
        else:
            for c, allele, _, juvenile in self.kernel.breeders:
                out[:, allele] += [g.binomial(n, k) if n else 0 for n, k, g in
                                   zip(births[:, c].tolist(), (juvenile * f.recruitment).tolist(), rngs)]
        return self.mutated(out)

    # -- step 4 with parental effects: recruits by (class, fate, brood size) -------------
    def brood_counts(self, f: Factors) -> list[dict]:
        """Per replicate, per breeding class present: (brood sizes, number of parents with each,
        number of parents), multinomial over the offspring law's probabilities at mean m f_fec."""
        law, out, tables = self.life.offspring, [], self._pmf_tables
        if len(tables) > _PMF_TABLES_KEPT:  # means that vary with density: keep the recent ones
            tables.clear()
        fecundity = np.broadcast_to(np.asarray(f.fecundity, dtype=float), (len(self.rngs),)).tolist()
        for r, g in enumerate(self.rngs):
            by_class = {}
            for c, _, m, _ in self.kernel.breeders:
                n = int(self.counts[r, c])
                if n:
                    mean = m * fecundity[r]
                    if mean not in tables:
                        tables[mean] = law.pmf_table(mean)
                    sizes, pmf = tables[mean]
                    by_class[c] = (sizes, g.multinomial(n, pmf), n)
            out.append(by_class)
        return out

    def parental_recruits(self, survivors: np.ndarray, f: Factors) -> np.ndarray:
        """Recruits by (replicate, allele) after mutation, where a young's recruitment depends
        on its parent's fate and brood (see the module's docstring).

        ``survivors`` are the survivors by their parent class (before ageing),
        (n_replicates, n_classes); brood sizes are those drawn before survival
        where D counts births, else drawn now.
        """
        kernel = self.kernel
        broods, self._broods = self._broods, None
        if broods is None:
            broods = self.brood_counts(f)
        cared = kernel.recruitment(f, parent_survived=True)
        orphaned = kernel.recruitment(f, parent_survived=False)
        cared, orphaned = (np.broadcast_to(p, self.counts.shape) for p in (cared, orphaned))
        out = np.zeros((len(self.rngs), kernel.n_alleles), dtype=np.int64)
        # Where no parent of a class survives, or all do, the split is known: numpy draws nothing
        # for a sample of none or of all, nor for Binomial(0, p), so skipping those calls leaves
        # every stream as it was (the pinned duskmote-care replicates, tests/test_pinned_replicates.py)
        for r, g in enumerate(self.rngs):
            for c, (sizes, number, parents) in broods[r].items():
                alive = int(survivors[r, c])
                shrink = kernel.decay[c] ** np.maximum(sizes - 1.0, 0.0)
                young = 0
                if alive:
                    kept = number if alive == parents else g.multivariate_hypergeometric(number, alive)
                    young += g.binomial(sizes * kept, np.minimum(cared[r, c] * shrink, 1.0)).sum()
                else:
                    kept = 0
                if alive < parents:
                    young += g.binomial(sizes * (number - kept), np.minimum(orphaned[r, c] * shrink, 1.0)).sum()
                out[r, kernel.allele_of[c]] += young
        return self.mutated(out)

    def aged_counts(self, survivors: np.ndarray) -> np.ndarray:
        """Survivors by parent class moved to their next class (age + 1; the plus-group stays)."""
        out = np.zeros_like(survivors)
        np.add.at(out.T, self.kernel.aged, survivors.T)
        return out

    def mutated(self, recruits: np.ndarray) -> np.ndarray:
        """Recruits by (replicate, allele) after mutation (each replicate from its generator)."""
        if self._mutation is not None:
            for r, g in enumerate(self.rngs):
                recruits[r] = self._mutation.mutate_counts(recruits[r], g)
        return recruits


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
        self.batch = self.populations(life, np.asarray(census)[None], [model.rng],
                                      limit=model.config.experiment.max_population)
        self.batch.years = getattr(model, "years", None)  # the replicate's years, if any

    def step(self) -> None:
        """Advance one season."""
        self.batch.step()

    def census(self) -> np.ndarray:
        """Counts by (allele, age index)."""
        return self.batch.census()[0]
