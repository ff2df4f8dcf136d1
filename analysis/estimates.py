"""Estimates from replicate outcomes: fixation fractions with intervals, and observed thresholds.

The observed threshold is where a binomial GLM fitted to every point of a
sweep line crosses the neutral expectation; its interval is the profile
likelihood interval of that crossing (the curve's uncertainty included).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from scipy import special
from scipy.stats import chi2, norm

__all__ = [
    "FixationEstimate",
    "wilson_interval",
    "round_to_interval",
    "ObservedThreshold",
    "LINKS",
    "fit_binomial_glm",
    "profile_crossings",
    "observed_threshold",
    "suggest_points",
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


@dataclass(frozen=True)
class _Link:
    """A binomial GLM link: eta = g(p); F(eta), its complement 1 - F, and F'(eta) / F(eta).

    The complement and the ratio are written so that they stay exact where F is
    within rounding of 0 or 1 (a steep curve near separation).
    """

    name: str
    link: object
    inverse: object
    complement: object
    ratio: object


def _cloglog_ratio(eta):
    e = np.exp(eta)
    return np.exp(eta - e) / -np.expm1(-e)


LINKS = {
    "logit": _Link("logit", special.logit, special.expit, lambda eta: special.expit(-eta),
                   lambda eta: special.expit(-eta)),
    "cloglog": _Link("cloglog", lambda p: np.log(-np.log1p(-p)), lambda eta: -np.expm1(-np.exp(eta)),
                     lambda eta: np.exp(-np.exp(eta)), _cloglog_ratio),
}
_ETA = 600.0  # |eta| is kept below this (exp stays finite); nothing is lost below it
_P_EDGE = 1e-12
_TINY = 1e-300


def _probabilities(eta, fx, top):
    """p = top F(eta) and 1 - p, each computed without cancellation."""
    eta = np.clip(eta, -_ETA, _ETA)
    return top * fx.inverse(eta), (1.0 - top) + top * fx.complement(eta)


def _loglik(fixed, n, eta, fx, top=1.0):
    p, q = _probabilities(eta, fx, top)
    return (fixed * np.log(np.maximum(p, _TINY)) + (n - fixed) * np.log(np.maximum(q, _TINY))).sum(axis=-1)


def _score_step(fixed, n, eta, fx, top):
    """Per observation: the score factor and expected information of eta, for p = top F(eta).

    With dp/deta = top F'(eta), the score of a coefficient whose column is z
    is sum (y - n p) (dp/deta) / (p (1 - p)) z and its information
    sum n (dp/deta)^2 / (p (1 - p)) z^2 (McCullagh & Nelder 1989, sec. 2.5);
    (dp/deta) / (p (1 - p)) = (F'/F) / (1 - p).
    """
    eta = np.clip(eta, -_ETA, _ETA)
    p, q = _probabilities(eta, fx, top)
    r = fx.ratio(eta) / np.maximum(q, _TINY)
    return (fixed - n * p) * r, n * p * r * fx.ratio(eta)


def _target(fx, p0, top):
    """g(p0 / top): the eta at which top F(eta) equals p0 (nan where p0 >= top)."""
    r = p0 / top
    return np.where(r < 1.0, fx.link(np.clip(r, _P_EDGE, 1 - _P_EDGE)), np.nan)


def fit_binomial_glm(x, fixed, n, *, link: str = "logit", top=1.0, iterations: int = 60):
    """Maximum-likelihood binomial GLM p = top F(a + b x) for many experiments at once.

    Parameters
    ----------
    x : array, shape (k,)
        Covariate values (shared by the experiments).
    fixed, n : arrays, shape (E, k) or (k,)
        Successes and trials.
    link : {"logit", "cloglog"}
    top : float or array, shape (E, 1)
        The curve's upper asymptote, held fixed (1: the plain GLM).
    iterations : int
        Fisher-scoring steps (Newton with the expected information).

    Returns
    -------
    a, b, loglik : arrays, shape (E,)
    """
    fx = LINKS[link]
    x = np.asarray(x, float)
    fixed = np.atleast_2d(np.asarray(fixed, float))
    n = np.atleast_2d(np.asarray(n, float))
    top = np.broadcast_to(np.asarray(top, float), (fixed.shape[0], 1))
    # start: weighted least squares on the empirical link of (y + 1/2) / (n + 1)
    emp = fx.link(np.clip((fixed + 0.5) / (n + 1.0) / top, _P_EDGE, 1 - 1e-3))
    xm = (n * x).sum(1) / n.sum(1)
    sxx = np.maximum((n * (x - xm[:, None]) ** 2).sum(1), 1e-300)
    b = (n * (x - xm[:, None]) * emp).sum(1) / sxx
    a = (n * emp).sum(1) / n.sum(1) - b * xm
    for _ in range(iterations):
        eta = a[:, None] + b[:, None] * x
        u, w = _score_step(fixed, n, eta, fx, top)
        s0, s1 = u.sum(1), (u * x).sum(1)
        i00, i01, i11 = w.sum(1), (w * x).sum(1), (w * x * x).sum(1)
        det = i00 * i11 - i01 * i01
        ok = det > 1e-300
        safe = np.where(ok, det, 1.0)
        a = a + np.where(ok, (i11 * s0 - i01 * s1) / safe, 0.0)
        b = b + np.where(ok, (i00 * s1 - i01 * s0) / safe, 0.0)
    return a, b, _loglik(fixed, n, a[:, None] + b[:, None] * x, fx, top)


@dataclass(frozen=True)
class Crossings:
    """Crossings of fitted curves with a target curve, many experiments at once (arrays (E,)).

    ``value`` is nan where the fit does not cross inside the range; ``side``
    then says where it lies (-1 below the range, +1 above, 0 at no side: a
    flat or wrongly signed fit). ``low`` / ``high`` are the profile-likelihood
    bounds, nan where the accepted region reaches the range's end (open);
    both are nan when ``empty`` (no value in the range is accepted).
    ``top`` is the fitted upper asymptote and ``dispersion`` the factor the
    interval was widened by (1 when the curve fits).
    """

    value: np.ndarray
    side: np.ndarray
    low: np.ndarray
    high: np.ndarray
    slope: np.ndarray
    top: np.ndarray
    dispersion: np.ndarray
    empty: np.ndarray


def _profile_loglik(xstar, x, fixed, n, neutral, sign, fx, top, steps):
    """Maximised log-likelihood with the curve held to cross ``neutral`` at ``xstar``.

    Rows are (experiment, asymptote) pairs: eta_i = g(p0(x*) / top) + sign beta (x_i - x*),
    beta >= 0. The log-likelihood is concave in beta, so its maximum is where the score
    changes sign: found by bisection on log beta over [1e-8, 1e6] / range (robust where the
    points nearly separate and the best slope is very steep, where Newton steps stall).
    -inf where p0 >= top.
    """
    target = _target(fx, np.interp(xstar, x, neutral)[:, None], top)[:, 0]
    ok = np.isfinite(target)
    target = np.where(ok, target, 0.0)
    dx = sign * (x[None, :] - xstar[:, None])
    span = max(x[-1] - x[0], 1e-300)

    def score(beta):
        u, _ = _score_step(fixed, n, target[:, None] + beta[:, None] * dx, fx, top)
        return (u * dx).sum(-1)

    lo = np.full(target.shape, np.log(1e-8 / span))
    hi = np.full(target.shape, np.log(1e6 / span))
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        rising = score(np.exp(mid)) > 0
        lo, hi = np.where(rising, mid, lo), np.where(rising, hi, mid)
    beta = np.exp(0.5 * (lo + hi))
    beta = np.where(score(np.zeros_like(beta)) <= 0, 0.0, beta)  # flat is best
    return np.where(ok, _loglik(fixed, n, target[:, None] + beta[:, None] * dx, fx, top), -np.inf)


def profile_crossings(
    x,
    fixed,
    n,
    neutral,
    *,
    increasing: bool,
    link: str = "logit",
    level: float = 0.95,
    tops: int = 8,
    iterations: int = 36,
    bisections: int = 26,
) -> Crossings:
    """Where p = top F(a + b x) crosses ``neutral``, with its profile-likelihood interval.

    Parameters
    ----------
    x : array, shape (k,)
        Sorted covariate values; the crossing and its bounds are sought
        within [x[0], x[-1]].
    fixed, n : arrays, shape (E, k) or (k,)
    neutral : array, shape (k,)
        The target probability at each x (interpolated linearly between).
    increasing : bool
        The sign the slope b is held to (the direction the theory gives).
    link : {"logit", "cloglog"}
    level : float
        Coverage.
    tops : int
        Values of the upper asymptote profiled over (1: the plain GLM with
        top = 1).
    iterations, bisections : int
        Bisection steps on log slope per profile point; bisection steps per bound.

    Notes
    -----
    Fixation probability saturates at the establishment probability, not at
    1, so the curve has an upper asymptote ``top`` (a third coefficient,
    profiled over a grid from the highest observed fraction to 1; ``tops = 1``
    fixes it at 1). At a candidate crossing x*, the constraint
    top F(a + b x*) = p0(x*) fixes a; the log-likelihood maximised over b and
    top, l(x*), gives the profile deviance D(x*) = 2 (l_max - l(x*)), and
    the interval is {x*: D(x*) <= chi2_1(level) phi} (Venzon & Moolgavkar
    1988; McCullagh & Nelder 1989, sec. 7.2), each bound found by bisection
    between the estimate and the range's end. phi is 1 unless the fit fails
    Pearson's goodness-of-fit test at 5% (k - p degrees of freedom, p the
    coefficients); then phi = X^2 / (k - p), the quasi-likelihood dispersion
    (McCullagh & Nelder 1989, sec. 4.5), which widens the interval by the
    curve's lack of fit.
    """
    fx = LINKS[link]
    x = np.asarray(x, float)
    fixed = np.atleast_2d(np.asarray(fixed, float))
    n = np.atleast_2d(np.asarray(n, float))
    neutral = np.asarray(neutral, float)
    E, k = fixed.shape
    sign = 1.0 if increasing else -1.0
    # rows: experiment x asymptote; asymptotes from just above the highest observed fraction to 1
    if tops > 1:
        highest = np.clip((fixed / n).max(1), 0.0, 1.0)
        t = np.linspace(0.0, 1.0, tops) ** 2
        top = highest[:, None] + (1.0 - highest[:, None]) * (0.02 + 0.98 * t)[None, :]
    else:
        top = np.ones((E, 1))
    U = top.shape[1]
    top = top.reshape(-1, 1)
    fr, nr = np.repeat(fixed, U, axis=0), np.repeat(n, U, axis=0)
    a, b, ll = fit_binomial_glm(x, fr, nr, link=link, top=top)
    ll = np.where(sign * b >= 0, ll, -np.inf).reshape(E, U)  # the theory's direction only
    best = np.argmax(ll, axis=1)
    pick = np.arange(E) * U + best
    a_hat, b_hat, top_hat = a[pick], b[pick], top[pick, 0]
    flat = ~np.isfinite(ll.max(1)) | (sign * b_hat <= 0)

    def h(xs):  # the best fit's eta minus the target, oriented to rise with x
        t = _target(fx, np.interp(xs, x, neutral), top_hat)
        return np.where(np.isfinite(t), sign * (a_hat + b_hat * xs - t), -np.inf)

    lo_end, hi_end = np.full(E, x[0]), np.full(E, x[-1])
    below_all, above_all = ~flat & (h(lo_end) >= 0), ~flat & (h(hi_end) < 0)
    found = ~flat & ~below_all & ~above_all
    lo, hi = lo_end.copy(), hi_end.copy()
    for _ in range(bisections + 10):
        mid = 0.5 * (lo + hi)
        up = h(mid) >= 0
        hi, lo = np.where(up, mid, hi), np.where(up, lo, mid)
    value = np.where(found, 0.5 * (lo + hi), np.nan)

    def profile(xs, steps=iterations):
        rows = _profile_loglik(np.repeat(xs, U), x, fr, nr, neutral, sign, fx, top, steps)
        return rows.reshape(E, U).max(1)

    start = np.where(found, value, np.where(below_all, lo_end, hi_end))
    ll_max = np.maximum(np.where(flat, -np.inf, ll.max(1)), profile(start, 2 * iterations))
    # goodness of fit: Pearson X^2 of the best fit
    coefs = 2 + (U > 1)
    p_hat, q_hat = _probabilities(a_hat[:, None] + b_hat[:, None] * x, fx, top_hat[:, None])
    p_hat = np.clip(p_hat, _P_EDGE, 1 - _P_EDGE)
    pearson = ((fixed - n * p_hat) ** 2 / (n * p_hat * (1 - p_hat))).sum(1)
    dispersion = np.ones(E)
    if k > coefs:
        dispersion = np.where(pearson > chi2.ppf(0.95, k - coefs), pearson / (k - coefs), 1.0)
    crit = chi2.ppf(level, 1) * dispersion

    def accepted(xs):
        return 2.0 * (ll_max - profile(xs)) <= crit

    inside = accepted(start)

    def bound(end):
        # bisect between the accepted start and `end`; open (nan) when `end` is accepted too
        open_end = accepted(end)
        near, far = start.copy(), end.copy()
        for _ in range(bisections):
            mid = 0.5 * (near + far)
            ok = accepted(mid)
            near, far = np.where(ok, mid, near), np.where(ok, far, mid)
        return np.where(open_end | ~inside, np.nan, 0.5 * (near + far))

    low, high = bound(lo_end), bound(hi_end)
    side = np.where(flat, 0, np.where(below_all, -1, np.where(above_all, 1, 0)))
    return Crossings(value, side, low, high, b_hat, top_hat, dispersion, ~inside)


@dataclass(frozen=True)
class ObservedThreshold:
    """Where observed fixation crosses the neutral expectation along one parameter.

    Attributes
    ----------
    parameter : str
    value : float
        The crossing of the fitted dose-response curve (nan if none in the range).
    low, high : float
        Profile-likelihood interval at ``level``; a bound is nan where the
        interval reaches beyond the swept range on that side (open).
    level : float
    link : str
        The GLM link of the fitted curve.
    dispersion : float
        1 when the curve fits the points; else the Pearson X^2 / (k - 2) the
        interval was widened by.
    neighbours : tuple of float
        The sweep values on either side of the crossing (empty if none).
    add_points : tuple of float
        Values to add to the sweep where the points near the crossing are too
        far apart for the interval's precision (empty if none are needed).
    message : str
        What was found, in words.
    """

    parameter: str
    value: float
    low: float
    high: float
    level: float = 0.95
    link: str = "logit"
    dispersion: float = 1.0
    neighbours: tuple = ()
    add_points: tuple = ()
    message: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def suggest_points(low: float, high: float, count: int) -> tuple:
    """``count`` evenly spaced values strictly between ``low`` and ``high``, sensibly rounded."""
    values = np.linspace(low, high, count + 2)[1:-1]
    step = (high - low) / (count + 1)
    digits = max(0, int(-np.floor(np.log10(step))) + 1) if step > 0 else 3
    return tuple(float(round(v, digits)) for v in values)


def _isotonic(y, w):
    """Weighted least-squares non-decreasing fit of ``y`` (pool adjacent violators)."""
    blocks = []  # [mean, weight, size]
    for v, wt in zip(y, w):
        blocks.append([v, wt, 1])
        while len(blocks) > 1 and blocks[-2][0] > blocks[-1][0]:
            (m2, w2, s2), (m1, w1, s1) = blocks.pop(), blocks.pop()
            wsum = w1 + w2
            blocks.append([(m1 * w1 + m2 * w2) / wsum if wsum else (m1 + m2) / 2, wsum, s1 + s2])
    return np.concatenate([np.full(s, m) for m, _, s in blocks])


def _near_the_crossing(x, fixed, n, neutral, increasing, *, each_side: int = 2):
    """The sweep points nearest the crossing: ``each_side`` on either side of where the
    monotone (isotonic) fit of the observed fractions passes the neutral expectation.

    A fixation curve is not one logistic over a wide range: it sits near zero
    below the threshold and rises like the establishment probability above it
    (a kink the fitted shape cannot follow, which pulls a fit over every point
    off the crossing). Near the crossing the shape holds, so the curve is fitted
    there. All points are kept when the fit does not cross inside the range.
    """
    sign = 1.0 if increasing else -1.0
    share = np.divide(fixed, n, out=np.zeros_like(fixed), where=n > 0)
    monotone = sign * _isotonic(sign * share, n)
    above = sign * (monotone - neutral) > 0
    if above.all() or not above.any():
        return x, fixed, n, neutral
    j = int(np.argmax(above))  # the first point past the crossing
    keep = slice(max(0, j - each_side), min(x.size, j + each_side))
    if x[keep].size < 3:
        return x, fixed, n, neutral
    return x[keep], fixed[keep], n[keep], neutral[keep]


def observed_threshold(
    parameter: str,
    x,
    fixed,
    n,
    neutral,
    *,
    increasing: bool | None = None,
    level: float = 0.95,
    link: str = "logit",
    tops: int = 8,
) -> ObservedThreshold:
    """The parameter value where observed fixation crosses the neutral expectation.

    Parameters
    ----------
    parameter : str
        The swept path (for the record).
    x : array
        Swept values, one per point (any order).
    fixed, n : arrays of int
        Replicates counted as mutant fixed, and replicates counted, at each point.
    neutral : array or float
        The neutral expectation at each point.
    increasing : bool, optional
        Whether fixation rises with x (the mutant invades above the
        threshold). By default the sign of the fitted slope.
    level : float, optional
        Coverage of the interval.
    link : {"logit", "cloglog"}, optional
        Link of the binomial GLM.
    tops : int, optional
        Grid of upper asymptotes profiled over (1: the plain two-coefficient GLM).

    Notes
    -----
    A binomial GLM with an upper asymptote, p(x) = top F(a + b x) (fixation
    saturates at the establishment probability, not at 1), is fitted by
    maximum likelihood to the points nearest the crossing (two on either side
    of where the monotone fit of the observations passes the neutral
    expectation: a fixation curve has a kink at the threshold that one such
    shape cannot follow over a wide range); the estimate is where it meets the neutral expectation
    and the interval is the profile-likelihood interval of that crossing
    (``profile_crossings``), so it carries the curve's uncertainty, not only
    that of two neighbouring points. The slope is held to the theory's
    direction. When the sweep points on either side of the crossing are
    further apart than the interval is wide, the interval rests on the
    assumed shape of the curve between them: the message says so and
    ``add_points`` lists values to add.
    """
    x = np.asarray(x, float)
    nan = float("nan")
    if x.size < 2:
        why = "no replicates to estimate from" if x.size == 0 else "one point: no curve to fit"
        return ObservedThreshold(parameter, nan, nan, nan, level, link, message=why)
    order = np.argsort(x, kind="stable")
    x = x[order]
    fixed = np.asarray(fixed, float)[order]
    n = np.asarray(n, float)[order]
    neutral = np.broadcast_to(np.asarray(neutral, float), x.shape)[order]
    if increasing is None:
        _, b, _ = fit_binomial_glm(x, fixed, n, link=link)
        increasing = bool(b[0] >= 0)
    x, fixed, n, neutral = _near_the_crossing(x, fixed, n, neutral, increasing)
    c = profile_crossings(
        x, fixed, n, neutral, increasing=increasing, link=link, level=level, tops=tops
    )
    value, low, high, dispersion = (float(v[0]) for v in (c.value, c.low, c.high, c.dispersion))
    fit = "" if dispersion == 1.0 else (
        f"; the curve fits the points poorly (dispersion {dispersion:.3g}), the interval is widened"
    )
    neighbours, add = (), ()
    if np.isfinite(value):
        j = int(np.clip(np.searchsorted(x, value), 1, x.size - 1))
        neighbours = (float(x[j - 1]), float(x[j]))
        gap = neighbours[1] - neighbours[0]
        width = (high if np.isfinite(high) else x[-1]) - (low if np.isfinite(low) else x[0])
        message = (
            f"observed fixation crosses the neutral expectation at {parameter} = "
            f"{round_to_interval(value, width)} ({level:.0%} interval {_bound(low, width)} to "
            f"{_bound(high, width)}){fit}"
        )
        if gap > width:
            add = suggest_points(*neighbours, min(5, max(1, int(np.ceil(gap / width)) - 1)))
            wide = ("the interval is wide" if np.isfinite(low) and np.isfinite(high)
                    else "the interval's part within the swept range is wide")  # an open bound
            message += (
                f"; the sweep points next to it ({neighbours[0]:g} and {neighbours[1]:g}) are "
                f"further apart than {wide}, so it rests on the fitted curve's "
                f"shape between them: add sweep points between {neighbours[0]:g} and "
                f"{neighbours[1]:g} (e.g. {', '.join(f'{v:g}' for v in add)})"
            )
    elif c.side[0] == 0:
        message = (
            f"observed fixation does not {'rise' if increasing else 'fall'} with {parameter} "
            "as the theory says; no threshold can be placed"
        )
    else:
        side = "below" if c.side[0] < 0 else "above"
        edge = x[0] if c.side[0] < 0 else x[-1]
        reach = (
            f" ({level:.0%} interval {_bound(low)} to {_bound(high)})"
            if np.isfinite(low) or np.isfinite(high)
            else ""
        )
        message = (
            f"observed fixation does not cross the neutral expectation in [{x[0]:g}, {x[-1]:g}]; "
            f"the fitted curve crosses it {side} the swept range{reach}{fit}: add sweep points "
            f"{side} {edge:g}"
        )
        # the interval reaches into the range: points inside the first gap it covers help too
        inner = high if c.side[0] < 0 else low
        if np.isfinite(inner) and x[0] < inner < x[-1]:
            j = int(np.clip(np.searchsorted(x, inner), 1, x.size - 1))
            neighbours = (float(x[j - 1]), float(x[j]))
            add = suggest_points(*neighbours, 3)
            message += (
                f" and between {neighbours[0]:g} and {neighbours[1]:g} "
                f"(e.g. {', '.join(f'{v:g}' for v in add)})"
            )
    return ObservedThreshold(
        parameter, value, low, high, level, link, dispersion, neighbours, add, message
    )


def round_to_interval(v: float, width: float) -> str:
    """A value to the digits its interval's width supports (two significant digits of the width)."""
    if not np.isfinite(width) or width <= 0:
        return f"{v:.4g}"
    digits = max(0, int(-np.floor(np.log10(width))) + 1)
    return f"{v:.{digits}f}"


def _bound(v: float, width: float = float("nan")) -> str:
    return round_to_interval(v, width) if np.isfinite(v) else "beyond the range"
