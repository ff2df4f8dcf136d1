"""The resident's equilibrium for every density form x placement x counted option."""

import itertools

import numpy as np
import pytest

from analysis import resident_environment
from analysis.demography import schedule_demography
from sim.config import ConfigError
from sim.lifecycle import LifeCycle
from sim.meanfield import NoEquilibriumError, mean_field_step
from tests.invasion_configs import invasion_config

_VALID = [
    (form, acts_on, counted)
    for form, acts_on, counted in itertools.product(
        ["beverton-holt", "ricker", "ceiling"],
        ["recruitment", "fecundity", "adult-survival", "all-survival"],
        ["census", "breeders", "offspring"],
    )
    if not (counted == "offspring" and acts_on == "fecundity")
    and not (
        form == "ceiling"
        and (acts_on not in ("recruitment", "all-survival") or counted != "census")
    )
]


@pytest.mark.parametrize("form, acts_on, counted", _VALID)
def test_equilibrium_is_a_fixed_point_with_growth_rate_one(form, acts_on, counted):
    # A maturity-2 resident so that "breeders" and "census" differ. Adult survival is
    # low enough that density on adult survival alone can regulate it.
    config = invasion_config(
        form=form,
        acts_on=acts_on,
        counted=counted,
        capacity=80.0,
        fecundity=4.0,
        adult_survival=0.3,
        juvenile_survival=0.8,
        maturity_age=2,
        mutant={
            "name": "one-shot",
            "breeding": "iteroparous",
            "fecundity": 2.0,
            "adult_survival": 0.3,
            "juvenile_survival": 0.8,
            "maturity_age": 2,
        },
    )
    env = resident_environment(config)
    assert env.regulated
    # the defining property: the resident's dominant eigenvalue is 1 (Caswell 2001 ch. 16)
    assert env.demography.growth_rate == pytest.approx(1.0, abs=1e-9)
    assert env.census_size > 0
    # the equilibrium census is a fixed point of the mean-field season (resident alone)
    life = LifeCycle.from_config(config)
    census = np.zeros((2, life.n_ages))
    census[0, : env.equilibrium.census.size] = env.equilibrium.census
    assert mean_field_step(census, life.M, life.S, life.C, life.density) == pytest.approx(
        census, rel=1e-7
    )
    if form == "ceiling":
        assert env.census_size == pytest.approx(80.0)


@pytest.mark.parametrize("b, p, c", [(2.0, 0.5, 0.5), (3.0, 0.2, 0.4), (1.5, 0.8, 0.9)])
def test_beverton_holt_and_ricker_on_recruitment_closed_forms(b, p, c):
    # At equilibrium P + B c f* = 1, so f* = (1 - P) / (B c); inverting f = 1 / (1 + D/K)
    # gives D* = K (1/f* - 1) (Beverton & Holt 1957) and f = exp(-D/K) gives D* = K ln(1/f*)
    # (Ricker 1954). Counting the census, census = D*.
    f_star = (1 - p) / (b * c)
    k = 150.0
    for form, d_star in [
        ("beverton-holt", k * (1 / f_star - 1)),
        ("ricker", k * np.log(1 / f_star)),
    ]:
        env = resident_environment(
            invasion_config(
                fecundity=b, adult_survival=p, juvenile_survival=c, form=form, capacity=k
            )
        )
        assert env.factors.recruitment == pytest.approx(f_star, rel=1e-9)
        assert env.density_index == pytest.approx(d_star, rel=1e-9)
        assert env.census_size == pytest.approx(d_star, rel=1e-9)


def test_counting_offspring_gives_census_from_births():
    # counted = "offspring": D* is the number born, B x census for maturity 1.
    env = resident_environment(invasion_config(counted="offspring", capacity=150.0))
    assert env.density_index == pytest.approx(2.0 * env.census_size, rel=1e-9)


def test_no_density_dependence_has_no_equilibrium():
    env = resident_environment(invasion_config(form="none"))
    assert not env.regulated
    assert np.isnan(env.density_index) and np.isnan(env.census_size)
    assert env.demography.growth_rate == pytest.approx(0.5 + 2.0 * 0.5)
    assert (
        env.demography.growth_rate
        == schedule_demography(invasion_config(form="none").schedules()[0]).growth_rate
    )


def test_resident_that_cannot_grow_has_no_equilibrium():
    # P + B c = 0.5 + 0.5 * 0.5 < 1: it declines even at low density.
    with pytest.raises(NoEquilibriumError, match="growth rate at low density"):
        resident_environment(invasion_config(fecundity=0.5, resident_count=10))


def test_config_without_invasion_is_refused():
    config = invasion_config()
    raw = config.model_dump(exclude_none=True)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 5
    from sim.config import parse_config

    with pytest.raises(ConfigError, match=r"invasion: the config has no \[invasion\] table"):
        resident_environment(parse_config(raw))
