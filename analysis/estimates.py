"""Estimates from replicate outcomes: fixation fractions with intervals, and observed thresholds."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from scipy.optimize import isotonic_regression
from scipy.stats import norm

__all__ = [
    "FixationEstimate",
    "wilson_interval",
    "ObservedThreshold",
    "crossing",
    "observed_threshold",
]


@dataclass(frozen=True)
class FixationEstimate:
    """Observed fixation: ``fixed`` of ``n`` replicates, with a Wilson interval.

    Attributes
    ----------
    fixed, n : int
    fraction : float
        fixed / n.
    low, high : float
        Bounds of the interval at ``level``.
    level : float
    """

    fixed: int
    n: int
    fraction: float
    low: float
    high: float
    level: float = 0.95


def wilson_interval(fixed: int, n: int, *, level: float = 0.95) -> FixationEstimate:
    """Wilson score interval of a binomial proportion.

    Notes
    -----
    With z the two-sided normal quantile, p = x / n::

        centre = (p + z^2 / 2n) / (1 + z^2 / n)
        half   = z / (1 + z^2 / n) sqrt(p (1 - p) / n + z^2 / 4n^2)

    (Wilson 1927, JASA 22: 209; recommended over the Wald interval by Brown,
    Cai & DasGupta 2001, Stat. Sci. 16: 101.) Unlike the Wald interval it is
    not degenerate at 0 or n successes.
    """
    if n <= 0:
        return FixationEstimate(int(fixed), int(n), float("nan"), float("nan"), float("nan"), level)
    z = norm.ppf(0.5 + level / 2.0)
    p = fixed / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z / denom * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    # at 0 (or n) successes the bound is exactly 0 (or 1); rounding would leave 1e-18
    low = 0.0 if fixed == 0 else max(centre - half, 0.0)
    high = 1.0 if fixed == n else min(centre + half, 1.0)
    return FixationEstimate(int(fixed), int(n), float(p), float(low), float(high), level)


def crossing(x: np.ndarray, excess: np.ndarray) -> float:
    """Where a piecewise-linear curve through (x, excess) first crosses 0 upwards or downwards.

    ``x`` sorted ascending. Returns nan when ``excess`` keeps one sign
    (zeros count as the sign of the next non-zero value).
    """
    x = np.asarray(x, float)
    e = np.asarray(excess, float)
    for i in range(len(x) - 1):
        if e[i] == 0.0:
            if i == 0 or np.sign(e[i - 1]) != np.sign(e[i + 1]):
                return float(x[i]) if i > 0 else float("nan")
            continue
        if np.sign(e[i]) == -np.sign(e[i + 1]) and e[i + 1] != 0.0:
            return float(x[i] + (x[i + 1] - x[i]) * e[i] / (e[i] - e[i + 1]))
        if e[i + 1] == 0.0 and i + 2 < len(x) and np.sign(e[i]) == -np.sign(e[i + 2]):
            return float(x[i + 1])
    return float("nan")


@dataclass(frozen=True)
class ObservedThreshold:
    """Where observed fixation crosses the neutral expectation along one parameter.

    Attributes
    ----------
    parameter : str
    value : float
        The crossing of the observed fixation fractions (nan if none).
    low, high : float
        Bootstrap interval at ``level``; a bound is nan where more than
        (1 - level) / 2 of the bootstrap draws found no crossing (the
        interval reaches beyond the swept range on that side).
    found : float
        Share of bootstrap draws with a crossing inside the range.
    level : float
    message : str
        What was found, in words.
    """

    parameter: str
    value: float
    low: float
    high: float
    found: float
    level: float = 0.95
    message: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def observed_threshold(
    parameter: str,
    x,
    fixed,
    n,
    neutral,
    *,
    increasing: bool | None = None,
    level: float = 0.95,
    draws: int = 4000,
    seed: int = 0,
) -> ObservedThreshold:
    """The parameter value where observed fixation crosses the neutral expectation.

    Parameters
    ----------
    parameter : str
        The swept path (for the record).
    x : array
        Swept values, one per point (any order).
    fixed, n : arrays of int
        Mutant-fixed replicates and replicates at each point.
    neutral : array or float
        The neutral expectation at each point.
    increasing : bool, optional
        Whether fixation rises with x (the mutant invades above the
        threshold). By default the sign of the n-weighted least-squares slope.
    level : float, optional
        Coverage of the interval.
    draws : int, optional
        Bootstrap draws.
    seed : int, optional
        Seed of the bootstrap's generator (the result is reproducible).

    Notes
    -----
    Fixation probability is monotone in the parameter near a threshold, so
    the observed fractions are first made monotone by weighted isotonic
    regression (pool-adjacent-violators, scipy.optimize.isotonic_regression);
    the estimate is where the piecewise-linear curve through (x, fit -
    neutral) crosses 0. Its interval is a parametric bootstrap: each point's
    fixation probability is drawn from Beta(fixed + 1/2, n - fixed + 1/2)
    (the Jeffreys posterior, which keeps a point with no fixations
    uncertain, unlike resampling it), the fit and crossing are recomputed,
    and the interval is the central ``level`` range of the draws (percentile
    method; Efron & Tibshirani 1993, ch. 13). Draws that do not cross lie
    beyond the swept range; a bound among them is reported as nan (open).
    """
    x = np.asarray(x, float)
    if x.size == 0:
        nan = float("nan")
        return ObservedThreshold(parameter, nan, nan, nan, 0.0, level, "no replicates to estimate from")
    order = np.argsort(x, kind="stable")
    x = x[order]
    fixed = np.asarray(fixed, float)[order]
    n = np.asarray(n, float)[order]
    neutral = np.broadcast_to(np.asarray(neutral, float), x.shape)[order]
    if increasing is None:
        increasing = bool(np.cov(x, fixed / n, aweights=n)[0, 1] >= 0) if x.size > 1 else True

    def cross(p):
        fit = isotonic_regression(p, weights=n, increasing=increasing).x
        value = crossing(x, fit - neutral)
        if np.isfinite(value):
            return value
        # no crossing: it lies beyond the range, below it if the fit is above neutral and rising
        return -np.inf if (fit[0] >= neutral[0]) == increasing else np.inf

    value = cross(fixed / n)
    rng = np.random.default_rng(seed)
    boot = np.array(
        [cross(row) for row in rng.beta(fixed + 0.5, n - fixed + 0.5, size=(draws, x.size))]
    )
    tail = (1.0 - level) / 2.0
    low, high = np.quantile(boot, [tail, 1.0 - tail], method="inverted_cdf")

    def finite(v):
        return float(v) if np.isfinite(v) else float("nan")

    if np.isfinite(value):
        message = (
            f"observed fixation crosses the neutral expectation at {parameter} = {value:.4g} "
            f"({level:.0%} interval {_bound(low)} to {_bound(high)})"
        )
    else:
        side = "below" if value < 0 else "above"
        message = (
            f"observed fixation does not cross the neutral expectation in [{x[0]:g}, {x[-1]:g}]; "
            f"the crossing lies {side} the swept range"
        )
    return ObservedThreshold(
        parameter,
        finite(value),
        finite(low),
        finite(high),
        float(np.isfinite(boot).mean()),
        level,
        message,
    )


def _bound(v) -> str:
    return f"{v:.4g}" if np.isfinite(v) else "beyond the range"
