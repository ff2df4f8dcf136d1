"""Keyed random streams: ``SeedSequence(seed, spawn_key=(point, replicate))``, many at a time.

Every replicate draws from the PCG64 generator that
``numpy.random.default_rng(SeedSequence(seed, spawn_key=(point, replicate)))``
builds. Building one that way costs some 10 microseconds, most of it the
``SeedSequence`` hashing its entropy in per-word Python-level steps; a batch
of small replicates pays it per replicate. ``keyed_generators`` computes the
same hash for a whole batch with array operations and hands each ``PCG64``
its 256 seeding bits through numpy's documented ``ISeedSequence`` interface,
so the generators are the very ones ``default_rng`` gives (the tests compare
states and draws key by key).

The hash is numpy's ``SeedSequence`` (O'Neill's ``seed_seq`` alternative):
the entropy words are hashed into a pool of four 32-bit words, mixed with one
another, and the pool is hashed into the output words. What follows writes it
out for entropy = the seed's words padded to the pool size, then one word per
spawn-key entry (key entries below 2^32).
"""

from __future__ import annotations

import numpy as np
from numpy.random.bit_generator import ISeedSequence

__all__ = ["keyed_generators"]

_MASK = 0xFFFFFFFF
_POOL = 4  # numpy's default pool size
_INIT_A, _MULT_A = 0x43B0D7E5, 0x931E8875
_INIT_B, _MULT_B = 0x8B51F9DD, 0x58F38DED
_MIX_L, _MIX_R = 0xCA01F9DD, 0x4973F715
_SHIFT = 16


def _words(n: int) -> list[int]:
    """An int as little-endian 32-bit words (0 is one word), as SeedSequence takes it."""
    words = [n & _MASK]
    n >>= 32
    while n:
        words.append(n & _MASK)
        n >>= 32
    return words


class _Hash:
    """The multiplier sequence of one hashing pass (the same for every key)."""

    def __init__(self, init: int, mult: int):
        self.const, self.mult = init, mult

    def __call__(self, value):
        """Hash ``value`` (uint64 array of 32-bit words) with the next constant."""
        value = value ^ np.uint64(self.const)
        self.const = (self.const * self.mult) & _MASK
        value = (value * np.uint64(self.const)) & np.uint64(_MASK)
        return value ^ (value >> np.uint64(_SHIFT))


def _mix(x, y):
    result = (np.uint64(_MIX_L) * x - np.uint64(_MIX_R) * y) & np.uint64(_MASK)
    return result ^ (result >> np.uint64(_SHIFT))


def _seeding_words(seed: int, keys: np.ndarray) -> np.ndarray:
    """``SeedSequence(seed, spawn_key=k).generate_state(4, np.uint64)`` for each row k of ``keys``."""
    n = keys.shape[0]
    run = _words(seed)
    run += [0] * (_POOL - len(run))
    entropy = [np.full(n, w, dtype=np.uint64) for w in run] + list(keys.T.astype(np.uint64))
    hash_a = _Hash(_INIT_A, _MULT_A)
    pool = [hash_a(entropy[i]) for i in range(_POOL)]
    for src in range(_POOL):
        for dst in range(_POOL):
            if src != dst:
                pool[dst] = _mix(pool[dst], hash_a(pool[src]))
    for word in entropy[_POOL:]:
        for dst in range(_POOL):
            pool[dst] = _mix(pool[dst], hash_a(word))
    hash_b = _Hash(_INIT_B, _MULT_B)
    out = [hash_b(pool[i % _POOL]) for i in range(8)]  # 8 words of 32 bits, little-endian pairs
    return np.stack([out[2 * j] | (out[2 * j + 1] << np.uint64(32)) for j in range(4)], axis=1)


class _Seeded(ISeedSequence):
    """A ``SeedSequence``'s output for one key, computed beforehand (what ``PCG64`` asks of it)."""

    def __init__(self, words: np.ndarray):
        self.words = words

    def generate_state(self, n_words, dtype=np.uint32):
        if n_words != 4 or np.dtype(dtype) != np.uint64:
            raise ValueError("only the PCG64 seeding request (4 words of uint64) is held")
        return self.words.copy()


def keyed_generators(seed: int, point: int, replicates, *, stream: int | None = None
                     ) -> list[np.random.Generator]:
    """``default_rng(SeedSequence(seed, spawn_key=(point, r)))`` for each replicate r.

    With ``stream`` the key is ``(point, r, stream)``: another stream of the
    same replicate (its year sequence, ``sim.year_draws``), never one of the
    demographic keys, which have two entries.

    Parameters
    ----------
    seed : int
        The experiment's root seed (>= 0).
    point : int
        Sweep point index (>= 0).
    replicates : sequence of int
        Replicate indices (>= 0).

    stream : int, optional
        A third key entry (>= 0, below 2^32).

    Returns
    -------
    list of numpy.random.Generator, one per replicate, in order.
    """
    if stream is not None and not 0 <= stream <= _MASK:
        raise ValueError(f"stream must be in [0, 2^32); got {stream}")
    reps = [int(r) for r in replicates]
    if not reps:
        return []
    if seed < 0 or not 0 <= point <= _MASK or min(reps) < 0 or max(reps) > _MASK:
        # outside the one-word keys written out above: numpy's own construction
        return [np.random.default_rng(np.random.SeedSequence(seed, spawn_key=_key(point, r, stream)))
                for r in reps]
    keys = np.empty((len(reps), 2 if stream is None else 3), dtype=np.uint64)
    keys[:, 0], keys[:, 1] = point, reps
    if stream is not None:
        keys[:, 2] = stream
    return [np.random.Generator(np.random.PCG64(_Seeded(w))) for w in _seeding_words(seed, keys)]


def _key(point: int, replicate: int, stream: int | None) -> tuple:
    return (point, replicate) if stream is None else (point, replicate, stream)
