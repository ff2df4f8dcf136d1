"""Mutation between alleles, applied to each offspring independently."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Mutation", "uniform_mutation", "neighbour_mutation"]


@dataclass(frozen=True)
class Mutation:
    """Per-offspring mutation matrix Q: Q[i, j] = P(offspring of an i parent carries j).

    Rows sum to 1. The identity matrix means no mutation (and no random draws).
    """

    matrix: np.ndarray

    def __post_init__(self):
        q = np.asarray(self.matrix, dtype=float)
        # the schema (sim.config) checks a configured matrix; this guards one built by hand
        assert q.ndim == 2 and q.shape[0] == q.shape[1], q.shape
        object.__setattr__(self, "matrix", q)

    @property
    def active(self) -> bool:
        """False for the identity (no mutation)."""
        return not np.array_equal(self.matrix, np.eye(len(self.matrix)))

    def mutate(self, alleles: np.ndarray, rng) -> np.ndarray:
        """New alleles for offspring whose parents carry ``alleles``."""
        if not self.active or alleles.size == 0:
            return alleles
        cumulative = np.cumsum(self.matrix, axis=1)[alleles]
        u = rng.random(alleles.size)
        new = (u[:, None] >= cumulative[:, :-1]).sum(axis=1)
        return new.astype(alleles.dtype)

    def mutate_counts(self, counts: np.ndarray, rng) -> np.ndarray:
        """Redistribute offspring counts by parent allele (shape (n_alleles, ...)) multinomially."""
        if not self.active:
            return counts
        counts = np.asarray(counts)
        out = np.zeros_like(counts)
        for i in range(len(self.matrix)):
            draws = rng.multinomial(counts[i], self.matrix[i])  # (..., n_alleles)
            out += np.moveaxis(draws, -1, 0)
        return out


def uniform_mutation(n_alleles: int, rate: float) -> Mutation:
    """Mutation at ``rate`` per offspring to another allele, uniform among the others."""
    if n_alleles == 1 or rate == 0:
        return Mutation(np.eye(n_alleles))
    q = np.full((n_alleles, n_alleles), rate / (n_alleles - 1))
    np.fill_diagonal(q, 1.0 - rate)
    return Mutation(q)


def neighbour_mutation(n_alleles: int, rate: float) -> Mutation:
    """Mutation at ``rate`` per offspring to a neighbouring allele on a line (a trait grid).

    An interior allele i mutates to i - 1 and to i + 1 with ``rate / 2`` each;
    an allele at an end mutates to its one neighbour with the whole ``rate``
    (the walk is reflected at the ends, so every allele mutates at the same
    rate). One allele, or rate 0, is no mutation.
    """
    q = np.eye(n_alleles)
    if n_alleles == 1 or rate == 0:
        return Mutation(q)
    for i in range(n_alleles):
        neighbours = [j for j in (i - 1, i + 1) if 0 <= j < n_alleles]
        q[i, i] = 1.0 - rate
        q[i, neighbours] = rate / len(neighbours)
    return Mutation(q)
