"""Offspring-number distributions: how many offspring an individual of mean m draws.

Each distribution draws for many individuals at once (``draw``), draws the
total of ``n`` individuals of one mean exactly (``draw_total``, for engines
that work with counts), draws that total already thinned by an independent
per-offspring survival ``keep`` (``draw_thinned_total``: the recruits of a
class; ``draw_thinned_totals`` does it for many replicates, each with its own
generator) and gives its probability generating function (``pgf``, for
branching-process calculations), its derivative (``pgf_derivative``:
E[B x^(B - 1)], the expected recruits per parent under a brood effect) and
its probabilities (``pmf_table``, for per-brood-size sums and draws).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Poisson", "Fixed", "NegativeBinomial", "DISTRIBUTIONS", "make_offspring"]


PMF_TAIL = 1e-15  # pmf tables stop where the remaining tail is below this


def _table_by_recurrence(first: float, ratio, mean: float, tail: float):
    """pmf(0..K) from pmf(0) and pmf(k + 1) / pmf(k) = ratio(k), up to a tail below ``tail``."""
    pmf = [first]
    total = first
    k = 0
    while 1.0 - total > tail and pmf[-1] > 0 or k < mean:
        pmf.append(pmf[-1] * ratio(k))
        total += pmf[-1]
        k += 1
    return np.arange(len(pmf)), np.array(pmf)


class _Replicated:
    def draw_thinned_totals(self, n, mean, keep, rngs) -> list:
        """``draw_thinned_total`` for replicate i from ``rngs[i]`` (arrays in, a list out).

        A replicate with n = 0 draws nothing from its generator.
        """
        draw = self.draw_thinned_total
        return [int(draw(a, m, k, g)) if a else 0
                for a, m, k, g in zip(n.tolist(), mean.tolist(), keep.tolist(), rngs)]


@dataclass(frozen=True)
class Poisson(_Replicated):
    """Poisson(m): variance equals the mean."""

    def draw(self, mean, rng):
        return rng.poisson(mean)

    def draw_total(self, n, mean, rng):
        # Sum of n independent Poisson(m) is Poisson(n m).
        return rng.poisson(np.asarray(n) * np.asarray(mean))

    def draw_thinned_total(self, n, mean, keep, rng):
        # Thinning a Poisson(m) by keep gives Poisson(m keep); sum of n of them is Poisson(n m keep).
        return rng.poisson(n * mean * keep)

    def draw_thinned_totals(self, n, mean, keep, rngs) -> list:
        # the batched engines' common case, written out: a call per replicate costs more than the draw
        return [g.poisson(lam) if lam else 0 for lam, g in zip((n * mean * keep).tolist(), rngs)]

    def pgf(self, s, mean):
        return np.exp(np.asarray(mean) * (np.asarray(s) - 1.0))

    def pgf_derivative(self, s, mean):
        """P'(s) = m exp(m (s - 1))."""
        mean = np.asarray(mean, dtype=float)
        return mean * np.exp(mean * (np.asarray(s) - 1.0))

    def pmf_table(self, mean: float, tail: float = PMF_TAIL):
        """Brood sizes 0..K and their probabilities, K where the tail falls below ``tail``."""
        mean = float(mean)
        return _table_by_recurrence(np.exp(-mean), lambda k: mean / (k + 1.0), mean, tail)


@dataclass(frozen=True)
class Fixed(_Replicated):
    """floor(m) plus one more with probability frac(m): the mean is exact, the variance least."""

    def draw(self, mean, rng):
        mean = np.asarray(mean, dtype=float)
        whole = np.floor(mean)
        return (whole + (rng.random(mean.shape) < mean - whole)).astype(np.int64)

    def draw_total(self, n, mean, rng):
        mean = np.asarray(mean, dtype=float)
        whole = np.floor(mean)
        return (np.asarray(n) * whole + rng.binomial(n, mean - whole)).astype(np.int64)

    def draw_thinned_total(self, n, mean, keep, rng):
        # Not closed under thinning: draw the births, then keep each one independently.
        return rng.binomial(self.draw_total(n, mean, rng), keep)

    def pgf(self, s, mean):
        mean = np.asarray(mean, dtype=float)
        whole = np.floor(mean)
        frac = mean - whole
        s = np.asarray(s, dtype=float)
        return s**whole * (1.0 - frac + frac * s)

    def pgf_derivative(self, s, mean):
        """P'(s) = w s^(w - 1) (1 - f + f s) + f s^w, w = floor(m), f = m - w."""
        mean = np.asarray(mean, dtype=float)
        whole = np.floor(mean)
        frac = mean - whole
        s = np.asarray(s, dtype=float)
        lower = np.where(whole > 0, whole * s ** np.maximum(whole - 1.0, 0.0), 0.0)
        return lower * (1.0 - frac + frac * s) + frac * s**whole

    def pmf_table(self, mean: float, tail: float = PMF_TAIL):
        """Brood sizes floor(m) and floor(m) + 1 (from 0, zeros below) and their probabilities."""
        whole = int(np.floor(mean))
        frac = float(mean) - whole
        pmf = np.zeros(whole + 2)
        pmf[whole], pmf[whole + 1] = 1.0 - frac, frac
        return np.arange(whole + 2), pmf


@dataclass(frozen=True)
class NegativeBinomial(_Replicated):
    """Negative binomial with mean m and dispersion k: variance m + m^2 / k.

    A gamma-mixed Poisson; k -> infinity recovers the Poisson.
    """

    dispersion: float

    def _p(self, mean):
        return self.dispersion / (self.dispersion + np.asarray(mean, dtype=float))

    def draw(self, mean, rng):
        return rng.negative_binomial(self.dispersion, self._p(mean))

    def draw_total(self, n, mean, rng):
        # Sum of n independent NB(k, p) is NB(n k, p); NB with n k = 0 is 0.
        n = np.asarray(n)
        shape = np.maximum(n * self.dispersion, 1e-300)
        return np.where(n > 0, rng.negative_binomial(shape, self._p(mean)), 0)

    def draw_thinned_total(self, n, mean, keep, rng):
        # A gamma-mixed Poisson thinned by keep is the same mixture at mean m keep, so
        # NB(k, mean m) thinned is NB(k, mean m keep) and the sum of n of them NB(n k, same p).
        if np.ndim(n) == 0:
            return rng.negative_binomial(n * self.dispersion, self._p(mean * keep)) if n > 0 else 0
        return self.draw_total(n, np.asarray(mean) * keep, rng)

    def pgf(self, s, mean):
        p = self._p(mean)
        return (p / (1.0 - (1.0 - p) * np.asarray(s, dtype=float))) ** self.dispersion

    def pgf_derivative(self, s, mean):
        """P'(s) = k (1 - p) p^k / (1 - (1 - p) s)^(k + 1), p = k / (k + m)."""
        p, k = self._p(mean), self.dispersion
        return k * (1.0 - p) * p**k / (1.0 - (1.0 - p) * np.asarray(s, dtype=float)) ** (k + 1.0)

    def pmf_table(self, mean: float, tail: float = PMF_TAIL):
        """Brood sizes 0..K and their probabilities, K where the tail falls below ``tail``."""
        p, k = float(self._p(mean)), self.dispersion
        return _table_by_recurrence(p**k, lambda j: (k + j) / (j + 1.0) * (1.0 - p), float(mean), tail)


DISTRIBUTIONS = {"poisson": Poisson, "fixed": Fixed, "negative-binomial": NegativeBinomial}


def make_offspring(distribution: str = "poisson", dispersion: float | None = None):
    """Build an offspring distribution from its config name (validated by the schema)."""
    law = DISTRIBUTIONS[distribution]
    return law(float(dispersion)) if law is NegativeBinomial else law()
