"""Offspring-number distributions: how many offspring an individual of mean m draws.

Each distribution draws for many individuals at once (``draw``), draws the
total of ``n`` individuals of one mean exactly (``draw_total``, for engines
that work with counts), draws that total already thinned by an independent
per-offspring survival ``keep`` (``draw_thinned_total``: the recruits of a
class; ``draw_thinned_totals`` does it for many replicates, each with its own
generator) and gives its probability generating function (``pgf``, for
branching-process calculations). ``Poisson.quantile`` turns a uniform into a
Poisson draw by inversion, for engines that draw a replicate's uniforms in
one call.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["Poisson", "Fixed", "NegativeBinomial", "make_offspring"]


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

    def quantile(self, u, mean) -> np.ndarray:
        """The least k with P(X <= k) > u, X ~ Poisson(mean), elementwise (int64).

        Inversion: for u uniform on [0, 1) this is an exact Poisson(mean) draw
        (Devroye 1986, ch. II.2), up to the double-precision rounding of the
        distribution function (``scipy.special.pdtr``), as in any floating-point
        sampler. A Cornish-Fisher guess starts the search; only the number of
        steps depends on it, never the result.
        """
        u, mean = np.broadcast_arrays(np.asarray(u, dtype=float), np.asarray(mean, dtype=float))
        shape = u.shape
        u, mean = u.ravel(), mean.ravel()
        if u.size <= 4:  # a lone replicate's few draws: Python numbers cost less than arrays
            return np.array([_poisson_quantile(a, m) for a, m in zip(u.tolist(), mean.tolist())],
                            dtype=np.int64).reshape(shape)
        z = special.ndtri(np.maximum(u, 2.0**-53))  # the guess only: u = 0 would give -inf
        k = np.maximum(np.ceil(mean + np.sqrt(mean) * z + (z * z - 1.0) / 6.0 - 0.5), 0.0)
        up = special.pdtr(k, mean) <= u  # these step up while P(X <= k) <= u
        down = ~up & (k > 0)  # the others step down while P(X <= k - 1) > u
        while down.any():
            down[down] = special.pdtr(k[down] - 1.0, mean[down]) > u[down]
            k[down] -= 1.0
            down &= k > 0
        while up.any():
            k[up] += 1.0
            up[up] = special.pdtr(k[up], mean[up]) <= u[up]
        return k.astype(np.int64).reshape(shape)

    def pgf(self, s, mean):
        return np.exp(np.asarray(mean) * (np.asarray(s) - 1.0))


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


def _poisson_quantile(u: float, mean: float) -> int:
    """``Poisson.quantile`` for one pair of Python floats: the same search, the same result."""
    z = float(special.ndtri(max(u, 2.0**-53)))
    k = max(math.ceil(mean + math.sqrt(mean) * z + (z * z - 1.0) / 6.0 - 0.5), 0)
    if special.pdtr(float(k), mean) <= u:
        k += 1
        while special.pdtr(float(k), mean) <= u:
            k += 1
    else:
        while k > 0 and special.pdtr(k - 1.0, mean) > u:
            k -= 1
    return k


def make_offspring(distribution: str = "poisson", dispersion: float | None = None):
    """Build an offspring distribution from its config name."""
    if distribution == "poisson":
        return Poisson()
    if distribution == "fixed":
        return Fixed()
    if distribution == "negative-binomial":
        if dispersion is None or dispersion <= 0:
            raise ValueError(f"negative-binomial needs dispersion > 0; got {dispersion!r}")
        return NegativeBinomial(float(dispersion))
    raise ValueError(f"unknown offspring distribution {distribution!r}")
