"""Establishment of rare mutants against branching-process results from the literature."""

import numpy as np
import pytest
from scipy.optimize import brentq

from analysis.branching import establishment_probability, extinction_probabilities, offspring_pgf
from sim.density import Factors
from sim.offspring import Fixed, NegativeBinomial, Poisson
from sim.schedules import iteroparous, semelparous

NO_DENSITY = Factors()


def test_poisson_two_textbook_value():
    # One type, Poisson(2) offspring: q = exp(2 (q - 1)), q = 0.2032 (textbook value, e.g.
    # Haccou, Jagers & Vatutin 2005, Branching Processes, sec. 5; value from memory).
    # Fecundity 4 thinned by juvenile survival 0.5 is Poisson(2) recruits.
    ext = extinction_probabilities(semelparous("m", 4.0, 0.5), NO_DENSITY, Poisson())
    assert ext.probabilities[0] == pytest.approx(0.2032, abs=5e-5)
    assert ext.converged
    q = ext.probabilities[0]
    assert q == pytest.approx(np.exp(2.0 * (q - 1.0)), abs=1e-11)


def test_thinning_of_a_poisson_is_poisson():
    # Binomial thinning with p of Poisson(m) is Poisson(m p) (a standard property of the
    # Poisson distribution; common practice). Density factors on recruitment thin further.
    a = establishment_probability(semelparous("m", 6.0, 0.5), Factors(1.0, 1.0, 0.5), Poisson())
    b = establishment_probability(semelparous("m", 1.5, 1.0), NO_DENSITY, Poisson())
    assert a == pytest.approx(b, abs=1e-11)


@pytest.mark.parametrize("p", [0.6, 0.75, 0.9])
def test_fixed_two_offspring_binomial_recruits(p):
    # Exactly 2 offspring, each recruiting with p: Binomial(2, p) recruits, pgf (1 - p + p s)^2;
    # the smallest root of q = (1 - p + p q)^2 is ((1 - p) / p)^2 (solving the quadratic).
    ext = extinction_probabilities(semelparous("m", 2.0, p), NO_DENSITY, Fixed())
    assert ext.probabilities[0] == pytest.approx(((1 - p) / p) ** 2, abs=1e-10)


@pytest.mark.parametrize("k", [0.5, 2.0, 10.0])
def test_negative_binomial_against_its_scalar_equation(k):
    # Thinning NB(k, mean m) with p gives NB(k, mean m p) (gamma-mixed Poisson; common
    # practice), with pgf (1 + m p (1 - s) / k)^-k. Solved independently with brentq.
    m, p = 5.0, 0.5
    q_ref = brentq(lambda q: (1 + m * p * (1 - q) / k) ** -k - q, 0.0, 1.0 - 1e-9, xtol=1e-14)
    ext = extinction_probabilities(semelparous("m", m, p), NO_DENSITY, NegativeBinomial(k))
    assert ext.probabilities[0] == pytest.approx(q_ref, abs=1e-10)


@pytest.mark.parametrize("s", [0.005, 0.01, 0.02, 0.05])
def test_haldane_two_s(s):
    # Haldane (1927): a mutant with Poisson offspring of mean 1 + s survives with probability
    # close to 2s. Series of 1 - pi = exp(-(1 + s) pi): pi = 2s - (8/3) s^2 + O(s^3), so
    # |pi / 2s - 1| <= (4/3) s to second order; the bound 1.5 s leaves room for the s^3 term.
    pi = establishment_probability(semelparous("m", 1.0 + s, 1.0), NO_DENSITY, Poisson())
    assert abs(pi / (2 * s) - 1) <= 1.5 * s
    assert 1 - pi == pytest.approx(np.exp(-(1 + s) * pi), abs=1e-11)


def test_iteroparous_plus_group_against_scalar_equation():
    # One age class that survives (sigma) and breeds: G(s) = (1 - sigma + sigma s) exp(B p (s - 1)).
    sigma, b, p = 0.6, 1.5, 0.4
    q_ref = brentq(
        lambda q: (1 - sigma + sigma * q) * np.exp(b * p * (q - 1)) - q, 0.0, 1 - 1e-9, xtol=1e-14
    )
    ext = extinction_probabilities(iteroparous("m", b, sigma, p), NO_DENSITY, Poisson())
    assert ext.probabilities[0] == pytest.approx(q_ref, abs=1e-10)


def test_delayed_semelparity_against_its_generation_process():
    # Semelparous at age 2: a recruit survives to breed with sigma, then leaves Poisson(B p)
    # recruits. Per generation the pgf is H(s) = 1 - sigma + sigma exp(B p (s - 1)), whose
    # smallest fixed point is q at age 1; at age 2, q2 = exp(B p (q1 - 1)).
    sigma, b, p = 0.7, 6.0, 0.5
    q1 = brentq(
        lambda q: 1 - sigma + sigma * np.exp(b * p * (q - 1)) - q, 0.0, 1 - 1e-9, xtol=1e-14
    )
    ext = extinction_probabilities(
        semelparous("m", b, p, maturity_age=2, adult_survival=sigma), NO_DENSITY, Poisson()
    )
    assert ext.probabilities == pytest.approx([q1, np.exp(b * p * (q1 - 1))], abs=1e-10)


def test_k_founders():
    # Founders' lineages are independent: all die out with probability q^k.
    ext = extinction_probabilities(semelparous("m", 4.0, 0.5), NO_DENSITY, Poisson())
    q = ext.probabilities[0]
    for k in (1, 3, 10):
        assert ext.establishment(k) == pytest.approx(1 - q**k)
        assert establishment_probability(
            semelparous("m", 4.0, 0.5), NO_DENSITY, Poisson(), count=k
        ) == pytest.approx(1 - q**k)


@pytest.mark.parametrize("b", [0.5, 1.0, 1.999])
def test_subcritical_and_critical_die_out(b):
    # lambda = B c <= 1: extinction is certain (Harris 1963); no iteration needed.
    ext = extinction_probabilities(semelparous("m", b, 0.5), NO_DENSITY, Poisson())
    assert ext.probabilities == pytest.approx([1.0])
    assert ext.iterations == 0 and ext.converged


def test_singular_critical_process_never_dies():
    # Exactly one offspring that surely recruits: every lineage persists (the singular case
    # the critical-process theorem excludes).
    ext = extinction_probabilities(semelparous("m", 1.0, 1.0), NO_DENSITY, Fixed())
    assert ext.probabilities == pytest.approx([0.0])


def test_near_critical_converges_with_error_bound():
    ext = extinction_probabilities(semelparous("m", 1.002, 1.0), NO_DENSITY, Poisson())
    assert ext.converged and ext.error_bound < 1e-10
    q = ext.probabilities[0]
    assert q == pytest.approx(np.exp(1.002 * (q - 1)), abs=1e-10)


def test_pgf_is_one_at_one_and_zero_at_zero_without_survivors():
    sched = iteroparous("m", 3.0, 0.4, 0.5)
    assert offspring_pgf(np.ones(1), sched, NO_DENSITY, Poisson()) == pytest.approx([1.0])
    # G(0) = P(no survivor and no recruit) = (1 - sigma) exp(-B p)
    assert offspring_pgf(np.zeros(1), sched, NO_DENSITY, Poisson()) == pytest.approx(
        [0.6 * np.exp(-1.5)]
    )
