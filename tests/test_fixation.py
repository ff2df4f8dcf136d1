"""The finite-population fixation probability (analysis.fixation) against outside results."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import sparse, stats
from scipy.sparse.linalg import spsolve

from analysis.fixation import (
    demographic_variance,
    diffusion_fixation,
    finite_population_columns,
    finite_population_prediction,
)
from analysis.invasion import neutral_expectation
from sim.config import parse_config
from sim.density import Factors
from sim.offspring import Fixed, NegativeBinomial, Poisson
from sim.schedules import iteroparous, semelparous
from tests.invasion_configs import invasion_config


def _kimura(p, n, s):
    """Kimura (1962), haploid form: u(p) = (1 - e^(-2 N s p)) / (1 - e^(-2 N s))."""
    return -math.expm1(-2 * n * s * p) / -math.expm1(-2 * n * s)


def _semelparous_pair(resident_b, mutant_b, *, capacity, acts_on="all-survival", count=1):
    """One-class semelparous resident and mutant under a ceiling (a Wright-Fisher-like sampling)."""
    return parse_config(
        {
            "density": {"form": "ceiling", "acts_on": acts_on, "capacity": capacity},
            "allele": [
                {"name": "r", "breeding": "semelparous", "fecundity": resident_b, "juvenile_survival": 0.5},
                {"name": "m", "breeding": "semelparous", "fecundity": mutant_b, "juvenile_survival": 0.5},
            ],
            "invasion": {"resident": "r", "mutant": "m", "mutant_count": count},
        }
    )


# -- neutral limit -----------------------------------------------------------------------
@pytest.mark.parametrize(
    "form, acts_on, counted, distribution",
    [
        ("ceiling", "all-survival", "census", "poisson"),
        ("ceiling", "recruitment", "census", "fixed"),
        ("beverton-holt", "recruitment", "census", "poisson"),
        ("beverton-holt", "fecundity", "breeders", "negative-binomial"),
        ("ricker", "adult-survival", "census", "poisson"),
        ("ricker", "all-survival", "offspring", "fixed"),
    ],
)
def test_neutral_limit_is_the_share_of_reproductive_value(form, acts_on, counted, distribution):
    # Emigh (1979): a neutral allele in an age-structured population fixes with its share of
    # reproductive value (Kimura 1962 for one class). A mutant identical to the resident is neutral.
    mutant = {
        "name": "twin",
        "breeding": "iteroparous",
        "fecundity": 3.0,
        "adult_survival": 0.5,
        "juvenile_survival": 0.5,
        "maturity_age": 2,
    }
    config = invasion_config(
        form=form,
        acts_on=acts_on,
        counted=counted,
        distribution=distribution,
        dispersion=2.0 if distribution == "negative-binomial" else None,
        capacity=150,
        mutant=mutant,
        fecundity=3.0,
        maturity_age=2,
        mutant_count=3,
    )
    f = finite_population_prediction(config)
    assert f.valid
    assert f.fixation_probability == pytest.approx(neutral_expectation(config), rel=1e-9)
    assert f.demographic_variance_mutant == pytest.approx(f.demographic_variance_resident, rel=1e-12)


# -- Kimura (1962) -------------------------------------------------------------------------
@pytest.mark.parametrize("s", [0.002, -0.002, 0.0005])
def test_one_class_semelparous_under_a_ceiling_follows_kimura(s):
    # One-class semelparous types with Poisson offspring under a ceiling on everyone: each
    # season K are sampled from Poisson recruits, a Wright-Fisher sampling with N = K and
    # offspring variance 1 at the equilibrium (common practice). The mutant's variance is
    # 1 + s, so the prediction differs from Kimura's (1962) by a term of relative size 1/K
    # (Gillespie 1974): at K = 500 the tolerance is 2% of u.
    k = 500
    config = _semelparous_pair(3.0, 3.0 * (1 + s), capacity=k)
    f = finite_population_prediction(config)
    assert f.selection_coefficient == pytest.approx(s, rel=1e-9)
    assert f.demographic_variance_resident == pytest.approx(1.0, rel=1e-6)
    assert f.effective_size == pytest.approx(k, rel=1e-6)  # Wright-Fisher: N_e = N
    p = f.initial_share
    assert p == pytest.approx(1 / (k + 1))
    assert f.fixation_probability == pytest.approx(_kimura(p, k, s), rel=0.02)
    assert diffusion_fixation(
        p, size=k, selection=s, variance_mutant=1.0, variance_resident=1.0
    ) == pytest.approx(_kimura(p, k, s), rel=1e-9)


# -- Gillespie (1974): an exact chain of the tool's ceiling model ----------------------------
def _ceiling_chain_fixation(k, mutant, resident):
    """Exact fixation probability of one mutant among k - 1 residents, one class each.

    Built from the model's rules, not from the diffusion: each season every individual
    draws Poisson(B c) recruits and survives with probability P; then, if more than k
    individuals are present, k are kept at random (hypergeometric). ``mutant`` and
    ``resident`` are (B c, P). States (i mutants, j residents), i + j <= k; absorbing
    when either is gone. The linear system u = P u + b is solved with scipy.
    """
    xmax = 3 * k + 30
    x = np.arange(xmax + 1)
    t = np.arange(2 * xmax + 1)
    kept = np.arange(k + 1)
    hyper = np.nan_to_num(
        stats.hypergeom.pmf(kept[None, None, :], np.maximum(t[:, None, None], 1), x[None, :, None], k)
    )

    def contribution(n, recruits, survival):
        pmf = stats.poisson.pmf(x, n * recruits)
        if survival > 0:
            pmf = np.convolve(pmf, stats.binom.pmf(np.arange(n + 1), n, survival))[: xmax + 1]
        return pmf

    states = [(i, j) for i in range(1, k + 1) for j in range(1, k + 1 - i)]
    index = {st: n for n, st in enumerate(states)}
    rows, cols, vals, fixes = [], [], [], np.zeros(len(states))
    mx, my = np.meshgrid(x, x, indexing="ij")
    total = mx + my
    small, big = total <= k, total > k
    for (i, j), row in index.items():
        joint = np.outer(contribution(i, *mutant), contribution(j, *resident))
        nxt = np.zeros((k + 1, k + 1))
        np.add.at(nxt, (mx[small], my[small]), joint[small])
        before_cull = np.zeros((2 * xmax + 1, xmax + 1))
        np.add.at(before_cull, (total[big], mx[big]), joint[big])
        nxt[kept, k - kept] += np.einsum("tx,txk->k", before_cull, hyper)
        for a in range(1, k + 1):
            fixes[row] += nxt[a, 0]
            for b in range(1, k + 1 - a):
                if nxt[a, b] > 0:
                    rows.append(row)
                    cols.append(index[(a, b)])
                    vals.append(nxt[a, b])
    step = sparse.csr_matrix((vals, (rows, cols)), shape=(len(states),) * 2)
    u = spsolve((sparse.eye(len(states)) - step).tocsc(), fixes)
    return float(u[index[(1, k - 1)]])


def test_equal_means_unequal_variances_match_an_exact_chain():
    # Gillespie (1974): with equal mean contributions, the type with the higher variance
    # fixes less often than neutral, N u < 1. Iteroparous resident (B 2, P 0.5, c 0.5)
    # against a semelparous mutant at the ceiling threshold B_s = B_i + P / c = 3
    # (Charnov & Schaffer 1973): equal means, the semelparous variance is higher.
    k = 20
    exact = _ceiling_chain_fixation(k, (3.0 * 0.5, 0.0), (2.0 * 0.5, 0.5))
    config = invasion_config(mutant_fecundity=3.0, form="ceiling", acts_on="all-survival",
                             capacity=k, resident_count=k - 1)
    f = finite_population_prediction(config)
    assert f.selection_coefficient == pytest.approx(0.0, abs=1e-9)
    assert f.demographic_variance_mutant > f.demographic_variance_resident
    assert k * exact < 0.95  # the direction, and a size well beyond rounding (about 0.89)
    # The diffusion's error is of order 1/k and s (here s = 0); 2% of u is a fifth of the
    # variance effect (1 - 0.89), so the check tells Gillespie's correction from neutrality.
    assert f.fixation_probability == pytest.approx(exact, rel=0.02)
    assert f.initial_share == pytest.approx(1 / k)
    assert abs(f.fixation_probability - f.initial_share) > 5 * abs(f.fixation_probability - exact)


# -- demographic variance: closed forms ----------------------------------------------------
@pytest.mark.parametrize(
    "offspring, births_var",
    [
        (Poisson(), lambda m: m),
        (NegativeBinomial(2.0), lambda m: m + m * m / 2.0),
        (Fixed(), lambda m: (m - math.floor(m)) * (1 - (m - math.floor(m)))),
    ],
)
def test_one_class_demographic_variance_closed_form(offspring, births_var):
    # One class (v = 1): W = R + S, R recruits = births (variance Vb) thinned by p = c f_rec,
    # Var R = p^2 Vb + m p (1 - p) (law of total variance, common practice); S ~ Bernoulli(P f_a).
    sched = iteroparous("x", 2.3, 0.6, 0.5)
    factors = Factors(0.9, 0.8, 0.7)
    m, p, surv = 2.3 * 0.9, 0.5 * 0.7, 0.6 * 0.8
    want = p * p * births_var(m) + m * p * (1 - p) + surv * (1 - surv)
    got = demographic_variance(sched, factors, offspring, np.array([1.0]))
    assert got.variance == pytest.approx(want, rel=1e-5)
    assert got.growth_rate == pytest.approx(m * p + surv)


def test_semelparous_maturity_two_variance_by_age():
    # Two ages, v = (v1, v2): age 1 only survives (W = v2 S), age 2 only breeds (W = v1 R).
    sched = semelparous("x", 4.0, 0.5, maturity_age=2, adult_survival=0.6)
    v = np.array([1.0, 1.7])
    got = demographic_variance(sched, Factors(), Poisson(), v)
    assert got.by_age == pytest.approx([1.7**2 * 0.6 * 0.4, 2.0])


# -- the diffusion formula -------------------------------------------------------------------
def test_diffusion_neutral_unequal_variances_closed_form():
    # s = 0: u(p) = p sr / ((1 - p) sm + p sr) (Gillespie 1974, from the formula's limit k = -1).
    for p in (0.01, 0.3):
        got = diffusion_fixation(p, size=100, selection=0.0, variance_mutant=1.2, variance_resident=0.9)
        assert got == pytest.approx(p * 0.9 / ((1 - p) * 1.2 + p * 0.9), rel=1e-12)


def test_diffusion_large_populations_do_not_overflow_and_tend_to_feller():
    # Strong drift of selection (V s >> 1): one individual's chance tends to Feller's
    # 2 s / sigma^2 (the branching-process limit, Feller 1951), finite and monotone in s.
    size = 1e6
    values = [
        diffusion_fixation(1 / size, size=size, selection=s, variance_mutant=1.5, variance_resident=1.0)
        for s in (-0.01, 0.0, 0.001, 0.01, 0.05)
    ]
    assert all(np.isfinite(values)) and values == sorted(values)
    assert values[3] == pytest.approx(2 * 0.01 / 1.5, rel=0.02)
    assert values[0] < 1e-100


def test_no_density_dependence_gives_no_prediction():
    f = finite_population_prediction(invasion_config(form="none"))
    assert not f.valid and math.isnan(f.fixation_probability)
    assert "no regulated census" in f.fixation_probability_note
    cols = finite_population_columns(invasion_config(form="none"))
    assert cols["fixation_probability_valid"] is False


def test_strong_selection_is_flagged():
    f = finite_population_prediction(invasion_config(mutant_fecundity=6.0, form="ceiling",
                                                     acts_on="all-survival"))
    assert not f.valid and "not weak" in f.fixation_probability_note
    assert f.selection_coefficient_per_generation == pytest.approx(
        f.selection_coefficient * f.generation_time
    )


# -- density fluctuations --------------------------------------------------------------------
def test_density_factor_mean_shift_matches_a_direct_simulation():
    # The linear-noise estimate of E[f] - f* (van Kampen 1981) against a direct simulation of
    # the resident alone (numpy, independent of the analysis code): Beverton-Holt on
    # recruitment, K = 100, n' = Binomial(n, P) + Poisson(n B c f(n)). 2000 chains x 1500
    # seasons; sd(f) ~ 0.03, autocorrelation time ~ 7 seasons, so the standard error of the
    # mean is ~ 2e-4; the tolerance 1e-3 (a quarter of the shift) is five of them.
    from analysis.environment import resident_environment
    from analysis.fixation import density_fluctuation

    config = invasion_config(mutant_fecundity=4.0, form="beverton-holt", acts_on="recruitment", capacity=100)
    env = resident_environment(config)
    v = env.demography.reproductive_values
    fluct = density_fluctuation(config, env, v, np.array([1.0]))
    rng = np.random.default_rng(5)
    n = np.full(2000, 100)
    total, count = 0.0, 0
    for t in range(1500):
        f = 1.0 / (1.0 + n / 100.0)
        if t >= 300:
            total += f.mean()
            count += 1
        n = rng.binomial(n, 0.5) + rng.poisson(n * 1.0 * f)
    simulated = total / count - env.factors.recruitment
    assert fluct.factor_shift == pytest.approx(simulated, abs=1e-3)
    assert fluct.factor_shift > 3e-3  # the effect is real: E[f] exceeds the mean-field factor
    # the semelparous mutant leans on recruitment twice as much as the resident here
    assert fluct.differential == pytest.approx(1.0, rel=1e-9)


def test_unequal_placement_is_flagged_not_valid():
    f = finite_population_prediction(invasion_config(mutant_fecundity=4.0, form="beverton-holt",
                                                     acts_on="recruitment", capacity=100))
    assert not f.valid and "not in the diffusion" in f.fixation_probability_note
    assert f.density_selection > 0
    ceiling_recruits = finite_population_prediction(
        invasion_config(mutant_fecundity=4.0, form="ceiling", acts_on="recruitment", capacity=100)
    )
    assert not ceiling_recruits.valid and "not derived" in ceiling_recruits.fixation_probability_note


@pytest.mark.parametrize("sterile", [{"mutant_fecundity": 0.0}, {"mutant_juvenile_survival": 0.0}])
def test_a_sterile_mutant_has_no_diffusion_value_and_says_why(sterile):
    # a mutant that leaves no offspring has demographic variance 0: no diffusion, no division by it
    config = invasion_config(**sterile)
    f = finite_population_prediction(config)
    assert not f.valid and math.isnan(f.fixation_probability)
    assert "the mutant's demographic variance is 0" in f.fixation_probability_note
    cols = finite_population_columns(config)  # what `broodline threshold` prints
    assert cols["fixation_probability_valid"] is False
    assert cols["fixation_probability_note"] == f.fixation_probability_note


@pytest.mark.parametrize("mutant_fecundity", [3.98, 4.0, 4.04])
def test_a_ceiling_on_everyone_scales_caring_schedules_alike(mutant_fecundity):
    # The model culls after the season (sim.density.Cull), so a caring parent's young keep their care
    # and A(f) = f A(1) for both schedules, with care as without: no density selection term, and the
    # diffusion stays valid off the threshold (tests/test_fixation_simulations.py checks it there
    # against simulated fixation)
    care = {"resident_extra": {"orphan_survival": 0.2},
            "mutant": {"name": "one-shot", "breeding": "semelparous", "fecundity": mutant_fecundity,
                       "juvenile_survival": 0.5, "orphan_survival": 0.3}}
    f = finite_population_prediction(invasion_config(form="ceiling", acts_on="all-survival",
                                                     capacity=100, mutant_count=15, **care))
    assert f.valid, f.fixation_probability_note
    assert f.density_selection == 0.0
    assert "it scales both schedules alike" in f.fixation_probability_note


def test_with_care_a_factor_on_all_survival_is_flagged_for_the_reason_it_has():
    # With care the fertility row holds sigma = P f (the parent's survival sets its young's), so a
    # Beverton-Holt factor on all survival is not a common multiplier: the note must say that it
    # acts unequally, not that it scales both schedules alike
    care = {"resident_extra": {"orphan_survival": 0.2},
            "mutant": {"name": "one-shot", "breeding": "semelparous", "fecundity": 3.86,
                       "juvenile_survival": 0.5, "orphan_survival": 0.3}}
    f = finite_population_prediction(invasion_config(form="beverton-holt", acts_on="all-survival",
                                                     capacity=100, mutant_count=15, **care))
    assert not f.valid
    assert "scales both schedules alike" not in f.fixation_probability_note
    assert "does not scale the schedules alike" in f.fixation_probability_note
    assert f.density_selection != 0.0
