"""Invasion theory in variable environments against published results and direct simulation.

Statistical checks use fixed seeds; a simulated value is compared with its
target within 4 standard errors (batch means or binomial), which a correct
estimator misses with probability about 6e-5 (normal tails; common practice).
"""

from dataclasses import replace

import numpy as np
import pytest

from analysis.branching import establishment_probability, offspring_pgf
from analysis.invasion import invasion_fitness
from analysis.random_branching import establishment_in_years
from analysis.stochastic import (
    InvasionSetting,
    _starting_census,
    draw_year_sequences,
    resident_path,
    small_noise_approximation,
    stochastic_growth_rate,
    stochastic_invasion,
    stochastic_threshold,
)
from sim.density import DensityDependence, Factors
from sim.kernel import SeasonKernel
from sim.meanfield import growth_rate, mean_field_step, solve_equilibrium
from sim.offspring import NegativeBinomial, Poisson
from sim.schedules import iteroparous, semelparous, stack_schedules, table
from sim.years import YearType, YearTypes, constant_years, scaled_schedule
from tests.invasion_configs import invasion_config

# The example: two equally likely years with juvenile survival 0.8 and 0.1 (the
# schedules carry c = 1, the years the survival), an iteroparous resident B_i = 2, P = 0.5.
C_YEARS = np.array([0.8, 0.1])
TWO_YEARS = YearTypes(
    (YearType("good", juvenile_survival=0.8), YearType("bad", juvenile_survival=0.1)), "iid", (0.5, 0.5)
)
RESIDENT = iteroparous("perennial", 2.0, 0.5, 1.0)
BH = DensityDependence.from_names("beverton-holt", 100.0)
TABLE = table("aged", [0.0, 2.0, 3.0], [0.6, 0.7, 0.4], 0.5)


def _sequences(years, seed, n_batches=40, batch_length=1000, burn_in=100):
    return draw_year_sequences(
        years, np.random.default_rng(seed), n_batches=n_batches, batch_length=batch_length, burn_in=burn_in
    )


def _semelparous_setting(years, density=None):
    return lambda b: InvasionSetting(RESIDENT, semelparous("one-shot", b, 1.0), years, density)


def _semelparous_pair(b):
    return RESIDENT, semelparous("one-shot", b, 1.0)


# --------------------------------------------------------------------------- one class


@pytest.mark.parametrize("schedule", [RESIDENT, semelparous("one-shot", 4.0, 1.0)])
def test_one_class_growth_rate_is_mean_log_of_the_years(schedule):
    # A 1x1 matrix: log lambda_s = sum_k p_k log lambda_k exactly (Lewontin & Cohen 1969;
    # Tuljapurkar 1990, ch. 2).
    lam = np.array([growth_rate(scaled_schedule(schedule, y)) for y in TWO_YEARS.types])
    exact = float(0.5 * np.log(lam).sum())
    g = stochastic_growth_rate(schedule, TWO_YEARS, _sequences(TWO_YEARS, 1))
    assert abs(g.stochastic_growth_rate - exact) < 4 * g.stochastic_growth_rate_se
    assert g.stochastic_growth_rate_se < 0.01


def test_one_class_small_noise_is_second_order_taylor_of_mean_log():
    # For a scalar, Tuljapurkar's formula is log E(lambda) - Var(lambda) / (2 E(lambda)^2),
    # the second-order Taylor expansion of E log(lambda) (Lewontin & Cohen 1969).
    lam = 2.0 * C_YEARS + 0.5
    expected = np.log(lam.mean()) - lam.var() / (2 * lam.mean() ** 2)
    assert small_noise_approximation(RESIDENT, TWO_YEARS) == pytest.approx(expected, abs=1e-12)


def test_semelparous_threshold_constant_environment():
    # Constant environment with the mean survival c = 0.45: lambda_s = B c versus
    # B_i c + P, threshold B_i + P / c = 3.11 (Charnov & Schaffer 1973).
    years = constant_years(YearType("average", juvenile_survival=C_YEARS.mean()))
    th = stochastic_threshold(_semelparous_setting(years), _sequences(years, 2, 2, 50, 0), bracket=(2.5, 8.0))
    assert th.value == pytest.approx(2.0 + 0.5 / C_YEARS.mean(), abs=1e-8)
    assert round(th.value, 2) == 3.11
    assert th.standard_error == 0.0  # every season alike: no sampling error


def test_semelparous_threshold_rises_in_the_variable_environment():
    # exp(E log(B_i c + P) - E log c) = 4.29 (Lewontin & Cohen 1969 applied to both types;
    # the worked number): iteroparity is favoured because years vary.
    closed = np.exp(np.mean(np.log(2.0 * C_YEARS + 0.5)) - np.mean(np.log(C_YEARS)))
    assert round(closed, 2) == 4.29
    seqs = _sequences(TWO_YEARS, 3, 200, 200, 0)  # one class: no burn-in needed
    th = stochastic_threshold(_semelparous_setting(TWO_YEARS), seqs, bracket=(2.5, 8.0))
    assert th.converged and th.standard_error < 0.02
    assert abs(th.value - closed) < 4 * th.standard_error
    # common random numbers: the root is the same closed form over the realised years
    c = C_YEARS[seqs.recorded]
    realised = np.exp(np.mean(np.log(2.0 * c + 0.5)) - np.mean(np.log(c)))
    assert th.value == pytest.approx(realised, rel=1e-8)
    # the mutant of B = 4 invades the constant environment with the same mean but not this one
    inv = stochastic_invasion(*_semelparous_pair(4.0), TWO_YEARS, None, seqs)
    assert inv.invasion_fitness + 4 * inv.invasion_fitness_se < 1.0
    assert inv.as_dict()["stochastic_growth_rate"] == inv.mutant_growth.stochastic_growth_rate


# --------------------------------------------------------------------------- small noise


def _noisy(sigma):
    # skewed two-point noise on juvenile survival: mean 1, variance sigma^2, third moment != 0,
    # so the approximation's error is of third order, not fourth
    return YearTypes(
        (YearType("good", juvenile_survival=1 + 0.5 * sigma), YearType("bad", juvenile_survival=1 - 2 * sigma)),
        "iid",
        (0.8, 0.2),
    )


def test_small_noise_approximation_close_at_small_noise():
    # Tuljapurkar (1982): error O(sigma^3); at sigma = 0.1 the gap is ~2.5e-5 for this table
    # (slow test below), so 1e-4 leaves room for 4 SE (~1e-5) of the simulation.
    years = _noisy(0.1)
    g = stochastic_growth_rate(TABLE, years, _sequences(years, 4))
    assert abs(g.stochastic_growth_rate - g.small_noise_approximation) < 1e-4
    # and it beats the deterministic growth rate of the mean matrix, which is off by ~tau^2/2
    lam_bar = growth_rate(scaled_schedule(TABLE, YearType("mean")))
    assert abs(g.stochastic_growth_rate - np.log(lam_bar)) > 5 * abs(
        g.stochastic_growth_rate - g.small_noise_approximation
    )


@pytest.mark.slow
def test_small_noise_gap_shrinks_like_the_cube_of_the_noise():
    # Tuljapurkar (1982); Tuljapurkar 1990, ch. 11: log lambda_s = log lambda_1 -
    # tau^2 / (2 lambda_1^2) + O(sigma^3). Log-log slope of |gap| over sigma = 0.2, 0.1, 0.05,
    # same year draws at each level. Tolerance 0.35: the fourth-order term tilts the slope
    # upward by about 0.2 over this range (slope 3.6 between 0.4 and 0.2), and the
    # smallest gap (~3e-6) carries a simulation SE of ~3e-7 (10 %, 0.14 on the slope).
    sigmas = np.array([0.2, 0.1, 0.05])
    gaps, ses = [], []
    for sigma in sigmas:
        years = _noisy(sigma)
        g = stochastic_growth_rate(TABLE, years, _sequences(years, 5, 200, 10_000, 50))
        gaps.append(g.stochastic_growth_rate - g.small_noise_approximation)
        ses.append(g.stochastic_growth_rate_se)
    gaps, ses = np.array(gaps), np.array(ses)
    assert np.all(np.abs(gaps) > 4 * ses)
    slope = np.polyfit(np.log(sigmas), np.log(np.abs(gaps)), 1)[0]
    assert slope == pytest.approx(3.0, abs=0.35)


# --------------------------------------------------------------------------- Markov years


@pytest.mark.parametrize("k", [0, 1])
def test_markov_identity_started_in_a_year_is_that_constant_environment(k):
    years = YearTypes(
        (YearType("good", juvenile_survival=1.6), YearType("bad", juvenile_survival=0.3)),
        "markov",
        transitions=[[1, 0], [0, 1]],
        start=["good", "bad"][k],
    )
    g = stochastic_growth_rate(TABLE, years, _sequences(years, 6, 4, 200, 300))
    lam = growth_rate(scaled_schedule(TABLE, years.types[k]))  # sim.meanfield (numpy eigvals)
    assert g.stochastic_growth_rate == pytest.approx(np.log(lam), abs=1e-9)
    assert np.isnan(g.small_noise_approximation)


def _autocorrelated(a):
    # P(switch) = a: a = 0.5 is iid, a = 0.1 makes runs of bad years; stationary law (1/2, 1/2)
    return YearTypes(
        (YearType("good", juvenile_survival=1.0), YearType("bad", juvenile_survival=0.2)),
        "markov",
        transitions=[[1 - a, a], [a, 1 - a]],
    )


def test_autocorrelated_bad_years_and_the_two_life_histories():
    # Tuljapurkar & Haridas 2006 (Ecol. Lett. 9: 327, from memory) on autocorrelation; we test what
    # holds exactly for these schedules. A semelparous type maturing at 2 lives on a cycle:
    # each cohort line's log growth is an ergodic mean of per-season factors, so
    # log lambda_s = E log(B c s) / 2 whatever the autocorrelation. The age-structured
    # iteroparous type is lowered by runs of bad years, so the semelparous type's fitness
    # relative to it RISES with autocorrelation (the reverse of the expectation).
    semel = semelparous("one-shot", 4.0, 0.8, maturity_age=2, adult_survival=0.5)
    itero = iteroparous("perennial", 2.0, 0.5, 0.8, maturity_age=2)
    exact_semel = 0.5 * np.mean(np.log(4.0 * 0.8 * 0.5 * np.array([1.0, 0.2])))
    out = {}
    for a in (0.5, 0.1):
        years = _autocorrelated(a)
        seqs = _sequences(years, 7, 200, 500, 50)
        out[a] = (
            stochastic_growth_rate(semel, years, seqs),
            stochastic_growth_rate(itero, years, seqs),
        )
        s = out[a][0]
        assert abs(s.stochastic_growth_rate - exact_semel) < 4 * s.stochastic_growth_rate_se
    i_iid, i_runs = out[0.5][1], out[0.1][1]
    drop = i_iid.stochastic_growth_rate - i_runs.stochastic_growth_rate
    assert drop > 4 * np.hypot(i_iid.stochastic_growth_rate_se, i_runs.stochastic_growth_rate_se)


# --------------------------------------------------------------------------- density dependence


@pytest.mark.parametrize(
    "acts_on, counted", [("recruitment", "census"), ("fecundity", "breeders"), ("adult-survival", "offspring")]
)
def test_constant_environment_equals_the_equilibrium_invasion_fitness(acts_on, counted):
    # one year type (and two types with all multipliers 1): the mutant's Lyapunov exponent
    # is log of its dominant eigenvalue at the resident's equilibrium (analysis.invasion)
    config = invasion_config(
        acts_on=acts_on, counted=counted, maturity_age=2, fecundity=3.0, mutant_fecundity=5.0
    )
    resident, mutant = config.schedules()
    density = config.density_dependence()
    expected = invasion_fitness(config)
    flat = YearTypes((YearType("a"), YearType("b")), "iid", (0.3, 0.7))
    for years in (constant_years(), flat):
        got = stochastic_invasion(resident, mutant, years, density, _sequences(years, 8, 2, 100, 300))
        assert got.regulated
        assert got.invasion_fitness == pytest.approx(expected, abs=1e-9)


@pytest.mark.parametrize("acts_on", ["recruitment", "all-survival"])
@pytest.mark.parametrize("maturity_age", [1, 2])
def test_ceiling_in_a_constant_environment_equals_the_equilibrium_invasion_fitness(acts_on, maturity_age):
    # the removal fraction read off mean_field_step against analysis.invasion's phi
    config = invasion_config(
        form="ceiling", acts_on=acts_on, maturity_age=maturity_age, fecundity=3.0, mutant_fecundity=5.0
    )
    resident, mutant = config.schedules()
    years = constant_years()
    got = stochastic_invasion(resident, mutant, years, config.density_dependence(), _sequences(years, 18, 2, 50, 200))
    assert got.invasion_fitness == pytest.approx(invasion_fitness(config), abs=1e-9)


@pytest.mark.parametrize(
    "acts_on, counted", [("recruitment", "census"), ("all-survival", "breeders"), ("adult-survival", "offspring")]
)
def test_resident_path_is_the_mean_field_season_map(acts_on, counted):
    # the vectorised path against sim.meanfield.mean_field_step with the year's scaled rates
    density = DensityDependence.from_names("ricker", 50.0, acts_on, counted)
    resident = iteroparous("perennial", 3.0, 0.6, 0.9, maturity_age=2)
    seqs = _sequences(TWO_YEARS, 9, 2, 30, 0)
    path = resident_path(resident, TWO_YEARS, density, seqs)
    for b in range(2):
        x = _starting_census(resident, TWO_YEARS, density)[None, :]
        for t in range(seqs.indices.shape[1]):
            assert x.sum() == pytest.approx(path.census_size[b, t], rel=1e-10)
            M, S, C = stack_schedules([scaled_schedule(resident, TWO_YEARS.types[seqs.indices[b, t]])])
            x = mean_field_step(x, M, S, C, density)


@pytest.mark.parametrize(
    "density",
    [BH, DensityDependence.from_names("ceiling", 100.0, "all-survival")],
    ids=["beverton-holt", "ceiling"],
)
def test_resident_against_itself_is_neutral(density):
    # the resident's own Lyapunov exponent on its regulated path is 0 (its census neither
    # grows nor vanishes in the long run; Ferriere & Gatto 1995)
    seqs = _sequences(TWO_YEARS, 10, 10, 150, 30)
    inv = stochastic_invasion(RESIDENT, RESIDENT, TWO_YEARS, density, seqs)
    assert abs(np.log(inv.invasion_fitness)) <= 4 * inv.log_invasion_fitness_se + 1e-12
    assert inv.log_invasion_fitness_se < 0.01


@pytest.mark.parametrize("k", [0, 1])
def test_markov_identity_with_density_is_the_equilibrium_of_that_year(k):
    years = YearTypes(TWO_YEARS.types, "markov", transitions=[[1, 0], [0, 1]], start=TWO_YEARS.names[k])
    resident = iteroparous("perennial", 8.0, 0.5, 1.0)  # persists in the bad year too
    mutant = table("aged", [0.0, 12.0, 14.0], [0.6, 0.7, 0.4], 0.5)
    year = years.types[k]
    eq = solve_equilibrium(scaled_schedule(resident, year), BH)
    want = growth_rate(scaled_schedule(mutant, year), eq.factors)
    got = stochastic_invasion(resident, mutant, years, BH, _sequences(years, 19, 2, 100, 300))
    assert got.invasion_fitness == pytest.approx(want, abs=1e-9)


def test_beverton_holt_threshold_in_two_year_types():
    # Semelparous mutant against the resident, Beverton-Holt on recruitment counted at the
    # census: the season factor f_t multiplies both types' recruitment, so
    #   resident: E log(B_i c f + P) = 0,   mutant threshold: B* = exp(-E log c - E log f).
    # Bounds (derived): B_i c f + P >= f (B_i c + P) for f <= 1 gives
    #   B* >= exp(E log(B_i c + P) - E log c) = 4.29 (the density-free threshold);
    # B_i c f + P <= f (B_i c + P / f_min) gives B* <= exp(E log(B_i c + P / f_min) - E log c).
    seqs = _sequences(TWO_YEARS, 11, 100, 300, 50)
    th = stochastic_threshold(_semelparous_setting(TWO_YEARS, BH), seqs, bracket=(3.0, 12.0))
    assert th.converged and th.log_fitness_at_bracket[1] > 0  # invades above the threshold
    assert th.standard_error < 0.005 * th.value
    f = resident_path(RESIDENT, TWO_YEARS, BH, seqs).factors.recruitment[:, seqs.burn_in :]
    c = C_YEARS[seqs.recorded]
    lower = np.exp(np.mean(np.log(2.0 * C_YEARS + 0.5)) - np.mean(np.log(C_YEARS)))
    upper = np.exp(np.mean(np.log(2.0 * C_YEARS + 0.5 / f.min())) - np.mean(np.log(C_YEARS)))
    assert lower + 4 * th.standard_error < th.value < upper - 4 * th.standard_error
    # and it is exactly the closed form over the realised seasons (common random numbers)
    assert th.value == pytest.approx(np.exp(-np.mean(np.log(c * f))), rel=1e-8)


# --------------------------------------------------------------------------- establishment


@pytest.mark.parametrize("schedule", [TABLE, replace(TABLE, orphan_survival=0.2, brood_scale=3.0)],
                         ids=["plain", "care-and-brood"])
def test_batched_generating_function_is_the_branching_modules(schedule):
    # the season kernel's G for many environments at once (rows), as the random-years
    # establishment uses it, is the one-environment G of analysis.branching, row by row
    rng = np.random.default_rng(12)
    s = rng.random((5, schedule.n_ages))
    f = rng.uniform(0.3, 1.0, (3, 5))
    kernel = SeasonKernel.for_schedule(schedule, offspring=NegativeBinomial(2.0))
    got = kernel.offspring_pgf(s, Factors(*f))
    for b in range(5):
        want = offspring_pgf(s[b], schedule, Factors(*f[:, b]), NegativeBinomial(2.0))
        np.testing.assert_allclose(got[b], want, rtol=1e-13)


def test_establishment_in_a_constant_environment_equals_the_branching_process():
    resident = iteroparous("perennial", 2.0, 0.5, 0.5)
    mutant = table("aged", [0.0, 5.0, 6.0], [0.6, 0.7, 0.4], 0.5)
    eq = solve_equilibrium(resident, BH)
    want = establishment_probability(mutant, eq.factors, Poisson(), count=2)
    assert 0.05 < want < 0.95
    seqs = _sequences(constant_years(), 13, 2, 600, 10)
    got = establishment_in_years(resident, mutant, constant_years(), BH, Poisson(), seqs, count=2)
    assert got.establishment_probability == pytest.approx(want, abs=1e-9)
    assert got.horizon_gap < 1e-9


def test_one_class_poisson_establishment_against_direct_simulation():
    # A semelparous type of maturity 1 with Poisson offspring: recruits ~ Poisson(B c_t Z_t).
    # Survival to season H by simulating the branching process itself, each lineage in its
    # own years, against the quenched generating-function average over other year draws.
    # Both estimate P(Z_H > 0); difference within 4 combined SE (binomial and batch).
    mutant = semelparous("one-shot", 4.0, 1.0)
    horizon, n = 40, 40_000
    rng = np.random.default_rng(14)
    years = TWO_YEARS.draw(horizon, rng, n_sequences=n)
    z = np.ones(n, dtype=np.int64)
    big = 10**12  # from here extinction within 40 seasons needs ~12 bad years in a row
    for t in range(horizon):
        alive = (z > 0) & (z < big)
        z[alive] = rng.poisson(4.0 * C_YEARS[years[alive, t]] * z[alive])
    p_direct = np.mean(z > 0)
    se_direct = np.sqrt(p_direct * (1 - p_direct) / n)
    seqs = _sequences(TWO_YEARS, 15, 20_000, horizon, 0)
    got = establishment_in_years(None, mutant, TWO_YEARS, None, Poisson(), seqs)
    assert abs(got.establishment_probability - p_direct) < 4 * np.hypot(se_direct, got.standard_error)
    assert 0.05 < p_direct < 0.95  # a real test: neither sure loss nor sure escape


# --------------------------------------------------------------------------- year laws


def test_threshold_in_a_year_probability_with_common_uniforms():
    # Density-free, one class: g(p) = (1 - p) log(B c_g / (B_i c_g + P)) + p log(B c_b / (B_i c_b + P))
    # (Lewontin & Cohen 1969), zero at p* = a / (a - b). The same uniforms are re-read under
    # each trial probability of the bad year.
    b_s = 4.0
    a, b = np.log(b_s * C_YEARS / (2.0 * C_YEARS + 0.5))
    p_star = a / (a - b)

    def setting(p):
        years = YearTypes(TWO_YEARS.types, "iid", (1.0 - p, p))
        return InvasionSetting(RESIDENT, semelparous("one-shot", b_s, 1.0), years)

    seqs = _sequences(TWO_YEARS, 16, 200, 200, 0)
    th = stochastic_threshold(setting, seqs, bracket=(0.05, 0.95), xtol=1e-6)
    assert th.converged and th.standard_error < 0.01
    assert abs(th.value - p_star) < 4 * th.standard_error


def test_markov_with_equal_rows_is_iid():
    # a chain whose rows are all the same law forgets its state: iid years (definition)
    iid = YearTypes(TWO_YEARS.types, "iid", (0.3, 0.7))
    markov = YearTypes(TWO_YEARS.types, "markov", transitions=[[0.3, 0.7], [0.3, 0.7]])
    seqs = _sequences(iid, 17, 100, 300, 30)
    g_iid = stochastic_growth_rate(TABLE, iid, seqs)
    g_markov = stochastic_growth_rate(TABLE, markov, seqs)  # same uniforms, re-read as a chain
    np.testing.assert_array_equal(seqs.for_years(markov).indices, seqs.indices)
    assert abs(g_iid.stochastic_growth_rate - g_markov.stochastic_growth_rate) < 4 * g_markov.stochastic_growth_rate_se


def test_sequences_without_uniforms_refuse_another_law():
    from analysis.stochastic import YearSequences

    seqs = YearSequences(np.zeros((2, 5), dtype=int), 0)
    assert seqs.for_years(TWO_YEARS) is seqs
    with pytest.raises(ValueError, match="years has 1"):
        YearSequences(np.ones((2, 5), dtype=int), 0).for_years(constant_years())


@pytest.mark.slow
@pytest.mark.parametrize("density", [None, BH], ids=["density-free", "beverton-holt"])
def test_threshold_standard_error_matches_the_spread_over_independent_draws(density):
    # 20 thresholds from independent year draws: their standard deviation against the mean
    # reported SE. Under a correct SE, (n - 1) s^2 / SE^2 ~ chi^2(19), so s / SE lies in
    # [0.52, 1.60] with probability 0.999 (chi^2 quantiles, scipy.stats.chi2).
    from scipy.stats import chi2

    values, ses = [], []
    for seed in range(20):
        seqs = _sequences(TWO_YEARS, 100 + seed, 50, 200, 30)
        th = stochastic_threshold(_semelparous_setting(TWO_YEARS, density), seqs, bracket=(3.0, 12.0), xtol=1e-8)
        values.append(th.value)
        ses.append(th.standard_error)
    ratio = np.std(values, ddof=1) / np.mean(ses)
    low, high = np.sqrt(chi2.ppf([0.0005, 0.9995], 19) / 19)
    assert low < ratio < high


def test_establishment_with_density_against_direct_simulation_on_the_resident_path():
    # Beverton-Holt on recruitment: a one-class semelparous mutant's recruits are
    # Poisson(B c_t f_t Z_t), f_t from the resident's path. Lineages simulated on paths of
    # their own (one per batch) against the generating-function average over other draws;
    # both estimate P(Z_H > 0). Difference within 4 combined SE (binomial and Monte Carlo).
    mutant = semelparous("one-shot", 6.0, 1.0)
    horizon, burn_in, n = 30, 30, 8000
    own = _sequences(TWO_YEARS, 20, n, horizon, burn_in)
    f = resident_path(RESIDENT, TWO_YEARS, BH, own).factors.recruitment[:, burn_in:]
    c = C_YEARS[own.recorded]
    rng = np.random.default_rng(21)
    z = np.ones(n, dtype=np.int64)
    big = 10**12
    for t in range(horizon):
        alive = (z > 0) & (z < big)
        z[alive] = rng.poisson(6.0 * c[alive, t] * f[alive, t] * z[alive])
    p_direct = np.mean(z > 0)
    se_direct = np.sqrt(p_direct * (1 - p_direct) / n)
    seqs = _sequences(TWO_YEARS, 22, n, horizon, burn_in)
    got = establishment_in_years(RESIDENT, mutant, TWO_YEARS, BH, Poisson(), seqs)
    assert abs(got.establishment_probability - p_direct) < 4 * np.hypot(se_direct, got.standard_error)
    assert 0.05 < p_direct < 0.95


def test_stacked_log_increments_are_each_schedules_own():
    # One pass for several schedules on the same draws gives each its own increments: a one-class
    # schedule's are exactly log of its year's scalar growth, log(s j_s + m j_m c j_c) (the matrix
    # is 1x1: Lewontin & Cohen 1969), and a two-age table's equal those of a pass of its own.
    from analysis.stochastic import stacked_log_increments

    years = YearTypes((YearType("lush", fecundity=1.4, juvenile_survival=1.5),
                       YearType("lean", adult_survival=0.6, juvenile_survival=0.3)), "iid", probabilities=(0.4, 0.6))
    draws = draw_year_sequences(years, np.random.default_rng(3), n_batches=3, batch_length=50, burn_in=5)
    ones = [iteroparous("a", 2.0, 0.5, 0.5), iteroparous("b", 3.0, 0.2, 0.4)]
    inc = stacked_log_increments(ones, years, draws)
    mult = np.array([[y.fecundity, y.adult_survival, y.juvenile_survival] for y in years.types])[draws.indices]
    for got, (m, s, c) in zip(inc, [(2.0, 0.5, 0.5), (3.0, 0.2, 0.4)]):
        expected = np.log(s * mult[..., 1] + m * mult[..., 0] * c * mult[..., 2])
        np.testing.assert_allclose(got, expected, rtol=1e-13)
    two = [table("t1", [0.0, 2.0], [0.6, 0.5], 0.5), table("t2", [0.5, 1.5], [0.7, 0.4], 0.5)]
    both = stacked_log_increments(two, years, draws)
    for got, schedule in zip(both, two):
        alone = stacked_log_increments([schedule], years, draws)[0]
        np.testing.assert_allclose(got, alone, rtol=1e-13)


# --------------------------------------------------------------------------- the season loop
@pytest.mark.parametrize("care", [False, True])
@pytest.mark.parametrize("span_entries", [None, 9 * 8 * 3])
def test_log_increments_over_spans_equal_the_season_by_season_product(monkeypatch, care, span_entries):
    # _log_increments builds a span of seasons' matrices at once; the answer must be the plain
    # normalised product A(y_t, f_t) x_{t-1}, one season at a time (common practice: the
    # definition of the log increments, Tuljapurkar 1990, chapter from memory), here for spans that do not
    # divide the seasons, with per-season density factors and with parental care's rows
    from analysis import stochastic

    if span_entries is not None:  # 3 seasons a span at 8 batches of 3 x 3 matrices
        monkeypatch.setattr(stochastic, "_SPAN_ENTRIES", span_entries)
    schedule = replace(TABLE, orphan_survival=0.2) if care else TABLE
    seqs = _sequences(TWO_YEARS, 11, n_batches=8, batch_length=280, burn_in=20)  # 300: spans of 256
    seq = seqs.for_years(TWO_YEARS).indices
    rng = np.random.default_rng(5)
    factors = Factors(*(rng.uniform(0.3, 1.0, seq.shape) for _ in range(3)))
    proj = stochastic._projections(schedule, TWO_YEARS)
    got = stochastic._log_increments(proj, seq, factors)
    x = np.zeros((seq.shape[0], 3))
    x[:, 0] = 1.0
    for t in range(seq.shape[1]):
        a = np.array([SeasonKernel.for_schedule(scaled_schedule(schedule, TWO_YEARS.types[y]))
                      .projection_matrix(Factors(*(f[b, t] for f in factors)))
                      for b, y in enumerate(seq[:, t])])
        x = np.einsum("bij,bj->bi", a, x)
        size = x.sum(axis=1)
        np.testing.assert_allclose(got[:, t], np.log(size), rtol=1e-12, atol=1e-12)
        x = x / size[:, None]
