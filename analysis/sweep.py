"""Theory over an experiment's sweep: a prediction per point, a threshold per swept parameter.

``broodline threshold CONFIG`` prints these two tables.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd

from sim.config import Config, sweep_points
from sim.meanfield import NoEquilibriumError

from .environment import invasion_pair
from .fixation import COLUMNS as FINITE_COLUMNS
from .fixation import finite_population_columns
from .invasion import predict
from .thresholds import ThresholdResult, threshold, with_values

__all__ = [
    "PREDICTION_COLUMNS",
    "predict_configs",
    "predict_sweep",
    "numeric_sweep_paths",
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


def _row(config: Config) -> dict:
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
    "undefined" and the reason in ``problem``.
    """
    return pd.DataFrame(
        [_row(c) for c in configs], columns=[*PREDICTION_COLUMNS, *FINITE_COLUMNS, "problem"]
    )


def predict_sweep(config: Config) -> pd.DataFrame:
    """Theory at every sweep point of ``config``: ``point``, the swept values, the prediction."""
    invasion_pair(config)
    points = sweep_points(config)
    values = pd.DataFrame([{"point": p.index, **p.values} for p in points])
    return pd.concat([values, predict_configs([p.config for p in points])], axis=1)


def numeric_sweep_paths(config: Config) -> list[str]:
    """Swept paths whose values are all real numbers (the ones a threshold can be sought along)."""
    out = []
    for path, values in (config.sweep or {}).items():
        if (
            all(
                isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                for v in values
            )
            and len(set(values)) > 1
        ):
            out.append(path)
    return out


def sweep_thresholds(config: Config, *, parameters=None, bracket=None) -> list[ThresholdResult]:
    """The analytic threshold along each swept parameter (or along ``parameters``).

    Parameters
    ----------
    config : Config
        A config with ``[invasion]``.
    parameters : list of str, optional
        Sweep paths; by default every numeric swept path.
    bracket : (float, float), optional
        Range to search (for all ``parameters``); by default each one's swept
        range, see ``analysis.threshold``.

    Returns
    -------
    list of ThresholdResult
        For a sweep over several parameters, one result per combination of
        the other swept values (recorded in ``at``).
    """
    invasion_pair(config)
    parameters = numeric_sweep_paths(config) if parameters is None else list(parameters)
    out = []
    for path in parameters:
        others = {k: v for k, v in (config.sweep or {}).items() if k != path}
        for combo in itertools.product(*others.values()):
            at = dict(zip(others, combo))
            base = with_values(config, at) if at else config
            if bracket is None and config.sweep and path in config.sweep:
                values = np.asarray(config.sweep[path], dtype=float)
                this = (float(values.min()), float(values.max()))
            else:
                this = bracket
            result = threshold(base, path, bracket=this)
            out.append(ThresholdResult(**{**result.__dict__, "at": at}))
    return out
