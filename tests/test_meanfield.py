"""The mean-field life cycle against published growth rates and equilibria."""

import numpy as np
import pytest
import scipy.linalg

from sim.density import DensityDependence, Factors
from sim.meanfield import (
    NoEquilibriumError,
    growth_rate,
    mean_field_step,
    projection_matrix,
    solve_equilibrium,
    stable_age_distribution,
)
from sim.schedules import iteroparous, semelparous, stack_schedules, table


@pytest.mark.parametrize("b, c", [(4.5, 0.5), (2.0, 0.9), (10.0, 0.05)])
def test_semelparous_growth_rate_is_b_times_c(b, c):
    # Charnov & Schaffer (1973): an annual (semelparous, maturity 1) grows by lambda = B_s c.
    assert growth_rate(semelparous("s", b, c)) == pytest.approx(b * c, rel=1e-12)


@pytest.mark.parametrize("b, p, c", [(2.0, 0.5, 0.5), (1.0, 0.9, 0.2), (3.0, 0.1, 0.7)])
def test_iteroparous_growth_rate_is_p_plus_b_c(b, p, c):
    # Charnov & Schaffer (1973): a perennial breeding from age 1 grows by lambda = P + B_i c.
    assert growth_rate(iteroparous("i", b, p, c)) == pytest.approx(p + b * c, rel=1e-12)


def test_cole_limit():
    # Cole (1954): with c = P = 1 a perennial of litter B grows by B + 1, so an annual
    # needs B + 1 offspring to match it.
    b = 3.0
    assert growth_rate(iteroparous("i", b, 1.0, 1.0)) == pytest.approx(growth_rate(semelparous("s", b + 1, 1.0)))


def test_iteroparous_maturity_delay_matches_characteristic_equation():
    # Euler-Lotka for a perennial maturing at age k (Charnov & Schaffer 1973 generalised,
    # Roff 1992): 1 = sum_{a>=k} B c P^(a-1) lambda^(-a), i.e. lambda^k - P lambda^(k-1) = B c P^(k-1).
    b, p, c, k = 2.0, 0.6, 0.4, 3
    lam = growth_rate(iteroparous("i", b, p, c, maturity_age=k))
    assert lam**k - p * lam ** (k - 1) == pytest.approx(b * c * p ** (k - 1), rel=1e-10)


def test_table_schedule_eigenvalue_matches_scipy():
    # Reference: scipy.linalg.eigvals on a pre-breeding Leslie matrix built here by hand
    # (Caswell 2001, ch. 2): first row m(a) c, sub-diagonal s(a), plus-group s(last).
    m, s, c = [0.0, 1.5, 3.0, 2.0], [0.6, 0.5, 0.4, 0.3], 0.4
    leslie = np.array([
        [0.0, 1.5 * c, 3.0 * c, 2.0 * c],
        [0.6, 0, 0, 0],
        [0, 0.5, 0, 0],
        [0, 0, 0.4, 0.3],
    ])
    expected = max(abs(scipy.linalg.eigvals(leslie)))
    schedule = table("t", m, s, c)
    np.testing.assert_allclose(projection_matrix(schedule), leslie)
    assert growth_rate(schedule) == pytest.approx(expected, rel=1e-12)
    u = stable_age_distribution(schedule)
    np.testing.assert_allclose(leslie @ u, expected * u, rtol=1e-10)


def test_factors_enter_where_placed():
    schedule = iteroparous("i", 2.0, 0.5, 0.5)
    # lambda = P f_adult + B f_fec c f_rec, from the matrix definition (README, "The model").
    assert growth_rate(schedule, Factors(0.5, 0.8, 0.3)) == pytest.approx(0.5 * 0.8 + 2 * 0.5 * 0.5 * 0.3)


def test_beverton_holt_recruitment_equilibrium():
    # Derived from the model: at equilibrium 1 = P + B c / (1 + N/K), so
    # N* = K (B c / (1 - P) - 1). (Beverton-Holt recruitment, census-counted.)
    b, p, c, k = 2.0, 0.5, 0.5, 100.0
    eq = solve_equilibrium(iteroparous("i", b, p, c), DensityDependence.from_names("beverton-holt", k))
    assert eq.census_size == pytest.approx(k * (b * c / (1 - p) - 1), rel=1e-9)
    b = 3.0
    eq = solve_equilibrium(iteroparous("i", b, p, c), DensityDependence.from_names("beverton-holt", k))
    assert eq.census_size == pytest.approx(k * (b * c / (1 - p) - 1), rel=1e-9)


def test_ricker_recruitment_equilibrium():
    # Derived from the model: 1 = P + B c exp(-N/K)  =>  N* = K ln(B c / (1 - P)).
    b, p, c, k = 3.0, 0.4, 0.5, 80.0
    eq = solve_equilibrium(iteroparous("i", b, p, c), DensityDependence.from_names("ricker", k))
    assert eq.census_size == pytest.approx(k * np.log(b * c / (1 - p)), rel=1e-9)


def test_all_survival_equilibrium_factor():
    # Derived from the model: f (P + B c) = 1 at equilibrium with density dependence on all
    # survival; Beverton-Holt then gives N* = K (P + B c - 1).
    b, p, c, k = 2.0, 0.5, 0.5, 100.0
    eq = solve_equilibrium(iteroparous("i", b, p, c),
                           DensityDependence.from_names("beverton-holt", k, "all-survival"))
    assert eq.factors.adult == pytest.approx(1 / (p + b * c))
    assert eq.census_size == pytest.approx(k * (p + b * c - 1))


@pytest.mark.parametrize("form, acts_on, counted", [
    ("beverton-holt", "recruitment", "census"),
    ("beverton-holt", "fecundity", "breeders"),
    ("ricker", "adult-survival", "census"),
    ("ricker", "all-survival", "offspring"),
    ("beverton-holt", "recruitment", "offspring"),
    ("ceiling", "all-survival", "census"),
    ("ceiling", "recruitment", "census"),
])
def test_equilibrium_is_a_fixed_point_of_the_season_map(form, acts_on, counted):
    # Consistency: the root-found equilibrium is a fixed point of one mean-field season.
    schedule = table("t", [0.0, 2.0, 4.0], [0.5, 0.4, 0.2], 0.6)
    density = DensityDependence.from_names(form, 200.0, acts_on, counted)
    eq = solve_equilibrium(schedule, density)
    M, S, C = stack_schedules([schedule])
    nxt = mean_field_step(eq.census[None, :], M, S, C, density)
    np.testing.assert_allclose(nxt[0], eq.census, rtol=1e-7)


def test_no_equilibrium_is_reported():
    declining = iteroparous("i", 0.5, 0.5, 0.5)  # lambda = 0.75
    with pytest.raises(NoEquilibriumError, match="growth rate at low density is 0.75"):
        solve_equilibrium(declining, DensityDependence.from_names("beverton-holt", 100))
    with pytest.raises(NoEquilibriumError, match="no density dependence"):
        solve_equilibrium(iteroparous("i", 2, 0.5, 0.5), DensityDependence.from_names("none"))
