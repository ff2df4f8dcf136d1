"""The season kernel: its rates, and the theory derived from them, against outside facts."""

import numpy as np
import pytest

from sim.density import DensityDependence, Factors
from sim.kernel import SeasonKernel
from sim.offspring import Fixed, NegativeBinomial, Poisson
from sim.schedules import iteroparous, semelparous, stack_schedules, table

SCHEDULES = [iteroparous("perennial", 2.0, 0.5, 0.5),
             semelparous("one-shot", 4.5, 0.5, maturity_age=2, adult_survival=0.7),
             table("late", [0.0, 1.5, 3.0], [0.6, 0.5, 0.4], 0.6)]


def _kernel(density, offspring=None):
    M, S, C = stack_schedules(SCHEDULES)
    return SeasonKernel(M, S, C, density, offspring)


@pytest.mark.parametrize("offspring", [Poisson(), Fixed(), NegativeBinomial(1.5)])
@pytest.mark.parametrize("schedule", SCHEDULES)
def test_pgf_derivative_at_one_is_the_projection_matrix(schedule, offspring):
    # The mean matrix of a multitype Galton-Watson process is the Jacobian of its offspring
    # generating function at s = 1 (Harris 1963, ch. II): dG_a/ds_j (1) = A[j, a]. Central
    # differences with step 1e-6 have error ~1e-12 (third derivative bounded), 1e-7 tolerance.
    kernel = SeasonKernel.for_schedule(schedule, offspring=offspring)
    f = Factors(0.8, 0.9, 0.7)
    a = kernel.projection_matrix(f)
    n, h = schedule.n_ages, 1e-6
    jac = np.empty((n, n))
    for j in range(n):
        e = np.zeros(n)
        e[j] = h
        jac[j] = (kernel.offspring_pgf(1 + e, f) - kernel.offspring_pgf(1 - e, f)) / (2 * h)
    np.testing.assert_allclose(jac, a, atol=1e-7)
    np.testing.assert_allclose(kernel.offspring_pgf(np.ones(n), f), 1.0)  # a probability law


def test_rates_are_the_schedules_times_the_placed_factor():
    # README, The model: breeding m(a) f_fec, survival s(a) f_adult, recruitment c f_rec;
    # Beverton-Holt f = 1 / (1 + D / K) (Beverton & Holt 1957) placed on all survival.
    kernel = _kernel(DensityDependence.from_names("beverton-holt", 100.0, "all-survival"))
    census = np.zeros((3, 3), dtype=int)
    census[0, 0], census[2, 1] = 60, 40
    f = kernel.census_factors(census)
    assert kernel.density_index(census) == 100
    assert f == Factors(1.0, 0.5, 0.5)
    rates = kernel.rates(f)
    M, S, C = stack_schedules(SCHEDULES)
    np.testing.assert_array_equal(rates.breeding, M.ravel())
    np.testing.assert_array_equal(rates.survival, 0.5 * S.ravel())
    np.testing.assert_array_equal(rates.recruitment, 0.5 * np.repeat(C, 3))
    # the same, one row per replicate
    batch = kernel.rates(kernel.census_factors(np.stack([census.ravel(), 0 * census.ravel()]), 2))
    np.testing.assert_array_equal(batch.survival, [0.5 * S.ravel(), S.ravel()])


@pytest.mark.parametrize("form, acts_on, counted", [
    ("beverton-holt", "recruitment", "census"), ("ricker", "fecundity", "breeders"),
    ("beverton-holt", "all-survival", "census"), ("ricker", "adult-survival", "census"),
    ("none", "recruitment", "census"), ("ceiling", "all-survival", "census")])
def test_a_batch_of_ones_factors_are_the_batchs(form, acts_on, counted):
    # a batch of one takes its factors on its number, remembered by D: bit for bit what the
    # same replicate gets in a batch of several (numpy's scalar and array arithmetic round alike)
    kernel = _kernel(DensityDependence.from_names(form, 37.0, acts_on, counted))
    other = _kernel(DensityDependence.from_names(form, 37.0, acts_on, counted))
    counts = np.random.default_rng(3).integers(0, 60, size=(40, kernel.n_classes))
    d = kernel.density_index(counts)
    together = other.factors(d)
    means = other.expected_recruits(counts, together)
    for r in range(len(counts)):
        for _ in range(2):  # worked out, then remembered
            alone = kernel.factors(d[r:r + 1])
            for a, b in zip(alone, together):
                assert a.shape == (1,) and a.tobytes() == b[r:r + 1].tobytes()
                assert not a.flags.writeable  # shared by the seasons that meet this D
            assert kernel.expected_recruits(counts[r:r + 1], alone).tobytes() == means[r:r + 1].tobytes()


def test_breeders_and_offspring_counting():
    breeders = _kernel(DensityDependence.from_names("ricker", 10.0, "fecundity", "breeders"))
    census = np.ones((3, 3), dtype=int)
    # m(a) > 0 on the padded age axis: 3 (perennial) + 2 (one-shot, ages 2 and 3+) + 2 (late)
    assert breeders.density_index(census) == 7
    assert breeders.census_factors(census).fecundity == pytest.approx(np.exp(-0.7))
    offspring = _kernel(DensityDependence.from_names("beverton-holt", 10.0, "recruitment", "offspring"))
    assert offspring.census_factors(census) == Factors()  # D is known only after breeding
    assert offspring.birth_factors(30).recruitment == pytest.approx(0.25)


@pytest.mark.parametrize("acts_on, survivors, recruits, excess, pool", [
    ("all-survival", 20, 15, 5, 35),     # anyone: the census comes down to K = 30
    ("all-survival", 10, 15, 0, 25),
    ("recruitment", 20, 15, 5, 15),      # recruits only, room for 10 of them
    ("recruitment", 40, 15, 15, 15),     # no room: every recruit goes, survivors stay above K
])
def test_ceiling_removal(acts_on, survivors, recruits, excess, pool):
    kernel = _kernel(DensityDependence.from_names("ceiling", 30.0, acts_on))
    got = kernel.ceiling_excess(np.array([survivors]), np.array([recruits]))
    assert (int(got[0][0]), int(got[1][0])) == (excess, pool)
    free = _kernel(DensityDependence.from_names("beverton-holt", 30.0))
    assert int(free.ceiling_excess(survivors, recruits)[0]) == 0


def test_mean_step_is_the_projection_matrix_at_the_census_density():
    # E[n(t+1)] = A(D(n(t))) n(t) for each allele (Caswell 2001, ch. 16)
    kernel = _kernel(DensityDependence.from_names("beverton-holt", 50.0, "fecundity"))
    census = np.array([[10.0, 0, 0], [4, 6, 0], [3, 2, 5]])
    f = kernel.census_factors(census)
    nxt = kernel.mean_step(census)
    for a in range(3):
        np.testing.assert_allclose(nxt[a], kernel.projection_matrix(f, allele=a) @ census[a])
