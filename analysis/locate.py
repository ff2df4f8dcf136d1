"""The finite-population threshold located by simulation: a sequential design.

``locate(config, parameter, out)`` finds the value of a parameter at which
the observed fixation probability equals the neutral expectation. It runs
the experiment in stages: each stage is one new sweep point (the value the
design picks) with ``experiment.replicates`` replicates, and after each stage
a two-parameter dose-response curve is fitted to every stage so far.

The curve is Kimura's (1962) form in a scaled selection S = beta (x - theta)::

    u(x) = (1 - exp(-S p(x))) / (1 - exp(-S))       (u = p(x) at x = theta)

with p(x) the neutral expectation of the point, fitted by maximum likelihood
(binomial counts; a weak prior on ln beta, centred on the diffusion's slope,
steadies the first stages' estimates); theta is the finite-N threshold and
its 95% interval is the likelihood's own profile interval (deviance 3.84,
chi-squared with one degree of freedom; Venzon & Moolgavkar 1988), beta
profiled out. The stop rule is checked after every stage: the run stops at
the first stage whose interval's half-width is at most the tolerance (or
when the next stage would pass the budget), so smaller stages stop nearer
the tolerance.

Where the replicates go. A replicate at scaled selection S carries Fisher
information h(S) = u'(S)^2 / (u (1 - u)) on theta (in units of 1 / beta);
for small p, h / p is 0.25 at the crossing, largest (0.28) at S = 1.3, and
0.17 at S = -1.5, 0.25 at S = 3, 0.22 at S = 4, 0.08 at S = -3. With
beta unknown, the efficient information on theta of points at S_i with
information a_i is sum a - (sum a S)^2 / sum a S^2: it is lost when the
points lie on one side of the crossing. And the profile interval stays
open until the points show the curve's slope (a flat curve through the
mean fixation fraction fits points at one value, or close together, as well
as a steep one crossing anywhere), which needs points some units of S
apart. So the design alternates between the two sides: the first stage at
theta0 - 1.5 / beta0 (theta0, beta0 the diffusion's threshold and slope;
the analytic threshold if the diffusion has none), then theta + 3 / beta
and theta - 1.5 / beta in turn, theta and beta the current fit. Simulated
with the diffusion's curve (semelparous against iteroparous, K = 200, one
mutant, half-width 1% of the threshold = 4 units of S, stages of 50), this
design used a mean of 650 replicates, the earlier cycle (S = 1.5, -0.5,
0.5, 2.5, three of four points above the crossing) 800, and pairs from
(-1.5, 3) to (-2, 4) about equally few (docs/finite-population.md,
section 6); ``broodline locate-bench`` measures it with the engines.

The results file is an ordinary experiment file. Its config is the base
config with ``[sweep] PARAMETER = [x1, x2, ...]`` (the stages' values, in
order, repeats allowed); a new stage rewrites the header (config, hash,
``n_points``, ``/points``) and adds its batches as shards, so ``status``,
``compare`` and ``report`` read it as any experiment, whether finished or
not. The stages' shards are merged when the interval reaches the
tolerance; a run stopped by its budget (or interrupted) is left unfinished,
and ``--resume`` (with a larger budget) goes on. The root
attribute ``locate`` (JSON) records the parameter, bracket, tolerance and
budget. Resuming reads the stages from the file, finishes the last one and
goes on: the design depends only on the outcomes, so a resumed run chooses
the values an uninterrupted run would have.
"""

from __future__ import annotations

import json
import math
import numbers
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import brentq, minimize, minimize_scalar

from sim.config import Config, ConfigError, parse_config, sweep_points

from .fixation import finite_population_prediction
from .invasion import neutral_expectation
from .thresholds import ThresholdResult, _check_parameter, threshold, with_values

__all__ = [
    "DoseResponseFit",
    "LocateResult",
    "fit_dose_response",
    "diffusion_threshold",
    "next_value",
    "locate",
    "locate_report",
]

_Z_FIRST = -1.5  # the first stage: below the predicted crossing
_Z_CYCLE = (3.0, -1.5)  # then above and below the current estimate in turn (module notes)
_CHI2_95 = 3.841458820694124  # chi-squared(1) 0.95 quantile (scipy.stats.chi2.ppf(0.95, 1))


# -- the curve ---------------------------------------------------------------------------
def kimura_curve(x, p, theta: float, beta: float) -> np.ndarray:
    """u(x) = (1 - exp(-S p)) / (1 - exp(-S)), S = beta (x - theta); u = p at S = 0."""
    x, p = np.asarray(x, float), np.asarray(p, float)
    s = beta * (x - theta)
    out = np.empty(np.broadcast(s, p).shape)
    s, p = np.broadcast_arrays(s, p)
    small = np.abs(s) < 1e-9
    out[small] = p[small]
    big = ~small
    sb, pb = s[big], p[big]
    # S < 0: u = e^(S (1 - p)) (1 - e^(S p)) / (1 - e^S), which cannot overflow
    neg = sb < 0
    with np.errstate(over="ignore", invalid="ignore"):
        pos_val = -np.expm1(-sb * pb) / -np.expm1(-sb)
        neg_val = np.exp(sb * (1 - pb)) * (-np.expm1(sb * pb)) / (-np.expm1(sb))
    out[big] = np.where(neg, neg_val, pos_val)
    return np.clip(out, 1e-300, 1 - 1e-15)


def _loglik(theta, beta, x, p, fixed, n) -> float:
    u = kimura_curve(x, p, theta, beta)
    return float(np.sum(fixed * np.log(u) + (n - fixed) * np.log1p(-u)))


@dataclass(frozen=True)
class DoseResponseFit:
    """A fitted Kimura curve and the profile-likelihood interval of its crossing theta.

    Attributes
    ----------
    theta : float
        Where the fitted fixation probability equals the neutral expectation.
    beta : float
        Scaled selection per unit of the parameter (sign: the side the mutant invades).
    low, high : float
        95% profile-likelihood interval of theta (nan: not bounded within the bracket).
    """

    theta: float
    beta: float
    low: float
    high: float

    @property
    def half_width(self) -> float:
        return (self.high - self.low) / 2 if np.isfinite(self.low) and np.isfinite(self.high) else math.inf


def fit_dose_response(
    x, p, fixed, n, *, bracket, theta0: float, beta0: float, prior_sd: float | None = 1.0, grid: int = 241
) -> DoseResponseFit:
    """Maximum-likelihood Kimura curve through binomial counts, with theta's 95% interval.

    Parameters
    ----------
    x, p, fixed, n : array-like
        Parameter value, neutral expectation, fixed count and replicates, per stage.
    bracket : (float, float)
        theta is sought, and its interval bounded, within it.
    theta0, beta0 : float
        Starting values (the sign of beta0 is kept: it says on which side the
        mutant invades).
    prior_sd : float or None
        theta and beta maximise the likelihood times a normal prior on ln|beta|
        centred on ln|beta0| with this sd (None: the likelihood alone). It
        steadies the first stages, where one or two values cannot fix beta,
        and fades as data come. The interval is the likelihood's own.
    """
    x, p, fixed, n = (np.asarray(a, float) for a in (x, p, fixed, n))
    lo, hi = bracket
    sign = 1.0 if beta0 >= 0 else -1.0

    def profile(theta):
        res = minimize_scalar(
            lambda lb: -_loglik(theta, sign * math.exp(lb), x, p, fixed, n),
            bounds=(math.log(abs(beta0)) - 8, math.log(abs(beta0)) + 8),
            method="bounded",
            options={"xatol": 1e-6},
        )
        return -res.fun, sign * math.exp(res.x)

    thetas = np.linspace(lo, hi, grid)
    prof = np.array([profile(t)[0] for t in thetas])
    k = int(np.argmax(prof))
    start = [thetas[k], math.log(abs(profile(thetas[k])[1]))]
    def penalty(lb):
        return 0.0 if prior_sd is None else 0.5 * ((lb - math.log(abs(beta0))) / prior_sd) ** 2

    res = minimize(
        lambda q: -_loglik(q[0], sign * math.exp(q[1]), x, p, fixed, n) + penalty(q[1]),
        start,
        method="Nelder-Mead",
        options={"xatol": 1e-9 * max(1.0, abs(hi - lo)), "fatol": 1e-10, "maxiter": 4000},
    )
    theta, beta = float(np.clip(res.x[0], lo, hi)), sign * math.exp(res.x[1])
    best = max(_loglik(theta, beta, x, p, fixed, n), prof[k])
    cut = best - _CHI2_95 / 2

    def excess(t):
        return profile(t)[0] - cut

    inside = prof >= cut
    low = high = float("nan")
    if inside.any():
        first, last = int(np.argmax(inside)), len(inside) - 1 - int(np.argmax(inside[::-1]))
        if first > 0:
            low = brentq(excess, thetas[first - 1], min(max(thetas[first], theta), hi), xtol=1e-10)
        if last < grid - 1:
            high = brentq(excess, max(min(thetas[last], theta), lo), thetas[last + 1], xtol=1e-10)
    return DoseResponseFit(theta, beta, float(low), float(high))


def next_value(fit: DoseResponseFit, stage: int, *, bracket) -> float:
    """The design's next value: theta + z / beta, z = 3 after an even stage, -1.5 after an odd one.

    ``stage`` counts the stages run so far minus one (0 after the first);
    the value is kept in the bracket.
    """
    z = _Z_CYCLE[stage % len(_Z_CYCLE)]
    lo, hi = bracket
    return float(np.clip(fit.theta + z / fit.beta, lo, hi))


# -- theory --------------------------------------------------------------------------------
def diffusion_threshold(config: Config, parameter: str, *, bracket) -> float:
    """Where the diffusion's fixation probability equals the neutral expectation (nan: none)."""
    def gap(x):
        point = with_values(config, {parameter: float(x)})
        f = finite_population_prediction(point)
        return f.fixation_probability - f.initial_share

    lo, hi = bracket
    xs = np.linspace(lo, hi, 33)
    g = np.array([gap(x) for x in xs])
    ok = np.isfinite(g)
    for i in range(len(xs) - 1):
        if ok[i] and ok[i + 1] and np.sign(g[i]) != np.sign(g[i + 1]):
            return float(brentq(gap, xs[i], xs[i + 1], xtol=1e-10))
    return float("nan")


def _slope(config: Config, parameter: str, at: float, span: float) -> float:
    """The diffusion's scale 2 V ds/dx / sigma_m^2 at ``at`` (the Kimura curve's beta)."""
    h = 1e-4 * max(span, 1e-12)
    f_up = finite_population_prediction(with_values(config, {parameter: at + h}))
    f_dn = finite_population_prediction(with_values(config, {parameter: at - h}))
    ds = (f_up.selection_coefficient - f_dn.selection_coefficient) / (2 * h)
    return 2 * f_up.total_reproductive_value * ds / f_up.demographic_variance_mutant


# -- the results file ------------------------------------------------------------------------
def _stage_config(base: Config, parameter: str, values: list[float]) -> Config:
    raw = base.model_dump(mode="python", exclude_none=True)
    raw["sweep"] = {parameter: [float(v) for v in values]}
    return parse_config(raw)


def _write_stage_header(out: Path, config: Config, points, locate_attrs: dict) -> None:
    """Rewrite the file's header (attributes, /points) for the stages so far; shards stay.

    The header is what ``ResultsWriter`` writes for a new experiment, with the
    original ``created`` time kept and the ``locate`` attribute added.
    """
    from sim.store import rewrite_header

    rewrite_header(out, config, points, extra={"locate": json.dumps(locate_attrs)})


def _stage_counts(out: Path, n_stages: int) -> pd.DataFrame:
    from sim.store import read_outcomes

    reps = read_outcomes(out)
    counts = reps.assign(fixed=reps["outcome"] == "mutant-fixed").groupby("point")["fixed"].agg(["sum", "size"])
    counts = counts.reindex(range(n_stages), fill_value=0)
    return pd.DataFrame({"fixed": counts["sum"].astype(int), "replicates": counts["size"].astype(int)})


# -- the design -----------------------------------------------------------------------------
@dataclass(frozen=True)
class LocateResult:
    """The finite-population threshold found by simulation.

    Attributes
    ----------
    parameter : str
    value, low, high : float
        The located threshold and its 95% profile-likelihood interval (nan:
        not bounded within the bracket).
    converged : bool
        True when the interval's half-width reached the tolerance.
    replicates : int
        Replicates used, all stages.
    analytic : float
        The infinite-population threshold (invasion fitness 1).
    diffusion : float
        Where the diffusion's fixation probability equals the neutral expectation.
    bracket : tuple of float
    tolerance : float
    budget : int
    message : str
    stages : DataFrame
        One row per stage: ``value``, ``neutral_expectation``, ``replicates``, ``fixed``.
    """

    parameter: str
    value: float
    low: float
    high: float
    converged: bool
    replicates: int
    analytic: float
    diffusion: float
    bracket: tuple[float, float]
    tolerance: float
    budget: int
    message: str
    stages: pd.DataFrame = field(repr=False)

    def as_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__ if k != "stages"}
        d["bracket"] = list(self.bracket)
        d["stages"] = self.stages.to_dict(orient="records")
        return d


def _check_options(*, tolerance, budget, workers) -> None:
    """Refuse a bad tolerance, budget or worker count before anything runs: one message each."""
    problems = []
    if tolerance is not None and not (isinstance(tolerance, numbers.Real) and math.isfinite(tolerance)
                                      and tolerance > 0):
        problems.append(f"tolerance must be a finite number > 0; got {tolerance!r}")
    if isinstance(budget, bool) or not isinstance(budget, (int, np.integer)) or budget < 1:
        problems.append(f"budget must be a whole number >= 1; got {budget!r}")
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        problems.append(f"workers must be a whole number >= 1; got {workers!r}")
    if problems:
        raise ConfigError(problems)


def _default_bracket(config: Config, parameter: str, analytic: ThresholdResult) -> tuple[float, float]:
    if not analytic.converged:
        raise ConfigError(
            f"--bracket: no analytic threshold of {parameter} to centre the search on "
            f"({analytic.message}); give --bracket LOW HIGH"
        )
    v = analytic.value
    return (v - 0.1 * abs(v), v + 0.1 * abs(v)) if v != 0 else (-0.1, 0.1)


def locate(
    config: Config,
    parameter: str,
    out,
    *,
    bracket=None,
    tolerance: float | None = None,
    budget: int = 200_000,
    resume: bool = False,
    overwrite: bool = False,
    workers: int = 1,
    batch_size: int | None = None,
    progress=None,
) -> LocateResult:
    """Find by simulation where the observed fixation probability equals the neutral expectation.

    Parameters
    ----------
    config : Config
        An invasion config (its sweep, if any, is dropped); ``experiment.replicates``
        replicates are run per stage.
    parameter : str
        A sweep path naming a real-valued key.
    out : path-like
        The results file (see the module notes for how stages are held).
    bracket : (float, float), optional
        Range searched; default the analytic threshold +- 10%.
    tolerance : float, optional
        Stop when the 95% interval's half-width is at most this; default 1% of
        the analytic threshold.
    budget : int
        Stop when this many replicates are used (a stage is never cut).
    resume, overwrite : bool
        Go on with an unfinished locate file (a complete one is only reported);
        or start again.
    workers, batch_size : int
        As for ``run_experiment``.
    progress : callable, optional
        Called with a text line after each stage.

    Returns
    -------
    LocateResult
    """
    from sim.parallel import default_batch_size, make_pool, plan_batches
    from sim.point_run import PointRun
    from sim.store import ResultsError, ResultsWriter, resumable_attrs

    if config.invasion is None:
        raise ConfigError("invasion: locate needs an [invasion] table naming the resident and the mutant")
    _check_options(tolerance=tolerance, budget=budget, workers=workers)
    base = config.model_copy(update={"sweep": None})
    _check_parameter(base, parameter)
    out = Path(out)
    analytic = threshold(base, parameter, bracket=bracket)
    if bracket is None:
        bracket = _default_bracket(base, parameter, analytic)
    lo, hi = (float(b) for b in bracket)
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise ConfigError(f"bracket: needs two finite numbers, low < high; got {bracket!r}")
    with_values(base, {parameter: lo}), with_values(base, {parameter: hi})
    if tolerance is None:
        centre = analytic.value if analytic.converged else (lo + hi) / 2
        tolerance = 0.01 * abs(centre) if centre else 0.01 * (hi - lo)
    diffusion = diffusion_threshold(base, parameter, bracket=(lo, hi))
    theta0 = diffusion if math.isfinite(diffusion) else (analytic.value if analytic.converged else (lo + hi) / 2)
    beta0 = _slope(base, parameter, theta0, hi - lo)
    if not math.isfinite(beta0) or beta0 == 0:
        beta0 = (1.0 if analytic.invades_above is not False else -1.0) * 10.0 / (hi - lo)
    attrs = {"parameter": parameter, "bracket": [lo, hi], "tolerance": tolerance, "budget": budget}

    values: list[float] = []
    if resume:
        if not out.exists():
            raise ResultsError(f"nothing to resume: {str(out)!r} does not exist (run without --resume)")
        stored = resumable_attrs(out)  # not a results file (not HDF5, truncated, empty): one line
        if "locate" not in stored:
            raise ResultsError(f"cannot resume {str(out)!r}: it was not written by locate")
        found = json.loads(stored["locate"])["parameter"]
        if found != parameter:
            raise ResultsError(f"cannot resume {str(out)!r}: it locates {found}, not {parameter}")
        filed = Config.model_validate(stored["config"])
        values = [float(v) for v in filed.sweep[parameter]]
        if _stage_config(base, parameter, values).model_dump() != filed.model_dump():
            raise ResultsError(f"cannot resume {str(out)!r}: it was started with another config")
    elif out.exists() and not overwrite:
        raise FileExistsError(f"results file {str(out)!r} exists; pass --overwrite to replace it")

    pool = make_pool(workers=workers)
    seed = config.experiment.seed
    writer = None
    fit = None
    try:
        while True:
            if values and fit is None:
                new_stage = False  # resuming: finish the stored stages first
            else:
                values.append(float(np.clip(theta0 + _Z_FIRST / beta0, lo, hi)) if fit is None
                              else next_value(fit, len(values) - 1, bracket=(lo, hi)))
                new_stage = True
            stage_config = _stage_config(base, parameter, values)
            points = sweep_points(stage_config)
            if new_stage:
                if len(values) == 1:
                    ResultsWriter(out, stage_config, points, overwrite=True).release()
                _write_stage_header(out, stage_config, points, attrs)
            writer = ResultsWriter(out, stage_config, points, resume=True)
            finished = writer.complete  # a file whose design already stopped: report it
            missing = writer.missing()
            if missing:
                todo = sum(len(r) for runs in missing.values() for r in runs)
                held = max(PointRun.of(point).held for point in points)
                size = batch_size or default_batch_size(todo, pool.slots, held)
                tasks = ((b, points[b.point], seed) for b in plan_batches(missing, size))
                for _, results in pool.run(tasks):
                    writer.write(results)
            counts = _stage_counts(out, len(values))
            table = _stage_table(base, parameter, values, counts)
            fit = fit_dose_response(
                table["value"], table["neutral_expectation"], table["fixed"], table["replicates"],
                bracket=(lo, hi), theta0=theta0 if fit is None else fit.theta, beta0=beta0,
            )
            if progress:
                progress(_stage_line(len(values), table, fit))
            reason = _stop(fit, values, config, tolerance, budget)
            if finished and reason is None:
                reason = "the file is complete: its design stopped earlier (start again with --overwrite)"
            if reason is not None:
                if fit.half_width <= tolerance:
                    writer.finalize()  # done: merge the stages' shards into the file
                writer.release()  # else left unfinished: --resume with a larger budget goes on
                writer = None
                break
            writer.release()
            writer = None
    except BaseException:
        if writer is not None:
            writer.release()
        pool.shutdown(cancel=True)
        raise
    pool.shutdown()
    used = int(table["replicates"].sum())
    converged = fit.half_width <= tolerance
    message = (
        f"{parameter}: finite-N threshold {fit.theta:.6g}, 95% interval "
        f"[{_fmt(fit.low)}, {_fmt(fit.high)}] after {len(values)} stages, {used} replicates ({reason})"
    )
    return LocateResult(
        parameter, fit.theta, fit.low, fit.high, converged, used,
        analytic.value, diffusion, (lo, hi), tolerance, budget, message, table,
    )


def _fmt(x: float) -> str:
    return f"{x:.6g}" if np.isfinite(x) else "beyond the bracket"


def _stop(fit: DoseResponseFit, values, config: Config, tolerance: float, budget: int) -> str | None:
    if fit.half_width <= tolerance:
        return f"half-width {fit.half_width:.3g} <= tolerance {tolerance:.3g}"
    if (len(values) + 1) * config.experiment.replicates > budget:
        return f"budget of {budget} replicates reached; --resume with a larger --budget goes on"
    return None


def _stage_table(base: Config, parameter: str, values, counts: pd.DataFrame) -> pd.DataFrame:
    neutral = [neutral_expectation(with_values(base, {parameter: v})) for v in values]
    return pd.DataFrame(
        {
            "stage": range(len(values)),
            "value": values,
            "neutral_expectation": neutral,
            "replicates": counts["replicates"].to_numpy(),
            "fixed": counts["fixed"].to_numpy(),
        }
    )


def _stage_line(k: int, table: pd.DataFrame, fit: DoseResponseFit) -> str:
    last = table.iloc[-1]
    return (
        f"stage {k}: {last['value']:.6g} fixed {int(last['fixed'])}/{int(last['replicates'])}; "
        f"threshold {fit.theta:.6g} [{_fmt(fit.low)}, {_fmt(fit.high)}], "
        f"{int(table['replicates'].sum())} replicates so far"
    )


# -- the command line -----------------------------------------------------------------------
def locate_report(result: LocateResult) -> str:
    """The located threshold beside the analytic one and the diffusion's, in words."""
    lines = [
        result.message,
        f"  finite-N threshold (simulated): {result.value:.6g}, 95% interval "
        f"[{_fmt(result.low)}, {_fmt(result.high)}]"
        + ("" if result.converged else f" (tolerance {result.tolerance:.3g} not reached)"),
        f"  infinite-N threshold (invasion fitness 1): {_fmt(result.analytic)}",
        f"  diffusion prediction (fixation = neutral expectation): {_fmt(result.diffusion)}",
    ]
    return "\n".join(lines)
