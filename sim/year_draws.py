"""Each replicate's year sequence, drawn season by season from a keyed stream of its own.

A variable environment (``[environment]``, ``sim.years.YearTypes``) needs the
year type of every season of every replicate. The years are drawn from
streams that are not the demographic ones, so a config without
``[environment]`` draws exactly what it drew before, and a config with one
draws the same demography-stream numbers in the same order:

- replicate r at sweep point i: ``SeedSequence(seed, spawn_key=(i, r, 1))``;
- ``shared_years = true``: one sequence per point, ``SeedSequence(seed,
  spawn_key=(i, 0, 2))``, lived through by every replicate of the point.

Why these keys cannot be a demographic key: the demographic stream of
replicate r at point i is ``SeedSequence(seed, spawn_key=(i, r))``
(``sim.replicates.replicate_rng``). numpy's SeedSequence hashes the seed's
words, padded to its pool of 4 words, followed by each key entry's 32-bit
words. With point and replicate indices below 2^32 (the schema caps the
replicates; a sweep of 2^32 points cannot be built) a demographic key is two
words and a year key three, so no year key is a demographic key: the streams
are two distinct children of the same seed, as independent as any two
spawned SeedSequences. The third word (1 per replicate, 2 shared) keeps the
two kinds of year key apart too.

The season's year is one uniform of the year stream (``YearTypes.draw``'s
rule: ``from_uniforms``), drawn in chunks of ``CHUNK`` seasons per stream;
a stream's uniforms are the same whether drawn one by one or in chunks, so
the years of a replicate are ``years.draw(n_seasons, its_stream)``'s, alone
or in any batch.
"""

from __future__ import annotations

import numpy as np

from .streams import keyed_generators
from .years import YearTypes

__all__ = ["YEAR_STREAM", "SHARED_YEAR_STREAM", "SeasonYears", "year_sequence"]

YEAR_STREAM = 1  # spawn_key (point, replicate, 1): a replicate's own year sequence
SHARED_YEAR_STREAM = 2  # spawn_key (point, 0, 2): the one sequence of a point (shared_years)
CHUNK = 64  # seasons of uniforms drawn at a time per stream


class SeasonYears:
    """The year types of a batch of replicates, one season at a time.

    Parameters
    ----------
    years : YearTypes
    rngs : sequence of numpy.random.Generator
        One year stream per replicate, or a single stream every replicate
        shares (``n_replicates`` then says how many).
    n_replicates : int, optional
        With one shared stream: the number of replicates living through it.

    Attributes
    ----------
    current : ndarray of int, shape (n_active,)
        Each active replicate's year-type index in the last season drawn.
    """

    def __init__(self, years: YearTypes, rngs, *, n_replicates: int | None = None):
        self.years = years
        self.table = np.ascontiguousarray(years.multipliers())
        self.rngs = list(rngs)
        self.shared = n_replicates is not None
        self.n_active = n_replicates if self.shared else len(self.rngs)
        self._state = None  # last year type of each stream (markov)
        self._uniforms = np.empty((len(self.rngs), 0))
        self._used = 0
        self.current = np.empty(0, dtype=np.int64)

    @classmethod
    def for_replicates(cls, years: YearTypes, seed: int, point: int, replicates, *,
                       shared: bool = False) -> SeasonYears:
        """The year streams of these replicates of a point (or the point's shared one)."""
        reps = [int(r) for r in replicates]
        if shared:
            return cls(years, keyed_generators(seed, point, [0], stream=SHARED_YEAR_STREAM),
                       n_replicates=len(reps))
        return cls(years, keyed_generators(seed, point, reps, stream=YEAR_STREAM))

    def advance(self) -> np.ndarray:
        """Draw the next season's year type of every active replicate; return the multipliers.

        Returns
        -------
        ndarray, shape (n_active, 3)
            Each replicate's multipliers on (fecundity, adult survival,
            juvenile survival) this season, for ``SeasonKernel.multipliers``.
        """
        if self._used == self._uniforms.shape[1]:
            self._uniforms = np.stack([g.random(CHUNK) for g in self.rngs]) if self.rngs \
                else np.empty((0, CHUNK))
            self._used = 0
        u = self._uniforms[:, self._used]
        self._used += 1
        self._state = _next_years(self.years, u, self._state)
        self.current = np.repeat(self._state, self.n_active) if self.shared else self._state
        return self.table[self.current]

    def keep(self, which) -> None:
        """Keep only the replicates where ``which`` (bool, one per active replicate) is true."""
        which = np.asarray(which, dtype=bool)
        self.current = self.current[which] if self.current.size else self.current
        if self.shared:
            self.n_active = int(which.sum())
            return
        self.rngs = [g for g, k in zip(self.rngs, which) if k]
        self._uniforms = self._uniforms[which]
        if self._state is not None:
            self._state = self._state[which]


def _next_years(years: YearTypes, u: np.ndarray, previous: np.ndarray | None) -> np.ndarray:
    """One season's year types from one uniform per stream, as ``YearTypes.from_uniforms``:
    iid inverts the probabilities; markov the start law first, then the row of last year."""
    if years.switching == "iid" or previous is None:
        if years.switching == "iid":
            return years.from_uniforms(u[:, None])[:, 0]
        first = np.cumsum(years.start_law())
        first[-1] = 1.0
        return np.minimum(np.searchsorted(first, u, side="right"), len(years) - 1).astype(np.int64)
    cum = np.cumsum(np.asarray(years.transitions), axis=1)
    cum[:, -1] = 1.0
    return (u[:, None] >= cum[previous]).sum(axis=1).astype(np.int64)


def year_sequence(years: YearTypes, seed: int, point: int, replicate: int, n_seasons: int, *,
                  shared: bool = False) -> np.ndarray:
    """The year types of seasons 1..n_seasons of one replicate (or of a point, ``shared``)."""
    draws = SeasonYears.for_replicates(years, seed, point, [replicate], shared=shared)
    out = np.empty(int(n_seasons), dtype=np.int64)
    for t in range(int(n_seasons)):
        draws.advance()
        out[t] = draws.current[0]
    return out
