"""Wilson intervals and the observed-threshold estimate."""

import math

import numpy as np
import pytest
from scipy.stats import norm

from analysis.estimates import crossing, observed_threshold, wilson_interval


@pytest.mark.parametrize("x, n", [(0, 10), (3, 10), (10, 10), (1, 200), (87, 200), (500, 1000)])
def test_wilson_bounds_solve_the_score_equation(x, n):
    # Wilson (1927): the bounds are the p with (x/n - p)^2 = z^2 p (1 - p) / n (inverting the
    # score test), clipped to [0, 1].
    est = wilson_interval(x, n)
    z = norm.ppf(0.975)
    for p in (est.low, est.high):
        if 0.0 < p < 1.0 and not (x == 0 and p == est.low) and not (x == n and p == est.high):
            assert (x / n - p) ** 2 == pytest.approx(z * z * p * (1 - p) / n, rel=1e-9)
    assert est.low <= x / n <= est.high
    assert est.fraction == x / n


def test_wilson_known_values():
    # 0 of 100: upper bound z^2 / (n + z^2) = 0.0370 (closed form at x = 0 of the score
    # interval; Brown, Cai & DasGupta 2001).
    z2 = norm.ppf(0.975) ** 2
    assert wilson_interval(0, 100).high == pytest.approx(z2 / (100 + z2))
    assert wilson_interval(0, 100).low == 0.0 and wilson_interval(100, 100).high == 1.0
    assert math.isnan(wilson_interval(0, 0).fraction)


def test_wilson_coverage():
    # Coverage near the nominal 95% (Brown, Cai & DasGupta 2001, fig. 4: Wilson stays within a
    # point or so of 0.95 for n = 200). 20000 draws: the coverage estimate has standard error
    # 0.0015, so [0.93, 0.97] allows the interval's own departure plus >8 standard errors.
    rng = np.random.default_rng(11)
    n, p = 200, 0.3
    xs = rng.binomial(n, p, 20000)
    lows, highs = zip(
        *[(e.low, e.high) for e in (wilson_interval(int(x), n) for x in np.unique(xs))]
    )
    table = dict(zip(np.unique(xs), zip(lows, highs)))
    covered = np.mean([table[x][0] <= p <= table[x][1] for x in xs])
    assert 0.93 <= covered <= 0.97


def test_crossing_interpolates_linearly():
    assert crossing([1, 2, 3], [-1.0, -0.5, 0.5]) == pytest.approx(2.5)
    assert crossing([1, 2, 3], [1.0, 0.5, -0.5]) == pytest.approx(2.5)
    assert crossing([1, 2, 3], [-1.0, 0.0, 1.0]) == pytest.approx(2.0)
    assert math.isnan(crossing([1, 2, 3], [0.1, 0.2, 0.3]))


def test_observed_threshold_recovers_a_known_crossing():
    # Synthetic fixation curve p(x) = 0.4 / (1 + exp(-4 (x - 4))) crossing the neutral
    # expectation 0.2 at exactly x = 4; with 20000 replicates per point the estimate must be
    # close, and the bootstrap interval must cover 4.
    rng = np.random.default_rng(5)
    x = np.array([3.0, 3.5, 4.0, 4.5, 5.0])
    p = 0.4 / (1 + np.exp(-4 * (x - 4)))
    n = np.full(x.size, 20000)
    fixed = rng.binomial(n, p)
    res = observed_threshold("b", x, fixed, n, 0.2)
    assert res.value == pytest.approx(4.0, abs=0.05)
    assert res.low < 4.0 < res.high
    assert res.high - res.low < 0.2
    assert res.found == 1.0


def test_observed_threshold_open_and_missing():
    # Every point well above the neutral line: no crossing in range; it lies below the range.
    res = observed_threshold("b", [1, 2, 3], [50, 60, 70], [100, 100, 100], 0.01, increasing=True)
    assert math.isnan(res.value) and math.isnan(res.low) and math.isnan(res.high)
    assert "below the swept range" in res.message
    # A decreasing relation is found too (e.g. a resident parameter).
    res = observed_threshold("p", [0.1, 0.3, 0.5, 0.7], [300, 200, 5, 0], [1000] * 4, 0.05)
    assert 0.3 < res.value < 0.5


def test_observed_threshold_is_reproducible():
    args = ("b", [1, 2, 3], [0, 3, 30], [100, 100, 100], 0.02)
    assert repr(observed_threshold(*args, seed=4)) == repr(observed_threshold(*args, seed=4))


def test_observed_threshold_without_points():
    res = observed_threshold("b", [], [], [], 0.1)
    assert math.isnan(res.value) and res.message == "no replicates to estimate from"
