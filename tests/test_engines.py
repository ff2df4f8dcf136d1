"""Engines against theory: growth, neutral fixation, equilibrium (the engine contract and the
agreement with the Mesa reference are ``tests/test_engine_conformance.py``)."""

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
