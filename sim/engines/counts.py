"""The aggregated engine: counts by allele and age, exact in distribution, cost independent of N.

Where individuals carry nothing but their allele and age, individuals of one
class are exchangeable, and every per-individual draw of the life cycle sums
to a class-level draw of known law:

- survival: n independent Bernoulli(p) trials are Binomial(n, p);
- recruitment: a class's births thinned by juvenile survival
  (``draw_thinned_total``; Poisson and negative-binomial totals are closed
  under thinning and superposition, other laws draw births then Binomial);
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
        rules, rngs = self.rules, self.rngs
        n_reps = len(rngs)
        if n_reps == 0:
            return
        counts = self.counts
        births, f = rules.open_season(counts, rngs)
        # survivors (binomial, one compiled pass for the batch), moved to their next class;
        # then, where the law allows, the recruits in the same pass
        aged = np.zeros_like(counts)
        means, recruits = rules.pass_recruits(counts, f)
        compiled.survive_counts(counts, self.bitgens, rules.survival, f.adult, rules.aged, aged,
                                means, recruits)
        recruits = rules.recruits_after_pass(recruits, counts, births, f, rngs)
        born = recruits.sum(axis=1)
        if rules.ceiling is None:
            aged[:, rules.first] += recruits
        else:
            self._ceiling(aged, recruits, born)
        self.counts, self.recruits = aged, born

    def _ceiling(self, aged, recruits, born) -> None:
        """Merge recruits into ``aged`` and remove a uniformly random set down to the capacity.

        The removed counts by class are multivariate hypergeometric, from the
        recruits alone (acting on recruitment) or from everyone.
        """
        rules = self.rules
        excess, _ = rules.ceiling_excess(aged.sum(axis=1), born)
        over = np.flatnonzero(excess).tolist()
        if rules.ceiling_on_recruits:
            for r in over:
                recruits[r] -= self.rngs[r].multivariate_hypergeometric(recruits[r], int(excess[r]))
        aged[:, rules.first] += recruits
        if not rules.ceiling_on_recruits:
            for r in over:
                aged[r] -= self.rngs[r].multivariate_hypergeometric(aged[r], int(excess[r]))


class CountsEngine(OneReplicate):
    """One replicate of ``CountsPopulations`` (``engine = "counts"``)."""

    populations = CountsPopulations
