"""Invasion fitness, verdicts, neutral expectation and predictions."""

import numpy as np
import pytest

from analysis import invasion_fitness, neutral_expectation, predict
from analysis.invasion import verdict
from sim.config import parse_config
from sim.lifecycle import initial_census
from tests.invasion_configs import invasion_config

_PLACEMENTS = [
    ("beverton-holt", "recruitment"),
    ("beverton-holt", "fecundity"),
    ("beverton-holt", "all-survival"),
    ("ricker", "recruitment"),
    ("ricker", "all-survival"),
    ("ceiling", "recruitment"),
    ("ceiling", "all-survival"),
]


@pytest.mark.parametrize("form, acts_on", _PLACEMENTS)
def test_mutant_identical_to_resident_is_neutral(form, acts_on):
    # A mutant with the resident's schedule has the resident's eigenvalue, 1 at the
    # equilibrium (Metz, Nisbet & Geritz 1992: residents are neutral against themselves).
    twin = {
        "name": "twin",
        "breeding": "iteroparous",
        "fecundity": 2.0,
        "adult_survival": 0.5,
        "juvenile_survival": 0.5,
    }
    config = invasion_config(form=form, acts_on=acts_on, mutant=twin)
    assert invasion_fitness(config) == pytest.approx(1.0, abs=1e-10)
    assert predict(config).verdict == "neutral"


@pytest.mark.parametrize("b_s", [3.0, 3.5, 4.5, 6.0])
def test_semelparous_mutant_closed_forms(b_s):
    # Resident B_i = 2, P = 0.5, c = 0.5. Recruitment: c f* = (1 - P) / B_i, so the mutant's
    # lambda is B_s (1 - P) / B_i (Mylius & Diekmann 1995). All survival: f* = 1 / (P + B_i c),
    # lambda = B_s c / (P + B_i c) (Charnov & Schaffer 1973 in a regulated population).
    rec = invasion_fitness(invasion_config(mutant_fecundity=b_s, acts_on="recruitment"))
    alls = invasion_fitness(invasion_config(mutant_fecundity=b_s, acts_on="all-survival"))
    assert rec == pytest.approx(b_s * 0.5 / 2.0, rel=1e-9)
    assert alls == pytest.approx(b_s * 0.5 / 1.5, rel=1e-9)


def test_without_density_dependence_fitness_is_ratio_of_growth_rates():
    # No equilibrium: invasion fitness is defined as lambda_m / lambda_r (documented choice);
    # Cole (1954) compares these rates: B_s c against P + B_i c.
    config = invasion_config(form="none", mutant_fecundity=4.0)
    p = predict(config)
    assert not p.regulated
    assert p.resident_growth_rate == pytest.approx(1.5)
    assert p.mutant_growth_rate == pytest.approx(2.0)
    assert p.invasion_fitness == pytest.approx(2.0 / 1.5)
    assert p.verdict == "invades"
    assert np.isnan(p.density_index)


@pytest.mark.parametrize(
    "value, expected",
    [(1.2, "invades"), (0.8, "does not invade"), (1 + 1e-12, "neutral"), (np.nan, "undefined")],
)
def test_verdict_words(value, expected):
    assert verdict(value) == expected


def test_neutral_expectation_with_one_age_class():
    # All residents have the same reproductive value as an age-1 mutant: share = k / (k + N).
    for k in (1, 5):
        config = invasion_config(mutant_count=k, capacity=60.0)
        n = initial_census(config)[0].sum()
        assert neutral_expectation(config) == pytest.approx(k / (k + n))


def test_neutral_expectation_weights_by_reproductive_value():
    # Resident maturing at 2: an age-1 individual must survive a year (P) before it breeds,
    # so it is worth P times an adult: at lambda = 1, v A = v with A = [[0, F], [P, P]]
    # gives v = (P, 1) (reproductive value, Fisher 1930; Caswell 2001 sec. 4.5).
    config = invasion_config(
        maturity_age=2, fecundity=4.0, adult_survival=0.5, capacity=80.0, mutant_count=2
    )
    env_census = initial_census(config)[0]
    from analysis import resident_environment

    env = resident_environment(config)
    a = env.demography.matrix
    # left eigenvector of [[0, F], [P, P]] at lambda 1: v = (P, 1) up to scale (v A = v)
    v = np.array([a[1, 0], 1.0])
    assert v @ a == pytest.approx(v)
    expected = 2 * v[0] / (2 * v[0] + env_census @ v)
    assert neutral_expectation(config) == pytest.approx(expected)


def test_prediction_of_the_design_example():
    # The worked example (Mylius & Diekmann 1995 placement rule): B_i = 2, P = 0.5, c = 0.5 with
    # Beverton-Holt on recruitment, K = 100:
    # f* = 1/2 so D* = K; a semelparous mutant with B_s = 5 has lambda = 5 / 4 and Poisson(1.25)
    # recruits, so q = exp(1.25 (q - 1)).
    p = predict(invasion_config(mutant_fecundity=5.0, capacity=100.0))
    assert p.density_index == pytest.approx(100.0)
    assert p.census_size == pytest.approx(100.0)
    assert p.invasion_fitness == pytest.approx(1.25)
    q = 1 - p.establishment_probability
    assert q == pytest.approx(np.exp(1.25 * (q - 1)), abs=1e-10)
    assert p.neutral_expectation == pytest.approx(1 / 101)
    assert p.as_dict()["verdict"] == "invades"


def test_predict_needs_invasion():
    raw = invasion_config().model_dump(exclude_none=True)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 3
    with pytest.raises(ValueError, match="invasion"):
        predict(parse_config(raw))
