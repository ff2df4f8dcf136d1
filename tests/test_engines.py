"""Engines against theory, and the fast engine against the Mesa reference engine."""

import copy

import numpy as np
import pytest
from scipy import stats

from sim.config import SweepPoint, parse_config
from sim.lifecycle import round_preserving_total
from sim.meanfield import growth_rate, projection_matrix, stable_age_distribution
from sim.model import BroodModel
from sim.replicates import run_replicate
from tests.conftest import BASE

ENGINES = ["individual", "agents"]


def _raw(**sections):
    raw = copy.deepcopy(BASE)
    raw.update(copy.deepcopy(sections))
    return raw


# --- growth without density dependence --------------------------------------------------
@pytest.mark.parametrize("allele", [
    {"name": "a", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5, "juvenile_survival": 0.5},
    {"name": "a", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.3},
    {"name": "a", "breeding": "table", "fecundity": [0.0, 1.5, 3.0], "adult_survival": [0.6, 0.5, 0.4],
     "juvenile_survival": 0.5},
])
def test_simulated_growth_ratio_matches_dominant_eigenvalue(allele):
    # Charnov & Schaffer (1973) for the two classic schedules, the dominant eigenvalue of the
    # Leslie matrix (Caswell 2001) for the table: started in the stable age distribution, the
    # expected one-season growth ratio is exactly lambda.
    config = parse_config({"experiment": {"seed": 1}, "allele": [{**allele, "initial_count": 1}]})
    schedule = config.schedules()[0]
    lam = growth_rate(schedule)
    census = round_preserving_total(stable_age_distribution(schedule), 200_000)[None, :]
    # Variance of next season's census given this one, per individual of age a:
    # survival Bernoulli s(1-s) plus Poisson recruits of mean m c (thinned Poisson).
    var = float(np.sum(census[0] * (schedule.survival * (1 - schedule.survival)
                                    + schedule.fecundity * schedule.juvenile_survival)))
    expected = float(np.sum(projection_matrix(schedule) @ census[0]))  # = lambda N up to rounding
    assert expected == pytest.approx(lam * census.sum(), rel=1e-4)
    model = BroodModel(config, census, rng=np.random.default_rng(2024))
    model.step()
    n1 = model.census().sum()
    # 4 standard deviations: a correct engine fails this with probability ~6e-5.
    assert abs(n1 - expected) < 4 * np.sqrt(var)


# --- the two engines agree in distribution ----------------------------------------------
AGREEMENT_CONFIGS = {
    "beverton-holt on recruitment": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 25},
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "table schedule, ricker on fecundity, breeders, negative binomial, mutation": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ricker", "acts_on": "fecundity", "counted": "breeders", "capacity": 20},
        offspring={"distribution": "negative-binomial", "dispersion": 1.2},
        mutation={"rate": 0.03},
        allele=[BASE["allele"][0], {"name": "one-shot", "breeding": "table", "fecundity": [0.0, 2.0, 5.0],
                                    "adult_survival": [0.7, 0.6, 0.3], "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "ceiling on everyone, fixed offspring": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ceiling", "capacity": 30},
        offspring={"distribution": "fixed"},
        allele=[{**BASE["allele"][0], "initial_count": 15},
                {"name": "slow", "breeding": "iteroparous", "fecundity": 1.2, "adult_survival": 0.8,
                 "juvenile_survival": 0.5, "initial_count": 15}],
        invasion=None,
    ),
    "ceiling on recruits, delayed semelparity": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "ceiling", "acts_on": "recruitment", "capacity": 30},
        allele=[BASE["allele"][0], {"name": "one-shot", "breeding": "semelparous", "fecundity": 9.0,
                                    "maturity_age": 2, "adult_survival": 0.7, "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
    "beverton-holt on adult survival, offspring counted": _raw(
        experiment={"max_steps": 12, "stop": "max-steps"},
        density={"form": "beverton-holt", "acts_on": "adult-survival", "counted": "offspring", "capacity": 30},
        allele=[{**BASE["allele"][0], "adult_survival": 0.8, "fecundity": 0.6},
                {"name": "one-shot", "breeding": "semelparous", "fecundity": 2.5, "juvenile_survival": 0.5}],
        invasion={"resident": "perennial", "mutant": "one-shot", "mutant_count": 6},
    ),
}


def _sample(raw, engine, n, seed):
    raw = copy.deepcopy(raw)
    raw["experiment"] = {**raw["experiment"], "engine": engine, "seed": seed}
    if raw.get("invasion") is None:
        raw.pop("invasion", None)
    config = parse_config(raw)
    point = SweepPoint(index=0, values={}, config=config)
    totals, freqs, gone = [], [], []
    for rep in range(n):
        result = run_replicate(point, rep, seed)
        last = result.trajectory[-1].sum(axis=1).astype(float)
        totals.append(last.sum())
        focal = last[-1]  # the last allele: the mutant (or the second resident)
        freqs.append(focal / last.sum() if last.sum() else np.nan)
        gone.append(focal == 0)
    return np.array(totals), np.array(freqs), np.array(gone)


@pytest.mark.parametrize("name", list(AGREEMENT_CONFIGS))
def test_individual_engine_agrees_with_mesa_reference(name):
    # Both engines draw the same life cycle; their laws must agree. Checks (each at
    # alpha = 1e-4, so with 15 checks a correct pair fails with probability < 0.2%):
    # census size after T seasons and focal-allele frequency (two-sample Kolmogorov-Smirnov,
    # scipy.stats.ks_2samp), and the fraction of replicates in which the focal allele was
    # lost by T (Fisher's exact test, scipy.stats.fisher_exact).
    n = 250
    raw = AGREEMENT_CONFIGS[name]
    tot_i, freq_i, gone_i = _sample(raw, "individual", n, seed=101)
    tot_a, freq_a, gone_a = _sample(raw, "agents", n, seed=202)
    assert stats.ks_2samp(tot_i, tot_a).pvalue > 1e-4
    fi, fa = freq_i[~np.isnan(freq_i)], freq_a[~np.isnan(freq_a)]
    assert stats.ks_2samp(fi, fa).pvalue > 1e-4
    table = [[gone_i.sum(), n - gone_i.sum()], [gone_a.sum(), n - gone_a.sum()]]
    assert stats.fisher_exact(table).pvalue > 1e-4
    # The comparison has power: the populations are not trivially empty or constant.
    assert tot_i.std() > 0 and 0 < gone_i.mean() < 1 or 0 < freq_i[~np.isnan(freq_i)].mean() < 1


@pytest.mark.parametrize("engine", ENGINES)
def test_ceiling_caps_the_census(engine):
    raw = copy.deepcopy(AGREEMENT_CONFIGS["ceiling on everyone, fixed offspring"])
    raw["experiment"]["engine"] = engine
    raw.pop("invasion")
    model = BroodModel(parse_config(raw), rng=np.random.default_rng(3))
    for _ in range(10):
        model.step()
        # A ceiling at K = 30 with a growing population (lambda = 1.5) holds it at K exactly.
        assert model.census().sum() == 30


def test_semelparous_individuals_breed_once():
    # A semelparous allele maturing at 2 has no individual older than 2 at any census.
    raw = copy.deepcopy(AGREEMENT_CONFIGS["ceiling on recruits, delayed semelparity"])
    config = parse_config(raw)
    model = BroodModel(config, rng=np.random.default_rng(5))
    for _ in range(20):
        model.step()
        census = model.census()
        mutant = config.allele_index("one-shot")
        assert census[mutant, 2:].sum() == 0


# --- neutral fixation --------------------------------------------------------------------
@pytest.mark.parametrize("engine, n_reps", [("individual", 2000)])
def test_neutral_mutant_fixes_with_its_initial_share(engine, n_reps):
    # Neutral limit of Kimura (1962) / Moran (1958): an allele whose carriers are
    # exchangeable with everyone else fixes with probability equal to its initial share.
    # Resident and mutant share one schedule (one age class): 5 mutants + 20 residents -> 0.2.
    raw = _raw(
        experiment={"max_steps": 5000, "stop": "fixation", "engine": engine, "seed": 77},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": 20},
        allele=[BASE["allele"][0], {**BASE["allele"][0], "name": "twin"}],
        invasion={"resident": "perennial", "mutant": "twin", "mutant_count": 5},
    )
    point = SweepPoint(index=0, values={}, config=parse_config(raw))
    outcomes = [run_replicate(point, rep, 77).outcome for rep in range(n_reps)]
    assert "undecided" not in outcomes
    fixed = sum(o == "mutant-fixed" for o in outcomes)
    # 99.9% Wilson interval (scipy.stats.binomtest): a correct engine falls outside with
    # probability ~1e-3.
    ci = stats.binomtest(fixed, n_reps).proportion_ci(confidence_level=0.999, method="wilson")
    assert ci.low <= 5 / 25 <= ci.high


def test_simulated_equilibrium_matches_beverton_holt_formula():
    # Derived from the model (README, The model): with Beverton-Holt on recruitment the
    # iteroparous resident settles at N* = K (B c / (1 - P) - 1) = 2000 here.
    # 200 independent replicates start at N = 500 and run 60 seasons (the map contracts by
    # dN'/dN = P + B c / (1 + N*/K)^2 = 0.67 per season, so the start is forgotten). The sample
    # SD of the census is ~50, so the mean's standard error is ~3.5; tolerance 5 SE (~6e-7
    # false-failure rate). The second-order (Jensen) bias of the stochastic mean is ~ -1,
    # far inside it.
    k, n_reps = 1000.0, 200
    raw = _raw(
        experiment={"max_steps": 60, "stop": "max-steps", "seed": 3},
        density={"form": "beverton-holt", "acts_on": "recruitment", "capacity": k},
        allele=[{**BASE["allele"][0], "fecundity": 3.0}],
        invasion=None,
    )
    raw["allele"][0]["initial_count"] = 500
    raw.pop("invasion")
    point = SweepPoint(index=0, values={}, config=parse_config(raw))
    finals = np.array([run_replicate(point, rep, 3).final_census for rep in range(n_reps)])
    n_star = k * (3.0 * 0.5 / (1 - 0.5) - 1)
    assert abs(finals.mean() - n_star) < 5 * finals.std(ddof=1) / np.sqrt(n_reps)
