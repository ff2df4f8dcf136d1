"""End to end: simulated invasions follow the analytic prediction.

Every check uses fixed seeds and a Wilson interval at z = 4 (coverage 1 - 6.3e-5), so
a correct theory fails a check with probability about 6e-5 from sampling alone; each
check states what a wrong theory would have given.
"""

import numpy as np
import pytest
from scipy.stats import norm

from analysis import predict, wilson_interval
from sim.config import parse_config, sweep_points
from sim.replicates import run_replicate
from tests.invasion_configs import invasion_config

Z4 = 1.0 - 2.0 * norm.sf(4.0)  # two-sided coverage of +-4 standard errors


def _fixed(config, n, seed):
    point = sweep_points(config)[0]
    outcomes = [run_replicate(point, r, seed).outcome for r in range(n)]
    assert set(outcomes) <= {"mutant-fixed", "mutant-lost"}  # every replicate resolved
    return sum(o == "mutant-fixed" for o in outcomes)


@pytest.mark.parametrize(
    "distribution, dispersion", [("poisson", None), ("negative-binomial", 1.5)]
)
def test_strong_invader_establishes_at_branching_rate(distribution, dispersion):
    # Resident B_i = 2, P = 0.5, c = 0.5, Beverton-Holt on all survival, K = 200: f* = 2/3 and
    # the census is 100. A semelparous mutant with B_s = 6 has lambda = 2 and recruits
    # thinned to mean 2: Poisson gives q = 0.2032 (establishment 0.797). With lambda = 2 an
    # established lineage fixes almost surely (it outgrows the resident within ~10 seasons),
    # so fixation estimates establishment. The mutant's own offspring also count in D,
    # which lowers its growth slightly: measured at 0.785 +- 0.005 over 8000 replicates
    # (Poisson), an effect of ~0.01, well inside the +-4 SE band (0.036 at n = 2000).
    # Negative binomial (dispersion 1.5): theory 0.573, measured 0.580 +- 0.006 over 6000
    # replicates (K = 200) and 0.575 +- 0.009 over 3000 (K = 1000).
    # A theory without thinning or without the density factor would predict >= 0.94
    # (Poisson) or >= 0.74 (negative binomial).
    config = invasion_config(
        mutant_fecundity=6.0,
        acts_on="all-survival",
        capacity=200.0,
        distribution=distribution,
        dispersion=dispersion,
        record_every=1000,
    )
    pred = predict(config)
    assert pred.invasion_fitness == pytest.approx(2.0)
    n = 2000
    est = wilson_interval(_fixed(config, n, seed=7), n, level=Z4)
    assert est.low <= pred.establishment_probability <= est.high, (est, pred)


def test_age_structured_invader_establishes_at_multitype_rate():
    # Multitype check: a semelparous resident (B = 4, c = 0.5; Beverton-Holt on recruitment,
    # K = 100, so c f* = 1/4 and the census is 100) invaded by an iteroparous mutant that
    # matures at 2 (B = 4, P = 0.7): A = [[0, 1], [0.7, 0.7]], lambda = 1.257. Its
    # establishment (0.464) comes from the two-type branching process; a one-type
    # Poisson(lambda) shortcut would give 0.38. Pilot: 939 of 2000 fixed (0.470).
    raw = {
        "experiment": {"seed": 1, "replicates": 1, "max_steps": 5000, "record_every": 1000},
        "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 100.0},
        "allele": [
            {
                "name": "annual",
                "breeding": "semelparous",
                "fecundity": 4.0,
                "juvenile_survival": 0.5,
            },
            {
                "name": "slow",
                "breeding": "iteroparous",
                "fecundity": 4.0,
                "adult_survival": 0.7,
                "juvenile_survival": 0.5,
                "maturity_age": 2,
            },
        ],
        "invasion": {"resident": "annual", "mutant": "slow"},
    }
    config = parse_config(raw)
    pred = predict(config)
    assert pred.invasion_fitness == pytest.approx((0.7 + np.sqrt(0.49 + 2.8)) / 2)
    n = 2000
    est = wilson_interval(_fixed(config, n, seed=1), n, level=Z4)
    assert est.low <= pred.establishment_probability <= est.high, (est, pred)


def test_below_threshold_fixes_less_often_than_neutral():
    # Beverton-Holt on recruitment, census 20: B_s = 3 is below the threshold 4 (lambda 0.75).
    # Neutral expectation 1/21 = 0.048. The check fails if 58 or more of 2000 fix; the pilot
    # rate is 0.002, and even at a true rate of 0.01 the chance of that is 3e-12.
    config = invasion_config(mutant_fecundity=3.0, capacity=20.0, record_every=1000)
    pred = predict(config)
    assert pred.verdict == "does not invade"
    assert pred.neutral_expectation == pytest.approx(1 / 21)
    n = 2000
    est = wilson_interval(_fixed(config, n, seed=3), n, level=Z4)
    assert est.high < pred.neutral_expectation, est


def test_placement_of_density_dependence_moves_the_threshold():
    # Resident B_i = 2, P = 0.5, c = 0.5: threshold B_s = 4 under recruitment (Mylius &
    # Diekmann 1995) but 3 under all survival (Charnov & Schaffer 1973). B_s = 3.5 lies
    # between: it invades under all survival (lambda 7/6, establishment 0.27) and not under
    # recruitment (lambda 7/8). Both populations have census 20 (K = 40 and K = 20), so the
    # neutral expectation is 1/21 in both.
    # Error rates: all survival fails if 74 or fewer of 1000 fix (pilot 0.244; at a true
    # 0.15 the chance is 2e-13); recruitment fails if 58 or more of 2000 fix (pilot 0.005;
    # at a true 0.01 the chance is 3e-12).
    survival = invasion_config(
        mutant_fecundity=3.5, acts_on="all-survival", capacity=40.0, record_every=1000
    )
    recruitment = invasion_config(
        mutant_fecundity=3.5, acts_on="recruitment", capacity=20.0, record_every=1000
    )
    ps, pr = predict(survival), predict(recruitment)
    assert (ps.verdict, pr.verdict) == ("invades", "does not invade")
    assert ps.neutral_expectation == pytest.approx(pr.neutral_expectation)
    neutral = ps.neutral_expectation
    above = wilson_interval(_fixed(survival, 1000, seed=5), 1000, level=Z4)
    below = wilson_interval(_fixed(recruitment, 2000, seed=6), 2000, level=Z4)
    assert above.low > neutral, above
    assert below.high < neutral, below


@pytest.mark.slow
def test_strong_invader_establishes_at_branching_rate_large_population():
    # As the default test, with census 500 (K = 1000), where the mutant's own effect on D is
    # five times smaller, and 8000 replicates (+-4 SE = 0.018).
    config = invasion_config(
        mutant_fecundity=6.0, acts_on="all-survival", capacity=1000.0, record_every=1000
    )
    pred = predict(config)
    n = 8000
    est = wilson_interval(_fixed(config, n, seed=17), n, level=Z4)
    assert est.low <= pred.establishment_probability <= est.high, (est, pred)


@pytest.mark.slow
@pytest.mark.parametrize(
    "acts_on, capacity, analytic, other",
    [("recruitment", 50.0, 4.0, 3.0), ("all-survival", 100.0, 3.0, 4.0)],
)
def test_observed_threshold_follows_the_placement(tmp_path, acts_on, capacity, analytic, other):
    # The observed threshold (where fixation crosses the neutral expectation) sits at the
    # analytic one for each placement (census 50 in both) and not at the other placement's.
    # Intervals at 99.9% (bootstrap of analysis.estimates.observed_threshold), so a correct
    # theory fails a check with probability about 1e-3.
    from analysis import compare, compare_thresholds
    from sim.experiment import run_experiment

    sweep = [2.5, 2.75, 3.0, 3.25, 3.5, 3.75, 4.0, 4.25, 4.5]
    config = invasion_config(
        acts_on=acts_on,
        capacity=capacity,
        replicates=1000,
        seed=23,
        record_every=1000,
        sweep={"allele.one-shot.fecundity": sweep},
    )
    path = tmp_path / "placement.h5"
    run_experiment(config, path, progress=False)
    table = compare(path, level=0.999)
    row = compare_thresholds(path, table, level=0.999).iloc[0]
    assert row["analytic"] == pytest.approx(analytic)
    assert row["observed_low"] <= analytic <= row["observed_high"], row.to_dict()
    assert not row["observed_low"] <= other <= row["observed_high"], row.to_dict()
