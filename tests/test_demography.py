"""Demography of a projection matrix against reference libraries and textbook formulas."""

import numpy as np
import pytest
import scipy.linalg

from analysis.demography import dominant_eigen, schedule_demography
from sim.density import Factors
from sim.meanfield import projection_matrix, stable_age_distribution
from sim.schedules import iteroparous, semelparous, table


def _random_tables(n, seed=3):
    rng = np.random.default_rng(seed)
    for _ in range(n):
        ages = int(rng.integers(1, 7))
        yield table("t", rng.uniform(0, 5, ages), rng.uniform(0, 0.95, ages), rng.uniform(0.05, 1))


@pytest.mark.parametrize("schedule", list(_random_tables(25)))
def test_growth_rate_and_eigenvectors_against_scipy(schedule):
    # Reference: scipy.linalg.eigvals / eig; lambda is the spectral radius (Perron-Frobenius).
    d = schedule_demography(schedule, Factors(0.8, 0.9, 0.7))
    a = projection_matrix(schedule, Factors(0.8, 0.9, 0.7))
    assert d.growth_rate == pytest.approx(np.max(np.abs(scipy.linalg.eigvals(a))), rel=1e-10)
    assert a @ d.stable_age_distribution == pytest.approx(
        d.growth_rate * d.stable_age_distribution, abs=1e-10
    )
    assert d.reproductive_values @ a == pytest.approx(
        d.growth_rate * d.reproductive_values, abs=1e-9
    )
    assert d.stable_age_distribution.sum() == pytest.approx(1.0)
    assert d.reproductive_values[0] == pytest.approx(1.0)


def _life_table(m, s, c):
    """l(a) and F(a) for a finite life (last survival 0): l(1) = 1, F(a) = m(a) c."""
    lt = np.concatenate([[1.0], np.cumprod(s[:-1])])
    return lt, np.asarray(m) * c


def test_r0_generation_time_and_euler_lotka_for_a_finite_life():
    m, s, c = np.array([0.0, 1.5, 3.0, 2.0]), np.array([0.6, 0.5, 0.4, 0.0]), 0.4
    d = schedule_demography(table("t", m, s, c))
    surv, f = _life_table(m, s, c)
    a = np.arange(1, 5)
    # Euler-Lotka (Lotka 1907; Caswell 2001 sec. 4.2): sum_a lambda^-a l(a) F(a) = 1
    assert np.sum(d.growth_rate**-a * surv * f) == pytest.approx(1.0, abs=1e-12)
    # Life-table R0 = sum_a l(a) m(a) (recruits per recruit; textbook)
    assert d.net_reproductive_number == pytest.approx(np.sum(surv * f), rel=1e-12)
    # Mean age of parents in the stable population, sum_a a lambda^-a l(a) F(a)
    # (Caswell 2001 sec. 5.3.5, from memory; Bienvenu & Legendre 2015)
    assert d.generation_time == pytest.approx(np.sum(a * d.growth_rate**-a * surv * f), rel=1e-10)
    # Stable age distribution proportional to lambda^-a l(a) (Caswell 2001 sec. 4.5)
    w = d.growth_rate**-a * surv
    assert d.stable_age_distribution == pytest.approx(w / w.sum(), rel=1e-10)
    # Reproductive value v(a) = lambda^a / l(a) sum_{j >= a} lambda^-j l(j) F(j) (Fisher 1930)
    v = np.array(
        [
            d.growth_rate**k / surv[k - 1] * np.sum((d.growth_rate**-a * surv * f)[k - 1 :])
            for k in a
        ]
    )
    assert d.reproductive_values == pytest.approx(v / v[0], rel=1e-9)


@pytest.mark.parametrize("maturity", [1, 2, 3, 5])
def test_semelparous_maturity_n_simple_case(maturity):
    # A single breeding age n: lambda^n = R0 and every parent is n years old, so the
    # generation time is n (textbook; also T = ln R0 / ln lambda, Caswell 2001 eq. for T).
    sched = semelparous("s", 20.0, 0.5, maturity_age=maturity, adult_survival=0.6)
    d = schedule_demography(sched)
    r0 = 0.6 ** (maturity - 1) * 20.0 * 0.5
    assert d.net_reproductive_number == pytest.approx(r0)
    assert d.growth_rate == pytest.approx(r0 ** (1 / maturity))
    assert d.generation_time == pytest.approx(maturity)
    assert np.log(d.net_reproductive_number) / np.log(d.growth_rate) == pytest.approx(maturity)


def test_stable_age_distribution_of_an_imprimitive_matrix():
    # Semelparous with maturity 3 is imprimitive: three eigenvalues share the modulus.
    # The stable distribution is still proportional to lambda^-a l(a) (Caswell 2001 sec. 4.5);
    # sim.meanfield must pick the real Perron root, not a complex one of equal modulus.
    sched = semelparous("s", 20.0, 0.5, maturity_age=3, adult_survival=0.6)
    lam = (0.36 * 10.0) ** (1 / 3)
    w = np.array([1.0, 0.6 / lam, 0.36 / lam**2])
    assert stable_age_distribution(sched) == pytest.approx(w / w.sum())
    assert schedule_demography(sched).stable_age_distribution == pytest.approx(w / w.sum())


@pytest.mark.parametrize("b, p, c", [(2.0, 0.5, 0.5), (1.0, 0.9, 0.2), (6.0, 0.1, 0.3)])
def test_iteroparous_plus_group(b, p, c):
    # lambda = P + B c (Charnov & Schaffer 1973); R0 = B c / (1 - P) (geometric series of
    # l(a) = P^(a-1)); generation time sum_a a lambda^-a P^(a-1) B c = lambda / (lambda - P).
    d = schedule_demography(iteroparous("i", b, p, c))
    lam = p + b * c
    assert d.growth_rate == pytest.approx(lam)
    assert d.net_reproductive_number == pytest.approx(b * c / (1 - p))
    assert d.generation_time == pytest.approx(lam / (lam - p))


def test_cole_case_has_infinite_r0():
    # c = P = 1: an immortal breeder has unbounded lifetime output (Cole 1954's setting).
    d = schedule_demography(iteroparous("i", 2.0, 1.0, 1.0))
    assert d.growth_rate == pytest.approx(3.0)
    assert d.net_reproductive_number == np.inf


def test_dominant_eigen_of_zero_matrix():
    lam, w, v = dominant_eigen(np.zeros((2, 2)))
    assert lam == 0.0
    assert np.all(np.isfinite(w)) and np.all(np.isfinite(v))
