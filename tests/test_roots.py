"""``sim.roots.brentq`` against scipy.optimize.brentq (the reference library): the same root,
to the last bit, for the same function and bracket, so that the equilibrium census (and
every replicate drawn from it) is what scipy's root gave."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq as scipy_brentq

from sim.roots import brentq

CASES = [
    (lambda x: x * x - 2.0, 0.0, 2.0),
    (lambda x: math.cos(x) - x, 0.0, 1.0),
    (lambda x: x ** 3 - 2 * x - 5, 2.0, 3.0),  # Wallis's cubic, the classic test of root finders
    (lambda x: math.exp(x) - 1e3, 0.0, 20.0),
    (lambda x: 1.0 / (1.0 + x) - 0.25, 0.0, 1e6),  # a Beverton-Holt factor = 1/4: root at 3
    (lambda x: math.tanh(50 * (x - 0.3)), -1.0, 1.0),  # steep
    (lambda x: (x - 0.7) ** 3, 0.0, 1.0),  # triple root: slow convergence
    (lambda x: 2.0 * math.exp(-x / 300.0) * 0.5 + 0.5 - 1.0, 0.0, 1e4),  # Ricker-like
]


@pytest.mark.parametrize("f, a, b", CASES)
@pytest.mark.parametrize("xtol, rtol", [(2e-12, 4 * np.finfo(float).eps), (1e-12, 1e-12), (1e-14, 1e-12)])
def test_same_root_as_scipy(f, a, b, xtol, rtol):
    assert brentq(f, a, b, xtol=xtol, rtol=rtol, maxiter=500) == scipy_brentq(
        f, a, b, xtol=xtol, rtol=rtol, maxiter=500)


def test_random_polynomials_same_root_as_scipy():
    rng = np.random.default_rng(7)
    for _ in range(200):
        coefs = rng.normal(size=4)
        f = np.poly1d(coefs)
        a, b = -3.0, 3.0
        if np.sign(f(a)) == np.sign(f(b)):
            continue
        assert brentq(f, a, b) == scipy_brentq(f, a, b)


def test_endpoint_root_and_refusals():
    assert brentq(lambda x: x - 1.0, 1.0, 2.0) == 1.0
    with pytest.raises(ValueError, match="different signs"):
        brentq(lambda x: x * x + 1.0, -1.0, 1.0)
    with pytest.raises(ValueError, match="no convergence"):
        brentq(lambda x: (x - 0.7) ** 3, 0.0, 1.0, maxiter=3)


def test_flat_steps_divide_as_ieee_not_an_error():
    # a bracket so wide that f is flat to double precision near one end: the interpolation
    # divides by zero, which C (and scipy) turn into inf/nan and a bisection step
    def f(x):
        return 1.0 / (1.0 + x / 1e300) - 0.5

    assert brentq(f, 0.0, 1e308) == scipy_brentq(f, 0.0, 1e308)
    flat = lambda x: 1.0 if x < 0.5 else -1.0  # noqa: E731 (a step: f(xcur) == f(xpre) often)
    assert brentq(flat, 0.0, 1.0) == scipy_brentq(flat, 0.0, 1.0)
