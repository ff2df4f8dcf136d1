"""Offspring distributions and mutation against their defining moments."""

import numpy as np
import pytest
from scipy import stats

from sim.mutation import uniform_mutation
from sim.offspring import Fixed, NegativeBinomial, Poisson

N = 200_000
# Tolerance: 5 standard errors of the sample mean / variance (two-sided false-failure rate
# ~6e-7 per check under a correct sampler; the seed is fixed, so the test is deterministic).
Z = 5.0


@pytest.mark.parametrize("dist, mean, variance", [
    (Poisson(), 2.3, 2.3),
    (Fixed(), 2.3, 0.3 * 0.7),                      # floor + Bernoulli(0.3): variance p(1 - p)
    (NegativeBinomial(1.5), 2.3, 2.3 + 2.3**2 / 1.5),  # NB2 parameterisation: m + m^2 / k
])
def test_mean_and_variance(dist, mean, variance):
    rng = np.random.default_rng(11)
    x = dist.draw(np.full(N, mean), rng)
    assert abs(x.mean() - mean) < Z * np.sqrt(variance / N)
    # Standard error of a sample variance ~ sqrt((mu4 - sigma^4) / n); bounded here by
    # the empirical fourth central moment.
    mu4 = np.mean((x - x.mean()) ** 4)
    assert abs(x.var() - variance) < Z * np.sqrt((mu4 - variance**2) / N) + 1e-12


@pytest.mark.parametrize("dist", [Poisson(), Fixed(), NegativeBinomial(0.8)])
def test_pgf_at_zero_is_probability_of_no_offspring(dist):
    rng = np.random.default_rng(5)
    mean = 1.7
    x = dist.draw(np.full(N, mean), rng)
    p0 = float(dist.pgf(0.0, mean))
    assert abs((x == 0).mean() - p0) < Z * np.sqrt(p0 * (1 - p0) / N) + 1e-12


def test_poisson_pgf_matches_scipy():
    # Reference: scipy.stats.poisson pmf; G(s) = sum_k p_k s^k.
    k = np.arange(60)
    for s in (0.0, 0.3, 0.9):
        assert Poisson().pgf(s, 2.5) == pytest.approx(np.sum(stats.poisson.pmf(k, 2.5) * s**k))


def test_negative_binomial_pgf_matches_scipy():
    # Reference: scipy.stats.nbinom(n = k, p = k / (k + m)).
    k, m = 1.5, 2.0
    j = np.arange(400)
    pmf = stats.nbinom.pmf(j, k, k / (k + m))
    assert NegativeBinomial(k).pgf(0.4, m) == pytest.approx(np.sum(pmf * 0.4**j))


@pytest.mark.parametrize("dist", [Poisson(), Fixed(), NegativeBinomial(0.7)])
def test_draw_total_matches_sum_of_draws(dist):
    # Sums of independent draws (superposition): mean n m and variance n var.
    rng = np.random.default_rng(3)
    n, mean = 7, 1.4
    totals = dist.draw_total(np.full(50_000, n), mean, rng)
    singles = dist.draw(np.full((50_000, n), mean), rng).sum(axis=1)
    # Two-sample Kolmogorov-Smirnov at alpha = 1e-4 (a fixed seed; fails only if the laws differ).
    assert stats.ks_2samp(totals, singles).pvalue > 1e-4


def test_uniform_mutation_rates():
    rng = np.random.default_rng(9)
    q = uniform_mutation(3, 0.09)
    new = q.mutate(np.zeros(300_000, dtype=np.int16), rng)
    freq = np.bincount(new, minlength=3) / new.size
    expected = np.array([0.91, 0.045, 0.045])
    se = np.sqrt(expected * (1 - expected) / new.size)
    assert np.all(np.abs(freq - expected) < Z * se)
    counts = q.mutate_counts(np.array([[300_000], [0], [0]]), rng)[:, 0]
    assert counts.sum() == 300_000
    assert np.all(np.abs(counts / 300_000 - expected) < Z * se)


def test_no_mutation_draws_nothing():
    rng = np.random.default_rng(1)
    state = rng.bit_generator.state
    alleles = np.array([0, 1, 1], dtype=np.int16)
    assert uniform_mutation(2, 0.0).mutate(alleles, rng) is alleles
    assert rng.bit_generator.state == state
