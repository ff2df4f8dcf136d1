"""Brent's root finder for the mean-field equilibrium, without importing scipy.optimize.

``broodline run`` solves each sweep point's resident equilibrium before any
batch starts; importing ``scipy.optimize`` for that one call costs about half
a second of every run's start-up. ``brentq`` here follows Brent's method
(Brent 1973, *Algorithms for Minimization without Derivatives*, ch. 4) step
for step as scipy's C ``brentq`` takes it, so it returns the same floating-point
root for the same function and bracket (``tests/test_roots.py`` checks it
against ``scipy.optimize.brentq``); the starting census, and every replicate
drawn from it, is the one scipy's root gave.
"""

from __future__ import annotations

import math
from collections.abc import Callable

__all__ = ["brentq"]

_EPS = 2.220446049250313e-16  # float64 machine epsilon (numpy.finfo(float).eps)


def _divide(a: float, b: float) -> float:
    """a / b as IEEE 754 (and scipy's C code) has it: +-inf or nan where b is 0, not an error."""
    if b != 0:
        return a / b
    if a == 0 or math.isnan(a):
        return math.nan
    return math.copysign(math.inf, a) * math.copysign(1.0, b)


def brentq(f: Callable[[float], float], a: float, b: float, *, xtol: float = 2e-12,
           rtol: float = 4 * _EPS, maxiter: int = 100) -> float:
    """A root of ``f`` in [a, b], where f(a) and f(b) differ in sign.

    Stops when the bracket is narrower than ``xtol + rtol * |x|`` (scipy's
    criterion). Raises ValueError if f(a) and f(b) have the same sign, or if
    ``maxiter`` iterations do not converge.
    """
    if not (xtol > 0 and rtol >= 4 * _EPS and maxiter >= 0):
        raise ValueError(f"xtol must be > 0, rtol >= 4 eps and maxiter >= 0; got {xtol}, {rtol}, {maxiter}")
    xpre, xcur = float(a), float(b)
    fpre, fcur = float(f(xpre)), float(f(xcur))
    if fpre == 0:
        return xpre
    if fcur == 0:
        return xcur
    if math.copysign(1.0, fpre) == math.copysign(1.0, fcur):
        raise ValueError("f(a) and f(b) must have different signs")
    xblk = fblk = spre = scur = 0.0
    for _ in range(maxiter):
        if fpre != 0 and fcur != 0 and math.copysign(1.0, fpre) != math.copysign(1.0, fcur):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):  # keep the best estimate in xcur
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:  # secant (linear interpolation)
                stry = _divide(-fcur * (xcur - xpre), fcur - fpre)
            else:  # inverse quadratic extrapolation
                dpre = _divide(fpre - fcur, xpre - xcur)
                dblk = _divide(fblk - fcur, xblk - xcur)
                stry = _divide(-fcur * (fblk * dblk - fpre * dpre), dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry  # a good short step
            else:
                spre = scur = sbis  # bisect
        else:
            spre = scur = sbis  # bisect
        xpre, fpre = xcur, fcur
        xcur += scur if abs(scur) > delta else (delta if sbis > 0 else -delta)
        fcur = float(f(xcur))
    raise ValueError(f"no convergence in {maxiter} iterations (last estimate {xcur!r})")
