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


def test_one_class_closed_forms_with_parental_care():
    # One class with care (docs/care.md): lambda = sigma + B f_fec f_rec (sigma c + (1 - sigma) c_o),
    # sigma = P f_a, so (derived from the model, common practice) d/dP = f_a (1 + B f_fec f_rec
    # (c - c_o)), d/dB = f_fec f_rec (sigma c + (1 - sigma) c_o), d/dc = B f_fec f_rec sigma and
    # d/dc_o = B f_fec f_rec (1 - sigma). With a Poisson brood effect the young per parent are
    # B f_fec e^(-B f_fec (1 - x)) (Poisson pgf), so a semelparous parent (sigma = 0) has
    # lambda = c_o f_rec B f e^(-B f (1 - x)) and d/dB = c_o f_rec f e^(-B f (1 - x)) (1 - B f (1 - x)).
    from dataclasses import replace

    f = Factors(0.9, 0.8, 0.6)
    it = _by_rate(vital_rate_sensitivities(replace(iteroparous("i", 2.0, 0.5, 0.5), orphan_survival=0.2), f))
    sigma, bf = 0.5 * 0.8, 2.0 * 0.9 * 0.6
    assert it["s(1)"].sensitivity == pytest.approx(0.8 * (1 + bf * (0.5 - 0.2)), rel=1e-8)
    assert it["m(1)"].sensitivity == pytest.approx(0.9 * 0.6 * (sigma * 0.5 + (1 - sigma) * 0.2), rel=1e-8)
    assert it["c"].sensitivity == pytest.approx(bf * sigma, rel=1e-8)
    assert it["c_o"].sensitivity == pytest.approx(bf * (1 - sigma), rel=1e-8)
    assert it["c_o"].kind == "orphan_survival" and it["c_o"].age is None
    x = np.exp(-1 / 3.0)
    semi = replace(semelparous("s", 4.0, 0.5), orphan_survival=0.3, brood_scale=3.0)
    rows = _by_rate(vital_rate_sensitivities(semi, f))
    b_f = 4.0 * 0.9
    want = 0.3 * 0.6 * 0.9 * np.exp(-b_f * (1 - x)) * (1 - b_f * (1 - x))
    assert rows["m(1)"].sensitivity == pytest.approx(want, rel=1e-7)
    assert rows["c"].sensitivity == pytest.approx(0.0, abs=1e-9)  # no young is ever cared for


def test_config_sensitivities_with_care_match_invasion_fitness_differences():
    # configs/duskmote-care.toml's second point: the sensitivity to the mutant's orphan survival
    # and fecundity is the derivative of the invasion fitness along that parameter (central
    # differences, error O(h^2); common practice), negative-binomial broods with a brood effect
    from sim.config import load_config, sweep_points

    config = sweep_points(load_config("configs/duskmote-care.toml"))[1].config
    config = with_values(config, {"offspring.distribution": "negative-binomial", "offspring.dispersion": 2.0})
    table_ = sensitivities(config).set_index("rate")
    h = 1e-5
    for rate, path in (("c_o", "allele.one-brood.orphan_survival"), ("m(1)", "allele.one-brood.fecundity")):
        value = table_.loc[rate, "value"]
        up, down = (invasion_fitness(with_values(config, {path: value + d})) for d in (h, -h))
        assert table_.loc[rate, "sensitivity"] == pytest.approx((up - down) / (2 * h), rel=1e-6), rate


def test_with_year_types_the_sensitivities_are_of_the_stochastic_invasion_fitness():
    # configs/fenmarrow-hopper.toml (Beverton-Holt on recruitment): a one-class semelparous
    # mutant grows by B c y_t f_t in season t, f_t the resident's factor, so its stochastic
    # invasion fitness exp(mean log(B c y_t f_t)) has elasticity exactly 1 to B and to c
    # (Lewontin & Cohen 1969 on the realised seasons); the constant environment's sensitivities
    # (what --sensitivities printed before) differ (0.25 against 0.187 for m(1)).
    from sim.config import load_config, sweep_points

    config = sweep_points(load_config("configs/fenmarrow-hopper.toml"))[2].config
    rows = sensitivities(config).set_index("rate")
    assert rows.loc["m(1)", "elasticity"] == pytest.approx(1.0, rel=1e-7)
    assert rows.loc["c", "elasticity"] == pytest.approx(1.0, rel=1e-7)
    assert rows.loc["m(1)", "sensitivity"] != pytest.approx(0.25, rel=1e-3)


def test_stochastic_sensitivities_with_care_against_the_realised_seasons():
    # Density-free, one class, care: the mutant's growth in a year of juvenile multiplier y is
    # lambda_y = sigma + B y (sigma c + (1 - sigma) c_o) (docs/care.md), and without density
    # dependence the stochastic invasion fitness is exp(mean_t log lambda_m(y_t) - mean_t log
    # lambda_r(y_t)) over the theory's realised seasons (Lewontin & Cohen 1969), so
    # d log fitness / dP = mean_t (1 + B y_t (c - c_o)) / lambda_m(y_t) and
    # d log fitness / dc_o = mean_t B y_t (1 - P) / lambda_m(y_t). Differences of step 1e-5:
    # error O(h^2), tolerance 1e-6 relative.
    from analysis.varying_years import year_draws
    from sim.config import parse_config
    from tests.conftest import BASE

    raw = {**BASE, "density": {"form": "none"}}
    raw["allele"] = [dict(BASE["allele"][0]),
                     {"name": "careful", "breeding": "iteroparous", "fecundity": 1.5, "adult_survival": 0.6,
                      "juvenile_survival": 0.5, "orphan_survival": 0.2}]
    raw["invasion"] = {**BASE["invasion"], "mutant": "careful", "resident_count": 50}
    raw["environment"] = {"year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.6},
                                   {"name": "dry", "probability": 0.5, "juvenile_survival": 0.4}]}
    config = parse_config(raw)
    draws = year_draws(config)
    y = np.array([1.6, 0.4])[draws.indices[:, draws.burn_in:]]
    lam = 0.6 + 1.5 * y * (0.6 * 0.5 + 0.4 * 0.2)
    rows = sensitivities(config).set_index("rate")
    assert rows.loc["s(1)", "selection_gradient"] == pytest.approx(np.mean((1 + 1.5 * y * 0.3) / lam), rel=1e-6)
    assert rows.loc["c_o", "selection_gradient"] == pytest.approx(np.mean(1.5 * y * 0.4 / lam), rel=1e-6)
