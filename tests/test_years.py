"""Year types: validation, the laws of the year sequence, and a year's scaled rates."""

import numpy as np
import pytest

from sim.schedules import iteroparous, table
from sim.years import YearType, YearTypes, constant_years, scaled_schedule

GOOD = YearType("good", juvenile_survival=1.5)
BAD = YearType("bad", juvenile_survival=0.2, fecundity=0.5)


def test_scaled_schedule_multiplies_every_rate():
    s = table("a", [0.0, 2.0], [0.5, 0.4], 0.4)
    y = YearType("y", fecundity=2.0, adult_survival=1.5, juvenile_survival=0.5)
    out = scaled_schedule(s, y)
    np.testing.assert_array_equal(out.fecundity, [0.0, 4.0])
    np.testing.assert_allclose(out.survival, [0.75, 0.6])
    assert out.juvenile_survival == pytest.approx(0.2)
    assert out.name == "a"


@pytest.mark.parametrize(
    "year, match",
    [
        (YearType("boom", adult_survival=2.5), r"allele 'a', year 'boom': adult_survival .* > 1"),
        (YearType("boom", juvenile_survival=3.0), r"allele 'a', year 'boom': juvenile_survival .* > 1"),
    ],
)
def test_survival_above_one_is_refused_naming_allele_and_year(year, match):
    with pytest.raises(ValueError, match=match):
        scaled_schedule(iteroparous("a", 2.0, 0.5, 0.4), year)


@pytest.mark.parametrize(
    "kwargs, error, match",
    [
        (dict(types=(GOOD, BAD), switching="iid", probabilities=(0.5, 0.6)), ValueError, "probability"),
        (dict(types=(GOOD, BAD), switching="iid"), ValueError, "probability"),
        (dict(types=(GOOD, GOOD), switching="iid", probabilities=(0.5, 0.5)), ValueError, "distinct"),
        (dict(types=(GOOD, BAD), switching="markov", transitions=[[0.5, 0.4], [0, 1]]), ValueError, "transitions"),
        (dict(types=(GOOD, BAD), switching="markov", transitions=[[1, 0], [0, 1]]), ValueError, "stationary"),
        (dict(types=(GOOD, BAD), switching="markov", transitions=[[1, 0], [0, 1]], start="ugly"), ValueError, "start"),
        (dict(types=(GOOD, BAD), switching="sometimes", probabilities=(0.5, 0.5)), ValueError, "switching"),
        (dict(types=("good",), switching="iid", probabilities=(1.0,)), TypeError, "YearType"),
    ],
)
def test_invalid_environments(kwargs, error, match):
    with pytest.raises(error, match=match):
        YearTypes(**kwargs)


@pytest.mark.parametrize("key", ["fecundity", "adult_survival", "juvenile_survival"])
def test_negative_multiplier_is_refused(key):
    with pytest.raises(ValueError, match=f"year 'x': {key}"):
        YearType("x", **{key: -0.1})


def test_iid_frequencies_match_probabilities():
    years = YearTypes((GOOD, BAD, YearType("mid")), "iid", (0.2, 0.3, 0.5))
    seq = years.draw(200_000, np.random.default_rng(1))
    freq = np.bincount(seq, minlength=3) / seq.size
    # binomial standard error sqrt(p (1 - p) / n) <= 0.0012; 5 SE (common practice)
    np.testing.assert_allclose(freq, [0.2, 0.3, 0.5], atol=5 * 0.0012)


def test_markov_stationary_law_and_transition_frequencies():
    # two-state chain: pi_bad = a / (a + b) for P(good -> bad) = a, P(bad -> good) = b
    # (a standard result for two-state chains, e.g. Norris 1997, Markov Chains, ch. 1; from memory)
    a, b = 0.1, 0.3
    years = YearTypes((GOOD, BAD), "markov", transitions=[[1 - a, a], [b, 1 - b]])
    np.testing.assert_allclose(years.stationary_law(), [b / (a + b), a / (a + b)], atol=1e-12)
    seq = years.draw(1000, np.random.default_rng(2), n_sequences=200)
    pairs = np.stack([seq[:, :-1].ravel(), seq[:, 1:].ravel()])
    from_good = pairs[1][pairs[0] == 0]
    # about 150 000 transitions out of 'good': SE of the frequency <= 0.001; 5 SE
    assert np.mean(from_good == 1) == pytest.approx(a, abs=5 * 0.001)
    assert np.mean(seq == 1) == pytest.approx(a / (a + b), abs=0.01)  # ~2e5 correlated draws


def test_markov_identity_started_in_a_named_year_stays_there():
    years = YearTypes((GOOD, BAD), "markov", transitions=[[1, 0], [0, 1]], start="bad")
    seq = years.draw(50, np.random.default_rng(0), n_sequences=3)
    assert np.all(seq == 1)


def test_same_generator_state_same_sequence():
    years = YearTypes((GOOD, BAD), "markov", transitions=[[0.7, 0.3], [0.4, 0.6]])
    a = years.draw(100, np.random.default_rng(9))
    b = years.draw(100, np.random.default_rng(9))
    np.testing.assert_array_equal(a, b)


def test_constant_years_is_one_type_every_season():
    years = constant_years()
    assert years.draw(10, np.random.default_rng(0)).tolist() == [0] * 10
    np.testing.assert_array_equal(years.multipliers(), [[1.0, 1.0, 1.0]])
