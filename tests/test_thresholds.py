"""The general threshold solver against the published closed forms."""

import math

import numpy as np
import pytest

from analysis import sweep_thresholds, threshold, with_values
from analysis.sweep import predict_sweep
from sim.config import ConfigError
from tests.invasion_configs import invasion_config

MUTANT_FECUNDITY = "allele.one-shot.fecundity"
_GRID = [(2.0, 0.5, 0.5), (1.0, 0.8, 0.3), (5.0, 0.2, 0.9), (0.7, 0.9, 1.0)]


@pytest.mark.parametrize("b_i", [0.5, 2.0, 7.0])
def test_cole_1954(b_i):
    # Cole (1954): with c = P = 1 and no density dependence an annual must add one offspring
    # to match a perennial: B_s = B_i + 1 (comparing density-independent growth rates).
    config = invasion_config(form="none", fecundity=b_i, adult_survival=1.0, juvenile_survival=1.0)
    res = threshold(config, MUTANT_FECUNDITY, bracket=(0.0, 20.0))
    assert res.converged and res.invades_above
    assert res.value == pytest.approx(b_i + 1.0, abs=1e-8)


@pytest.mark.parametrize(
    "form, acts_on",
    [
        ("none", None),
        ("beverton-holt", "all-survival"),
        ("ricker", "all-survival"),
        ("ceiling", "all-survival"),
    ],
)
@pytest.mark.parametrize("b_i, p, c", _GRID)
def test_charnov_schaffer_1973(form, acts_on, b_i, p, c):
    # Charnov & Schaffer (1973): B_s = B_i + P / c without density dependence, and with
    # density dependence acting alike on juvenile and adult survival (or a ceiling on
    # everyone), which scales both terms of lambda = P + B c by the same factor.
    config = invasion_config(
        form=form,
        acts_on=acts_on or "recruitment",
        fecundity=b_i,
        adult_survival=p,
        juvenile_survival=c,
    )
    res = threshold(config, MUTANT_FECUNDITY, bracket=(0.0, 30.0))
    assert res.converged and res.invades_above
    assert res.value == pytest.approx(b_i + p / c, abs=1e-8)


@pytest.mark.parametrize(
    "form, acts_on",
    [
        ("beverton-holt", "recruitment"),
        ("ricker", "recruitment"),
        ("beverton-holt", "fecundity"),
        ("ceiling", "recruitment"),
    ],
)
@pytest.mark.parametrize("b_i, p, c", _GRID)
def test_mylius_diekmann_1995_recruitment(form, acts_on, b_i, p, c):
    # Density dependence on recruitment (or fecundity, which enters lambda the same way):
    # the resident fixes c f* = (1 - P) / B_i, and the semelparous mutant invades iff
    # B_s c f* > 1, i.e. B_s > B_i / (1 - P) (Mylius & Diekmann 1995: R0 is maximised).
    if p * 1.0 + b_i * c <= 1.0:
        pytest.skip("resident cannot grow: no equilibrium")
    config = invasion_config(
        form=form, acts_on=acts_on, fecundity=b_i, adult_survival=p, juvenile_survival=c
    )
    res = threshold(config, MUTANT_FECUNDITY, bracket=(0.0, 50.0))
    assert res.converged and res.invades_above
    assert res.value == pytest.approx(b_i / (1.0 - p), abs=1e-8)


def test_placement_moves_the_threshold():
    # the worked example (tests/conftest.py): 4 under recruitment, 3 under all survival.
    rec = threshold(invasion_config(acts_on="recruitment"), MUTANT_FECUNDITY, bracket=(1, 10))
    alls = threshold(invasion_config(acts_on="all-survival"), MUTANT_FECUNDITY, bracket=(1, 10))
    assert rec.value == pytest.approx(4.0, abs=1e-8)
    assert alls.value == pytest.approx(3.0, abs=1e-8)


def test_resident_parameter_threshold():
    # Inverting B_s = B_i / (1 - P) for the resident's survival: P* = 1 - B_i / B_s; the
    # semelparous mutant invades below it.
    res = threshold(invasion_config(mutant_fecundity=5.0), "allele.perennial.adult_survival")
    assert res.bracket == (0.0, 1.0)
    assert res.value == pytest.approx(1 - 2.0 / 5.0, abs=1e-8)
    assert res.invades_above is False


def test_no_threshold_in_range_says_so():
    res = threshold(invasion_config(), MUTANT_FECUNDITY, bracket=(5.0, 8.0))
    assert not res.converged and math.isnan(res.value)
    assert res.fitness_at_bracket == pytest.approx((5.0 / 4.0, 8.0 / 4.0))
    assert "no threshold" in res.message and "throughout the range" in res.message


def test_capacity_has_no_threshold():
    # K scales the equilibrium but not the factor f*, so invasion fitness does not depend on it.
    res = threshold(invasion_config(mutant_fecundity=4.5), "density.capacity")
    assert not res.converged
    assert res.fitness_at_bracket[0] == pytest.approx(res.fitness_at_bracket[1])


def test_default_bracket_extends_for_an_unbounded_parameter():
    res = threshold(
        invasion_config(mutant_fecundity=1.0, fecundity=20.0, adult_survival=0.5), MUTANT_FECUNDITY
    )
    assert res.converged and res.value == pytest.approx(40.0, abs=1e-8)


@pytest.mark.parametrize(
    "parameter, bracket, message",
    [
        ("allele.nobody.fecundity", None, "no allele is named 'nobody'"),
        ("allele.one-shot.fecundty", None, "did you mean 'fecundity'"),
        ("allele.one-shot.maturity_age", None, "whole numbers"),
        ("density.form", None, "not a number"),
        (MUTANT_FECUNDITY, (3.0, 2.0), "low < high"),
        (MUTANT_FECUNDITY, (-1.0, 2.0), "fecundity must be >= 0"),
        ("allele.perennial.adult_survival", (0.2, 1.5), "must be in \\[0, 1\\]"),
    ],
)
def test_bad_parameters_are_refused(parameter, bracket, message):
    with pytest.raises(ConfigError, match=message):
        threshold(invasion_config(), parameter, bracket=bracket)


def test_with_values_uses_sweep_validation():
    config = with_values(invasion_config(), {MUTANT_FECUNDITY: 7.0, "density.capacity": 30.0})
    assert config.allele[1].fecundity == 7.0 and config.density.capacity == 30.0
    with pytest.raises(ConfigError, match="capacity must be > 0"):
        with_values(invasion_config(), {"density.capacity": 0.0})


def test_sweep_thresholds_and_predictions_per_point():
    config = invasion_config(
        sweep={MUTANT_FECUNDITY: [3.0, 5.0], "density.acts_on": ["recruitment", "all-survival"]}
    )
    results = sweep_thresholds(config)
    assert [r.at for r in results] == [
        {"density.acts_on": "recruitment"},
        {"density.acts_on": "all-survival"},
    ]
    assert [r.value for r in results] == pytest.approx([4.0, 3.0], abs=1e-8)
    table = predict_sweep(config)
    assert list(table["point"]) == [0, 1, 2, 3]
    expected = [3 / 4, 3 * 0.5 / 1.5, 5 / 4, 5 * 0.5 / 1.5]
    assert table["invasion_fitness"].to_numpy() == pytest.approx(expected, rel=1e-9)
    assert np.all(table["verdict"] == ["does not invade", "neutral", "invades", "invades"])


EFFORT_PAIR = {
    "experiment": {"name": "effort-pair", "seed": 5, "replicates": 10},
    "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 200.0},
    "tradeoff": {"max_fecundity": 6.0, "fecundity_shape": 0.5, "max_adult_survival": 0.9},
    "allele": [{"name": "low", "breeding": "effort", "effort": 0.3, "juvenile_survival": 0.5},
               {"name": "high", "breeding": "effort", "effort": 0.6, "juvenile_survival": 0.5}],
    "invasion": {"resident": "low", "mutant": "high", "mutant_count": 1, "resident_count": "equilibrium"},
}


def test_threshold_along_an_effort_searches_its_share_and_says_when_fitness_crosses_1_again():
    # An effort is a share in [0, 1] (the schema's Probability), so the default bracket is
    # [0, 1], not [0, 2 x the current value] (which asked for effort = 1.2 and failed).
    # Beverton-Holt on recruitment: a mutant invades iff its lifetime offspring
    # B(E) / (1 - P(E)) beats the resident's (Mylius & Diekmann 1995), which with B = 6 sqrt(E),
    # P = 0.9 (1 - E) is hump-shaped: fitness crosses 1 at the resident's own effort (a mutant
    # like the resident neither grows nor shrinks: Metz, Nisbet & Geritz 1992) and at the other
    # effort of the same ratio, which scipy's brentq finds here.
    from scipy.optimize import brentq

    from analysis.comparison import threshold_lines
    from sim.config import parse_config

    config = parse_config(EFFORT_PAIR)

    def ratio(e):
        return 6.0 * math.sqrt(e) / (1.0 - 0.9 * (1.0 - e))

    other = brentq(lambda e: ratio(e) - ratio(0.3), 1e-9, 0.2)
    found = threshold(config, "allele.high.effort")
    assert found.bracket == (0.0, 1.0) and found.crossings == 2 and found.invades_above
    assert found.value == pytest.approx(other, abs=1e-8)
    (line,) = threshold_lines(config, [found])
    assert "invades above it; up to the next crossing: invasion fitness passes 1 at 2 values" in line
    near = threshold(config, "allele.high.effort", bracket=(0.1, 0.9))
    assert near.value == pytest.approx(0.3, abs=1e-8) and not near.invades_above and near.crossings == 1
    assert "next crossing" not in threshold_lines(config, [near])[0]


@pytest.mark.parametrize("path, share", [
    ("allele.high.effort", True), ("allele.high.juvenile_survival", True),
    ("allele.high.orphan_survival", True), ("tradeoff.max_adult_survival", True),
    ("mutation.rate", True), ("environment.year.lean.probability", True),
    ("tradeoff.max_fecundity", False), ("density.capacity", False), ("allele.high.fecundity", False),
    ("environment.year.lean.fecundity", False),
])
def test_which_paths_hold_a_share_comes_from_the_schema(path, share):
    from sim.config import is_probability_path

    assert is_probability_path(path) is share
