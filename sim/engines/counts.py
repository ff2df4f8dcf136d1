"""The aggregated engine: counts by allele and age, exact in distribution, cost independent of N.

Where individuals carry nothing but their allele and age, individuals of one
class are exchangeable, and every per-individual draw of the life cycle sums
to a class-level draw of known law:

- survival: n independent Bernoulli(p) trials are Binomial(n, p);
- recruitment: a class's births thinned by juvenile survival
  (``draw_thinned_total``; Poisson and negative-binomial totals are closed
  under thinning and superposition, other laws draw births then Binomial);
- with parental effects, recruits by (class, fate, brood size): the parents
  with each brood size are multinomial, the survivors among them
  multivariate hypergeometric, their young's recruits binomial
  (``ReplicateBatch.parental_recruits``);
- mutation: each recruit mutates independently, so the recruits of a parent
  allele split Multinomially (``Mutation.mutate_counts``);
- a ceiling removes a uniformly random set of individuals, so the removed
  counts by class are multivariate hypergeometric.

Survivors (and Poisson recruits) are drawn in one compiled pass for the
whole batch (``compiled.survive_counts``), each replicate from its own
generator; mutation and a ceiling's removal are numpy calls per replicate.

``sim.aggregation.counts_obstacles`` lists why a config would need
individuals (none of the current options does).
"""

from __future__ import annotations

import numpy as np

from . import compiled
from .season import OneReplicate, ReplicateBatch

__all__ = ["CountsEngine", "CountsPopulations"]


class CountsPopulations(ReplicateBatch):
    """Replicate populations held as counts by (replicate, class).

    Parameters are those of ``ReplicateBatch``.
    """

    @property
    def sizes(self) -> np.ndarray:
        """Census size of each replicate."""
        return self.counts.sum(axis=1)

    def state_bytes(self) -> int:
        """Bytes held between seasons (independent of the census size)."""
        return self.counts.nbytes + self.recruits.nbytes + self.bitgens.nbytes

    def step(self) -> None:
        """Advance every replicate one season."""
        kernel = self.kernel
        if len(self.rngs) == 0:
            return
        births, f = self.open_season()
        # survivors (binomial, one compiled pass for the batch), moved to their next class;
        # then, where the law allows, the recruits in the same pass
        aged = np.zeros_like(self.counts)
        means = self.recruit_means(f)
        recruits = np.empty(means.shape, dtype=np.int64)
        if kernel.parental:  # survivors by parent class first: their young depend on it
            compiled.survive_counts(self.counts, self.bitgens, kernel.survival, f.adult,
                                    np.arange(kernel.n_classes), aged, means, recruits)
            recruits = self.parental_recruits(aged, f)
            aged = self.aged_counts(aged)
        else:
            compiled.survive_counts(self.counts, self.bitgens, kernel.survival, f.adult, kernel.aged,
                                    aged, means, recruits)
            recruits = self.recruits_after_pass(recruits, births, f)
        born = recruits.sum(axis=1)
        self._remove(aged, recruits, born)
        self.counts, self.recruits = aged, born

    def _remove(self, aged, recruits, born) -> None:
        """Merge recruits into ``aged``, less the random individuals the kernel removes.

        The removed counts by class are multivariate hypergeometric, from the
        recruits alone (a ceiling acting on recruitment) or from everyone.
        """
        kernel = self.kernel
        if not kernel.removes:
            aged[:, kernel.first] += recruits
            return
        excess, _ = kernel.ceiling_excess(aged.sum(axis=1), born)
        excess[aged.sum(axis=1) + born > self.limit] = 0  # capped: the run stops it as it is
        over = np.flatnonzero(excess).tolist()
        if kernel.ceiling_on_recruits:
            for r in over:
                recruits[r] -= self.rngs[r].multivariate_hypergeometric(recruits[r], int(excess[r]))
        aged[:, kernel.first] += recruits
        if not kernel.ceiling_on_recruits:
            for r in over:
                aged[r] -= self.rngs[r].multivariate_hypergeometric(aged[r], int(excess[r]))


class CountsEngine(OneReplicate):
    """One replicate of ``CountsPopulations`` (``engine = "counts"``)."""

    populations = CountsPopulations
