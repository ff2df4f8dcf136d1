"""Sensitivities of invasion fitness to vital rates (analysis.sensitivity)."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.environment import resident_environment
from analysis.invasion import invasion_fitness
from analysis.sensitivity import sensitivities, vital_rate_sensitivities
from analysis.thresholds import with_values
from sim.density import Factors
from sim.meanfield import growth_rate
from sim.schedules import Schedule, iteroparous, semelparous, table
from tests.invasion_configs import invasion_config


def _by_rate(rows):
    return {r.rate: r for r in rows}


def test_one_class_closed_forms():
    # Semelparous, one class: lambda = B c f (Cole 1954), so d lambda / dB = c f and the
    # elasticities of B and c are 1. Iteroparous: lambda = P f_a + B c f (Charnov & Schaffer
    # 1973): d/dP = f_a, d/dB = c f, d/dc = B f; elasticities P f_a / lambda and B c f / lambda.
    f = Factors(0.9, 0.8, 0.6)
    semi = _by_rate(vital_rate_sensitivities(semelparous("s", 4.0, 0.5), f))
    lam = 4.0 * 0.5 * 0.9 * 0.6
    assert semi["m(1)"].sensitivity == pytest.approx(0.5 * 0.9 * 0.6)
    assert semi["c"].sensitivity == pytest.approx(4.0 * 0.9 * 0.6)
    assert semi["m(1)"].elasticity == pytest.approx(1.0)
    assert semi["c"].elasticity == pytest.approx(1.0)
    assert semi["m(1)"].selection_gradient == pytest.approx(semi["m(1)"].sensitivity / lam)
    it = _by_rate(vital_rate_sensitivities(iteroparous("i", 2.0, 0.5, 0.5), f))
    lam = 0.5 * 0.8 + 2.0 * 0.5 * 0.9 * 0.6
    assert it["s(1)"].sensitivity == pytest.approx(0.8)
    assert it["m(1)"].sensitivity == pytest.approx(0.5 * 0.9 * 0.6)
    assert it["c"].sensitivity == pytest.approx(2.0 * 0.9 * 0.6)
    assert it["s(1)"].elasticity == pytest.approx(0.5 * 0.8 / lam)
    assert it["m(1)"].elasticity + it["s(1)"].elasticity == pytest.approx(1.0)


@pytest.mark.parametrize(
    "schedule",
    [
        table("t", [0.0, 1.5, 3.0, 2.0], [0.6, 0.7, 0.5, 0.4], 0.4),
        semelparous("s", 9.0, 0.5, maturity_age=3, adult_survival=0.7),
        iteroparous("i", 2.0, 0.8, 0.3, maturity_age=2),
    ],
)
def test_against_finite_differences(schedule):
    # Differences of the dominant eigenvalue (common practice): central, or the second-order
    # forward formula at a rate of 0 (a negative rate is not a matrix of the model); error O(h^2).
    f = Factors(1.0, 0.9, 0.7)
    rows = vital_rate_sensitivities(schedule, f)
    h = 1e-4
    for r in rows:
        def lam(x, r=r):
            m, s, c = schedule.fecundity.copy(), schedule.survival.copy(), schedule.juvenile_survival
            if r.kind == "fecundity":
                m[r.age - 1] = x
            elif r.kind == "survival":
                s[r.age - 1] = x
            else:
                c = x
            return growth_rate(Schedule("x", m, s, c), f)

        if r.value >= h:
            fd = (lam(r.value + h) - lam(r.value - h)) / (2 * h)
        else:
            fd = (-3 * lam(r.value) + 4 * lam(r.value + h) - lam(r.value + 2 * h)) / (2 * h)
        assert r.sensitivity == pytest.approx(fd, rel=1e-5, abs=1e-8), r.rate
    # the elasticities to matrix entries sum to 1 (Caswell 2001, sec. 9.2); m and s cover each
    # entry once (c shares the fertility entries with m, so it is left out of the sum)
    assert sum(r.elasticity for r in rows if r.kind != "juvenile_survival") == pytest.approx(1.0)


def test_config_sensitivities_match_invasion_fitness_differences():
    # At the resident's equilibrium (Beverton-Holt on recruitment) the sensitivity to the
    # mutant's fecundity is the derivative of invasion fitness along that parameter.
    config = invasion_config(mutant_fecundity=3.5, form="beverton-holt", acts_on="recruitment")
    table_ = sensitivities(config, resident_environment(config)).set_index("rate")
    h = 1e-5
    up = invasion_fitness(with_values(config, {"allele.one-shot.fecundity": 3.5 + h}))
    down = invasion_fitness(with_values(config, {"allele.one-shot.fecundity": 3.5 - h}))
    assert table_.loc["m(1)", "sensitivity"] == pytest.approx((up - down) / (2 * h), rel=1e-6)
    # without density dependence the invasion fitness is lambda_m / lambda_r
    free = invasion_config(form="none")
    t = sensitivities(free).set_index("rate")
    lam_r = 0.5 + 2.0 * 0.5
    assert t.loc["m(1)", "sensitivity"] == pytest.approx(0.5 / lam_r)
    assert np.isfinite(t["elasticity"]).all()
