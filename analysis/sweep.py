"""Theory over an experiment's sweep: a prediction per point, a threshold per swept parameter.

``broodline threshold CONFIG`` prints these two tables. Sweeps are read only
through ``sim.config``'s sweep mechanism (``sweep_factors``), so a
``[[sweep.linked]]`` group is one factor here too: its threshold is sought
along the group, with one member as the axis (``SweepFactor.axis``) and the
others moving with it.
"""

from __future__ import annotations

import itertools

import pandas as pd

from sim.config import Config, SweepFactor, sweep_factors, sweep_points
from sim.meanfield import NoEquilibriumError

from .environment import invasion_pair
from .fixation import finite_population_columns
from .invasion import predict
from .thresholds import ThresholdResult, threshold, with_values

__all__ = [
    "PREDICTION_COLUMNS",
    "predict_point",
    "threshold_at",
    "predict_configs",
    "predict_sweep",
    "numeric_sweep_paths",
    "factor_of",
    "other_swept_paths",
    "sweep_thresholds",
]

PREDICTION_COLUMNS = [
    "density_index",
    "census_size",
    "resident_growth_rate",
    "mutant_growth_rate",
    "invasion_fitness",
    "verdict",
    "establishment_probability",
    "neutral_expectation",
]


def predict_point(config: Config, point: int | None = None) -> dict:
    """The theory of one (sweep point) config, whichever applies: the stochastic theory where
    years vary (``analysis.varying_years``), else the constant environment's prediction with
    its finite-N columns. ``PREDICTION_COLUMNS`` and the theory's own keys, and ``problem``
    (where the resident has no equilibrium: nan values and verdict "undefined"). ``point``
    is the config's index in its sweep (a ``shared_years`` point's neutral expectation is
    read under its own years)."""
    if config.environment is not None:  # year types: the stochastic theory
        from .varying_years import stochastic_prediction

        return {**stochastic_prediction(config, point=point), "problem": ""}
    try:
        p = predict(config).as_dict()
        p["problem"] = (
            "" if p.pop("establishment_converged") else "establishment iteration hit its cap"
        )
    except NoEquilibriumError as err:
        p = {k: float("nan") for k in PREDICTION_COLUMNS}
        p["verdict"] = "undefined"
        p["problem"] = str(err)
    for k in ("resident", "mutant", "regulated"):
        p.pop(k, None)
    p.update(finite_population_columns(config))  # issue 12: the finite-N prediction
    return p


def predict_configs(configs) -> pd.DataFrame:
    """One row of theory per (sweep point) config: ``PREDICTION_COLUMNS``, the finite-N
    columns (``analysis.fixation.COLUMNS``) and ``problem``.

    A point where the resident has no equilibrium gets nan values, verdict
    "undefined" and the reason in ``problem``. The configs are taken to be
    the sweep points in order (a ``shared_years`` point's neutral expectation
    is read under its own years, found by its index).
    """
    rows = [predict_point(c, i) for i, c in enumerate(configs)]
    extra = list(dict.fromkeys(k for r in rows for k in r if k not in PREDICTION_COLUMNS and k != "problem"))
    return pd.DataFrame(rows, columns=[*PREDICTION_COLUMNS, *extra, "problem"])


def predict_sweep(config: Config) -> pd.DataFrame:
    """Theory at every sweep point of ``config``: ``point``, the swept values, the prediction."""
    invasion_pair(config)
    points = sweep_points(config)
    values = pd.DataFrame([{"point": p.index, **p.values} for p in points])
    return pd.concat([values, predict_configs([p.config for p in points])], axis=1)


def numeric_sweep_paths(config: Config) -> list[str]:
    """The axis of each swept factor whose values are real numbers in order (the paths a
    threshold can be sought, or a figure drawn, along); for a linked group, its axis member."""
    return [f.axis for f in sweep_factors(config) if f.axis is not None]


def factor_of(config: Config, path: str) -> SweepFactor | None:
    """The sweep factor ``path`` belongs to (None if it is not swept)."""
    return next((f for f in sweep_factors(config) if path in f.values), None)


def other_swept_paths(config: Config, path: str | None) -> list[str]:
    """Swept paths outside the factor of ``path`` (all swept paths when ``path`` is None)."""
    return [p for f in sweep_factors(config) if path not in f.values for p in f.paths]


def sweep_thresholds(config: Config, *, parameters=None, bracket=None) -> list[ThresholdResult]:
    """The analytic threshold along each swept parameter (or along ``parameters``).

    Parameters
    ----------
    config : Config
        A config with ``[invasion]``.
    parameters : list of str, optional
        Paths; by default the axis of every numeric swept factor. A member of
        a ``[[sweep.linked]]`` group means a threshold along the group, with
        that member as the axis.
    bracket : (float, float), optional
        Range to search (for all ``parameters``); by default each one's swept
        range, see ``analysis.threshold``.

    Returns
    -------
    list of ThresholdResult
        For a sweep over several factors, one result per combination of the
        other factors' values (recorded in ``at``). Along a linked group,
        ``parameter`` is the axis and ``linked`` gives the other members'
        values at the threshold (read linearly between the listed levels).
    """
    invasion_pair(config)
    parameters = numeric_sweep_paths(config) if parameters is None else list(parameters)
    factors = sweep_factors(config)
    out = []
    for path in parameters:
        own = factor_of(config, path)
        if own is not None and own.linked and own.axis != path:
            own = SweepFactor({path: own.values[path]} | own.values)  # the asked member leads
        others = [f for f in factors if own is None or f.values != own.values]
        for combo in itertools.product(*(range(f.levels) for f in others)):
            at = {p: v for f, k in zip(others, combo) for p, v in f.level(k).items()}
            base = with_values(config, at) if at else config
            this = bracket
            if bracket is None and own is not None:
                values = [float(v) for v in own.values[path]]
                this = (min(values), max(values))
            group = own if own is not None and own.linked else None
            result = threshold_at(base, path, bracket=this, group=group)
            out.append(ThresholdResult(**{**result.__dict__, "at": at}))
    return out


def threshold_at(config: Config, path: str, *, bracket=None, group=None) -> ThresholdResult:
    """The analytic threshold along ``path`` for one config, whichever theory applies: the
    stochastic one where years vary (``analysis.varying_years.stochastic_threshold_result``),
    else ``analysis.threshold`` (same parameters)."""
    if config.environment is not None:
        from .varying_years import stochastic_threshold_result

        return stochastic_threshold_result(config, path, bracket=bracket, group=group)
    return threshold(config, path, bracket=bracket, group=group)
