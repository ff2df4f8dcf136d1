"""The default engine: each individual is an entry of a numpy array, one compiled pass per season."""

from __future__ import annotations

import numpy as np

from ..lifecycle import LifeCycle
from . import compiled
from .season import OneReplicate, ReplicateBatch

__all__ = ["IndividualEngine", "IndividualPopulations"]


class IndividualPopulations(ReplicateBatch):
    """Replicate populations whose individuals are the entries of one array.

    Each individual is one entry of ``cell``: its class (allele and age index,
    see ``sim.kernel``), in the smallest unsigned integer type that holds the
    classes (one byte for up to 256 classes). The replicates own consecutive
    slices of ``cell`` (of lengths ``sizes``): each its survivors in their
    previous order, then its recruits.

    One season samples the kernel (``sim.kernel.SeasonKernel``) in the order
    of the life cycle: density index, breeding, survival (one uniform per
    individual, independent of its brood), recruitment, next census, then the
    removal of random individuals a ceiling asks for. Each class's recruits are drawn as one total (exact: parents
    within a class are exchangeable and pass on only their allele); with parental effects,
    by (class, fate, brood size) after the pass (``ReplicateBatch.parental_recruits``). The pass
    over individuals is compiled (``compiled.survive``): one pass for every
    replicate of the batch, each drawing from its own generator; where
    ``ReplicateBatch.recruits_in_pass`` (Poisson offspring), a replicate draws its
    recruits of each allele in the same pass, right after its individuals. The next
    census is built by a second pass (``compiled.next_census``), which also takes its
    density index; where the recruits go in as drawn (no mutation, no parental
    effects) the two passes are one call (``compiled.survive_to_census``).

    Parameters are those of ``ReplicateBatch``.
    """

    def __init__(self, life: LifeCycle, census: np.ndarray, rngs, *, limit: int | None = None):
        super().__init__(life, census, rngs, limit=limit)
        kernel, counts = self.kernel, self.counts
        self._dtype = np.min_scalar_type(max(kernel.n_classes - 1, 0))
        self._aged = kernel.aged.astype(self._dtype)
        self._first = kernel.first.astype(self._dtype)
        self._stay = np.arange(kernel.n_classes, dtype=self._dtype)
        self.sizes = counts.sum(axis=1)
        classes = np.tile(np.arange(kernel.n_classes, dtype=self._dtype), len(self.rngs))
        self.cell = np.repeat(classes, counts.ravel())
        self._segments = None  # (slice sizes, kept) while left replicates' individuals remain
        self._drawn = np.ones(0, dtype=bool)
        self._work = None  # ``_season_work``
        self._index = kernel.density_index(counts)  # D at the census (``census_index``)
        # the pass's recruits go into the census as drawn (``recruits_after_pass`` would return
        # them unchanged): survival and the next census are one compiled call
        self._recruits_as_drawn = (self.recruits_in_pass and self._mutation is None
                                   and not kernel.parental)
        # max_population as an int64 the compiled pass compares with (none: never passed)
        self._limit = np.iinfo(np.int64).max if np.isinf(self.limit) else int(self.limit)

    def state_bytes(self) -> int:
        """Bytes held between seasons: the individuals, and counts by replicate and class."""
        return (self.cell.nbytes + self.counts.nbytes + self.sizes.nbytes
                + self.bitgens.nbytes)

    def keep(self, which) -> None:
        """Keep only the replicates where ``which`` (bool, one per replicate) is true.

        The individuals of the others leave ``cell`` at the next step's
        compaction (a pass over the array saved); until then ``_segments``
        holds the slices ``cell`` is made of and which of them are kept.
        """
        which = np.asarray(which, dtype=bool)
        if self._segments is None:
            self._segments = (self.sizes, which.copy())
        else:
            kept = self._segments[1].copy()
            kept[kept] = which
            self._segments = (self._segments[0], kept)
        self.sizes, self._index = self.sizes[which], self._index[which]
        super().keep(which)

    def step(self) -> None:
        """Advance every replicate one season."""
        kernel = self.kernel
        n_reps = len(self.rngs)
        if n_reps == 0:
            return
        # 1. density index from the census (or, counting offspring, 2. births first)
        births, f = self.open_season()
        # 3. survival (one uniform per individual), survivors one year older (the
        # plus-group stays); 4. then, where the law allows, each replicate's recruits
        if self._segments is None:
            slice_sizes, drawn = self.sizes, self._all_drawn(n_reps)
        else:
            (slice_sizes, drawn), self._segments = self._segments, None
        # with parental effects the pass keeps each survivor's parent class (young depend on it)
        aged = self._stay if kernel.parental else self._aged
        by_class = np.zeros((n_reps, kernel.n_classes), dtype=np.int64)
        means = self.recruit_means(f)
        survivors, recruits, over = self._season_work(n_reps, means.shape[1])
        # 5. next census: survivors, then recruits at age 1 (a replicate past the limit keeps
        # its counts, the run stops it as capped, but not its recruits' cells); the kernel's removals
        sizes, born = np.empty(n_reps, dtype=np.int64), np.empty(n_reps, dtype=np.int64)
        index = np.empty(n_reps)
        if self._recruits_as_drawn:  # the two passes in one call
            cell = compiled.survive_to_census(self.cell, slice_sizes, drawn, self.bitgens,
                                              kernel.survival, f.adult, aged, survivors, by_class,
                                              means, recruits, self._first, self._limit, sizes,
                                              born, over, kernel.weights, index)
        else:
            survived = np.empty(self.cell.size, dtype=self._dtype)
            total = compiled.survive(self.cell, slice_sizes, drawn, self.bitgens, kernel.survival,
                                     f.adult, aged, survived, survivors, by_class, means, recruits)
            if kernel.parental:
                recruits = self.parental_recruits(by_class, f)
                survived, by_class = self._aged[survived[:total]], self.aged_counts(by_class)
            else:
                recruits = self.recruits_after_pass(recruits, births, f)
            cell = compiled.next_census(survived, survivors, recruits, self._first, self._limit,
                                        by_class, sizes, born, over, kernel.weights, index)
        if kernel.removes:
            excess, pool = kernel.ceiling_excess(survivors, born)
            excess = np.where(over, 0, excess)
            if excess.any():
                cell, removed = self._remove(cell, sizes, excess, pool)
                by_class -= removed
                sizes = sizes - removed.sum(axis=1)
                index = kernel.density_index(by_class)
        self.cell, self.counts, self.sizes, self.recruits = cell, by_class, sizes, born
        self._index = index

    def census_index(self) -> np.ndarray:
        """Each replicate's density index D at its census: the pass's, taken as it built the
        census (the same sum as ``SeasonKernel.density_index``)."""
        return self._index

    def _all_drawn(self, n_reps: int) -> np.ndarray:
        """Every slice drawn (no replicate has left since the last season); kept, not rebuilt."""
        if self._drawn.size != n_reps:
            self._drawn = np.ones(n_reps, dtype=bool)
        return self._drawn

    def _season_work(self, n_reps: int, n_drawn: int):
        """Arrays a season fills and reads within itself (survivors and recruits by replicate,
        whether it passed the limit): kept from season to season while the batch's size holds."""
        work = self._work
        if work is None or work[0].size != n_reps or work[1].shape[1] != n_drawn:
            work = self._work = (np.empty(n_reps, dtype=np.int64),
                                 np.empty((n_reps, n_drawn), dtype=np.int64),
                                 np.empty(n_reps, dtype=bool))
        return work

    def _remove(self, cell, sizes, excess, pool):
        """Remove ``excess`` random individuals of each replicate from the last ``pool`` of its
        slice (its recruits, or everyone)."""
        removed = np.zeros((len(sizes), self.kernel.n_classes), dtype=np.int64)
        over = np.flatnonzero(excess)
        pool_start = np.cumsum(sizes) - pool  # the pool is the end of each replicate's slice
        chosen = [pool_start[r] + self.rngs[r].choice(int(pool[r]), size=int(excess[r]),
                                                       replace=False, shuffle=False)
                  for r in over.tolist()]
        gone = np.concatenate(chosen)
        removed_rep = np.repeat(over, excess[over])
        np.add.at(removed, (removed_rep, cell[gone]), 1)
        keep = np.ones(cell.size, dtype=bool)
        keep[gone] = False
        return cell[np.flatnonzero(keep)], removed


class IndividualEngine(OneReplicate):
    """One replicate of ``IndividualPopulations``: the default engine of ``BroodModel``."""

    populations = IndividualPopulations

    @property
    def allele(self) -> np.ndarray:
        """Each individual's allele index."""
        return self.batch.cell // self.life.n_ages

    @property
    def age(self) -> np.ndarray:
        """Each individual's age index (0 is age 1; the last is the plus-group)."""
        return self.batch.cell % self.life.n_ages
