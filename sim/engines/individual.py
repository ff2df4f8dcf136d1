"""The default engine: each individual is an entry of a numpy array, one vectorised pass per season."""

from __future__ import annotations

import numpy as np

from ..lifecycle import LifeCycle
from .season import OneReplicate, ReplicateBatch

__all__ = ["IndividualEngine", "IndividualPopulations"]

_CHUNK = 1 << 16  # individuals per survival chunk (its temporaries fit in cache)


def _chunk(n: int) -> int:
    """Chunk length for n individuals: at most _CHUNK, and a quarter of n down to 4096,
    so a season's temporaries stay a small share of a mid-sized population."""
    return min(_CHUNK, max(4096, n // 4))


class IndividualPopulations(ReplicateBatch):
    """Replicate populations whose individuals are the entries of one array.

    Each individual is one entry of ``cell``: its class (allele and age index,
    see ``ClassRules``), in the smallest unsigned integer type that holds the
    classes (one byte for up to 256 classes). The replicates own consecutive
    slices of ``cell`` (of lengths ``sizes``): each its survivors in their
    previous order, then its recruits.

    One season follows the life cycle of DESIGN.md: density index, breeding,
    survival (one uniform per individual, independent of its brood),
    recruitment, next census, then a ceiling's removal of random
    individuals. Each class's recruits are drawn as one total (exact: parents
    within a class are exchangeable and pass on only their allele). Where
    ``ClassRules.recruit_uniforms`` is k > 0 (Poisson offspring), a replicate
    draws its season's uniforms in one call: one per individual, then k for
    its recruits (``ClassRules.recruits_from_uniforms``).

    Parameters are those of ``ReplicateBatch``.
    """

    def __init__(self, life: LifeCycle, census: np.ndarray, rngs):
        super().__init__(life, census, rngs)
        rules, counts = self.rules, self.counts
        self._dtype = np.min_scalar_type(max(rules.n_classes - 1, 0))
        self._aged = rules.aged.astype(self._dtype)
        self._first = rules.first.astype(self._dtype)
        self.sizes = counts.sum(axis=1)
        classes = np.tile(np.arange(rules.n_classes, dtype=self._dtype), len(self.rngs))
        self.cell = np.repeat(classes, counts.ravel())
        self._segments = None  # (slice sizes, kept) while left replicates' individuals remain
        self._uniforms = np.empty(0)  # a batch's survival uniforms, reused season to season
        self._k = self.rules.recruit_uniforms

    def state_bytes(self) -> int:
        """Bytes held between seasons: the individuals, their counts by class, and (batches
        of several replicates only) the buffer of survival uniforms."""
        return self.cell.nbytes + self.counts.nbytes + self.sizes.nbytes + self._uniforms.nbytes

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
        self.sizes = self.sizes[which]
        super().keep(which)

    def step(self) -> None:
        """Advance every replicate one season."""
        rules, rngs = self.rules, self.rngs
        n_reps = len(rngs)
        if n_reps == 0:
            return
        counts, cell = self.counts, self.cell
        # 1. density index from the census (or, counting offspring, 2. births first)
        births, f = rules.open_season(counts, rngs)
        # 3. survival (one uniform per individual), survivors one year older (the
        # plus-group stays)
        if n_reps == 1 and self._segments is None:
            aged, tails = self._survivors_streamed(cell, rngs[0], float(f.adult[0]))
            survivors = np.array([aged.size])
            by_class = np.bincount(aged, minlength=rules.n_classes)[None]
        else:
            aged, survivors, tails = self._survivors_batched(cell, f.adult)
            rep = np.repeat(np.arange(n_reps) * rules.n_classes, survivors)
            by_class = np.bincount(rep + aged, minlength=n_reps * rules.n_classes).reshape(
                n_reps, rules.n_classes)
        self._segments = None
        # 4. recruitment
        if self._k:
            recruits = rules.recruits_from_uniforms(counts, f, tails, rngs)
        else:
            recruits = rules.recruits(counts, births, f, rngs)
        # 5. next census: survivors, then recruits at age 1; a ceiling's removal
        born = recruits.sum(axis=1)
        cell = self._assemble(aged, survivors, recruits, born)
        by_class[:, rules.first] += recruits
        sizes = survivors + born
        if rules.ceiling is not None:
            cell, removed = self._apply_ceiling(cell, sizes, survivors, born)
            by_class -= removed
            sizes = by_class.sum(axis=1)
        self.cell, self.counts, self.sizes, self.recruits = cell, by_class, sizes, born

    def _survivors_batched(self, cell, f_adult):
        """Survivors of every replicate, aged, in order, their number per replicate, and
        each replicate's k recruit uniforms, (n_replicates, k).

        Each replicate draws the uniforms of its own slice of ``cell``, then
        its k more (saved before the next replicate's draws overwrite them);
        slices of replicates that left the batch get uniforms of 2 (no one
        survives).
        """
        sizes, kept = self._segments if self._segments is not None else (self.sizes, None)
        offsets = np.concatenate([[0], np.cumsum(sizes)])
        k = self._k
        if self._uniforms.size < cell.size + k:  # kept between seasons: no fresh pages to fault in
            self._uniforms = np.empty(int(cell.size * 1.25) + k)
        u = self._uniforms
        starts, ends = offsets[:-1], offsets[1:]
        if kept is not None:
            starts, ends = starts[kept], ends[kept]
        tails = []
        for g, a, b in zip(self.rngs, starts.tolist(), ends.tolist()):
            g.random(out=u[a:b + k])
            tails += u[b:b + k].tolist()
        if kept is not None:
            for a, b in zip(offsets[:-1][~kept].tolist(), offsets[1:][~kept].tolist()):
                u[a:b] = 2.0
        survival = self.rules.survival
        if self.rules.adult_density:
            by_slice = np.ones(sizes.size)
            by_slice[slice(None) if kept is None else kept] = f_adult
            slice_of = np.repeat(np.arange(sizes.size), sizes)
        lives = np.empty(cell.size, dtype=bool)
        step = _chunk(cell.size)
        for a in range(0, cell.size, step):  # chunks keep the temporaries in cache
            b = min(a + step, cell.size)
            threshold = survival[cell[a:b]]
            if self.rules.adult_density:
                threshold *= by_slice[slice_of[a:b]]
            np.less(u[a:b], threshold, out=lives[a:b])
        alive = np.flatnonzero(lives)
        survivors = np.diff(np.searchsorted(alive, offsets))
        if kept is not None:
            survivors = survivors[kept]
        return self._aged[cell[alive]], survivors, np.array(tails).reshape(len(self.rngs), k)

    def _assemble(self, aged, survivors, recruits, born) -> np.ndarray:
        """The next census's array: per replicate, its aged survivors then its recruits by allele."""
        n_reps = recruits.shape[0]
        total_survivors = aged.size
        out = np.empty(total_survivors + int(born.sum()), dtype=self._dtype)
        fill = np.repeat(np.tile(self._first, n_reps), recruits.ravel())
        if n_reps == 1:
            out[:total_survivors] = aged
            out[total_survivors:] = fill
            return out
        lengths = np.stack([survivors, born], axis=1).ravel()
        from_survivors = np.repeat(np.tile([True, False], n_reps), lengths)
        out[from_survivors] = aged
        out[~from_survivors] = fill
        return out

    def _survivors_streamed(self, cell, rng, f_adult: float):
        """One replicate's survivors, aged, drawn chunk by chunk (few bytes per individual at
        peak), and its k recruit uniforms, (1, k).

        A generator's uniforms form one sequence however they are split into
        calls, so these are the very draws one call for the whole population
        (and the k more) would make.
        """
        survival, aged_class = self.rules.survival, self._aged
        if self.rules.adult_density:
            survival = survival * f_adult
        out = np.empty(cell.size, dtype=self._dtype)
        step = _chunk(cell.size)
        u = np.empty(min(cell.size, step))
        k = 0
        for a in range(0, cell.size, step):
            c = cell[a:a + step]
            w = u[:c.size]
            rng.random(out=w)
            kept = aged_class[np.compress(w < survival[c], c)]
            out[k:k + kept.size] = kept
            k += kept.size
        return out[:k], rng.random((1, self._k)) if self._k else None

    def _apply_ceiling(self, cell, sizes, survivors, born):
        """Remove random individuals down to the capacity (from recruits only, or anyone)."""
        rules = self.rules
        excess, pool = rules.ceiling_excess(survivors, born)
        removed = np.zeros((len(sizes), rules.n_classes), dtype=np.int64)
        over = np.flatnonzero(excess)
        if over.size == 0:
            return cell, removed
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
