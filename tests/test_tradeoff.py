"""The trade-off between fecundity and adult survival, and the schedule of an effort allele."""

import numpy as np
import pytest

from sim.meanfield import growth_rate
from sim.schedules import iteroparous, semelparous
from sim.tradeoff import TradeOff

CURVE = TradeOff(max_fecundity=3.0, fecundity_shape=0.5, max_adult_survival=0.9, survival_shape=2.0)


def test_fecundity_and_survival_follow_the_curves():
    e = np.array([0.0, 0.25, 0.6, 1.0])
    np.testing.assert_allclose(CURVE.fecundity(e), 3.0 * np.sqrt(e))
    np.testing.assert_allclose(CURVE.adult_survival(e), 0.9 * (1 - e) ** 2)
    assert CURVE.fecundity(1.0) == 3.0 and CURVE.adult_survival(1.0) == 0.0


@pytest.mark.parametrize("order", [1, 2])
def test_derivatives_match_finite_differences(order):
    # reference: central differences of the curves themselves (numpy), away from the ends
    e = np.linspace(0.1, 0.9, 9)
    h = 1e-4
    if order == 1:
        fec = (CURVE.fecundity(e + h) - CURVE.fecundity(e - h)) / (2 * h)
        surv = (CURVE.adult_survival(e + h) - CURVE.adult_survival(e - h)) / (2 * h)
    else:
        fec = (CURVE.fecundity(e + h) - 2 * CURVE.fecundity(e) + CURVE.fecundity(e - h)) / h**2
        surv = (CURVE.adult_survival(e + h) - 2 * CURVE.adult_survival(e) + CURVE.adult_survival(e - h)) / h**2
    # truncation error of the differences is O(h^2 B''') ~ 1e-7 here; rounding ~ eps / h^order
    np.testing.assert_allclose(CURVE.fecundity_derivative(e, order), fec, rtol=1e-5)
    np.testing.assert_allclose(CURVE.adult_survival_derivative(e, order), surv, rtol=1e-5, atol=1e-6)


def test_infinite_slope_at_the_end_of_a_concave_curve():
    assert CURVE.fecundity_derivative(0.0) == np.inf
    assert CURVE.fecundity_derivative(0.0, 2) == -np.inf
    linear = TradeOff(2.0, 1.0, 0.5, 1.0)
    assert linear.fecundity_derivative(0.0, 2) == 0.0 and linear.adult_survival_derivative(1.0) == -0.5


def test_effort_below_one_is_the_iteroparous_schedule():
    s = CURVE.schedule(0.36, 0.4, name="e36")
    ref = iteroparous("e36", 3.0 * 0.6, 0.9 * 0.64**2, 0.4)
    np.testing.assert_allclose(s.fecundity, ref.fecundity)
    np.testing.assert_allclose(s.survival, ref.survival)
    # maturity 1: lambda = P + c B (Charnov & Schaffer 1973)
    assert growth_rate(s) == pytest.approx(0.9 * 0.64**2 + 0.4 * 1.8, rel=1e-12)


@pytest.mark.parametrize("maturity_age", [1, 3])
def test_full_effort_is_semelparous(maturity_age):
    s = CURVE.schedule(1.0, 0.4, maturity_age=maturity_age, name="once")
    ref = semelparous("once", 3.0, 0.4, maturity_age=maturity_age, adult_survival=0.9)
    np.testing.assert_array_equal(s.fecundity, ref.fecundity)
    np.testing.assert_array_equal(s.survival, ref.survival)


def test_years_before_maturity_pay_no_cost():
    s = CURVE.schedule(0.5, 0.4, maturity_age=3)
    np.testing.assert_allclose(s.fecundity, [0, 0, 3.0 * np.sqrt(0.5)])
    np.testing.assert_allclose(s.survival, [0.9, 0.9, 0.9 * 0.25])


def _tradeoff_config(**tradeoff):
    """A config whose [tradeoff] has these keys (the schema states the curve's ranges)."""
    from sim.config import parse_config

    curve = {"max_fecundity": 3.0, "max_adult_survival": 0.9, **tradeoff}
    return parse_config({"tradeoff": curve, "allele": [
        {"name": "e", "breeding": "effort", "effort": 0.5, "juvenile_survival": 0.5, "initial_count": 5}]})


@pytest.mark.parametrize(
    "build, match",
    [
        (lambda: _tradeoff_config(max_fecundity=-1.0), r"tradeoff\.max_fecundity must be >= 0; got -1"),
        (lambda: _tradeoff_config(fecundity_shape=0.0), r"tradeoff\.fecundity_shape must be > 0.*; got 0"),
        (lambda: _tradeoff_config(max_adult_survival=1.2),
         r"tradeoff\.max_adult_survival must be in \[0, 1\]; got 1\.2"),
        (lambda: _tradeoff_config(survival_shape=-2), r"tradeoff\.survival_shape must be > 0.*; got -2"),
        (lambda: CURVE.fecundity([0.2, 1.5]), r"effort must be in \[0, 1\]; got 1\.5"),
        (lambda: CURVE.schedule(0.5, 1.5), r"juvenile_survival must be in \[0, 1\]; got 1\.5"),
        (lambda: CURVE.schedule(0.5, 0.5, maturity_age=0), r"maturity_age must be an integer >= 1; got 0"),
    ],
)
def test_bad_input_names_the_key(build, match):
    with pytest.raises(ValueError, match=match):
        build()
