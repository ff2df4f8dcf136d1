"""Observed fixation in a results file set against the analytic prediction.

The agreement rule (also in the README). A point's prediction is the side of
the neutral expectation on which the mutant's fixation probability should
fall: above it where the mutant invades, below it where it does not, at it
where it is neutral. The observation is the 95% Wilson interval of the
mutant-fixed fraction. It **agrees** when the interval lies wholly on the
predicted side (for a neutral verdict: when it contains the neutral
expectation), **disagrees** when it lies wholly on the other side (for a
neutral verdict: when it excludes it), and is **inconclusive** when it
contains the neutral expectation, i.e. the replicates cannot tell.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from sim.config import Config, ConfigError
from sim.store import read_attrs, read_point_configs, read_points, read_replicates

from .estimates import observed_threshold, wilson_interval
from .sweep import predict_configs, sweep_thresholds

__all__ = ["COMPARE_COLUMNS", "SHOWN_COLUMNS", "agreement", "experiment_config", "compare", "compare_thresholds"]

COMPARE_COLUMNS = [
    "point",
    "replicates",
    "mutant_fixed",
    "mutant_lost",
    "unresolved",
    "fixed_fraction",
    "fixed_low",
    "fixed_high",
    "invasion_fitness",
    "verdict",
    "establishment_probability",
    "neutral_expectation",
    "agreement",
]
# the columns a person reads (printed table, report): all but the point and the detail counts
SHOWN_COLUMNS = [c for c in COMPARE_COLUMNS if c not in ("point", "mutant_lost", "unresolved")]


def agreement(verdict: str, low: float, high: float, neutral: float) -> str:
    """Agrees, disagrees or inconclusive: the Wilson interval [low, high] against a verdict.

    See the module notes for the rule.
    """
    if verdict not in ("invades", "does not invade", "neutral") or not np.isfinite(neutral):
        return "no prediction"
    above, below = low > neutral, high < neutral
    if verdict == "neutral":
        return "disagrees" if above or below else "agrees"
    if not (above or below):
        return "inconclusive"
    return "agrees" if above == (verdict == "invades") else "disagrees"


def experiment_config(path) -> Config:
    """The experiment's config as written in the results file (with its sweep)."""
    return Config.model_validate(read_attrs(path)["config"])


def _require_invasion(config: Config, path) -> None:
    if config.invasion is None:
        raise ConfigError(
            f"{str(path)!r}: the experiment has no [invasion] table, so there is no "
            "mutant to compare with theory"
        )


def compare(path, *, level: float = 0.95) -> pd.DataFrame:
    """One row per sweep point: observed fixation with its Wilson interval beside the theory.

    Parameters
    ----------
    path : path-like
        A results file written by ``broodline run``.
    level : float, optional
        Coverage of the Wilson intervals.

    Returns
    -------
    DataFrame
        ``point``, one column per swept path, then ``COMPARE_COLUMNS`` (after
        ``point``) and the remaining theory columns (``density_index``,
        ``census_size``, ``resident_growth_rate``, ``mutant_growth_rate``,
        ``problem``). ``fixed_fraction`` is mutant-fixed / replicates;
        replicates neither fixed nor lost (undecided, extinct, capped) are
        counted in ``unresolved`` and as not fixed.
    """
    config = experiment_config(path)
    _require_invasion(config, path)
    points = read_points(path)
    reps = read_replicates(path)
    theory = predict_configs(read_point_configs(path))
    rows = []
    for i, point in enumerate(points["point"]):
        outcomes = reps.loc[reps["point"] == point, "outcome"]
        n, fixed = len(outcomes), int((outcomes == "mutant-fixed").sum())
        lost = int((outcomes == "mutant-lost").sum())
        est = wilson_interval(fixed, n, level=level)
        t = theory.iloc[i]
        rows.append(
            {
                "point": int(point),
                "replicates": n,
                "mutant_fixed": fixed,
                "mutant_lost": lost,
                "unresolved": n - fixed - lost,
                "fixed_fraction": est.fraction,
                "fixed_low": est.low,
                "fixed_high": est.high,
                **t.to_dict(),
                "agreement": agreement(t["verdict"], est.low, est.high, t["neutral_expectation"])
                if n
                else "no replicates",
            }
        )
    table = pd.DataFrame(rows)
    rest = [c for c in table.columns if c not in COMPARE_COLUMNS]
    table = table[[*COMPARE_COLUMNS, *rest]]
    swept = points.drop(columns="point")
    return pd.concat(
        [table[["point"]], swept.reset_index(drop=True), table.drop(columns="point")], axis=1
    )


def compare_thresholds(
    path, table: pd.DataFrame | None = None, *, level: float = 0.95, seed: int = 0
) -> pd.DataFrame:
    """The observed threshold along each numeric swept parameter beside the analytic one.

    Parameters
    ----------
    path : path-like
        A results file.
    table : DataFrame, optional
        ``compare(path)``, if already computed.
    level : float, optional
        Coverage of the bootstrap interval.
    seed : int, optional
        Seed of the bootstrap (``analysis.estimates.observed_threshold``).

    Returns
    -------
    DataFrame
        One row per swept parameter (and per combination of the other swept
        values, given in ``at`` as JSON): ``parameter``, ``at``,
        ``analytic`` (nan if none in the range), ``analytic_message``,
        ``observed``, ``observed_low``, ``observed_high``,
        ``observed_message``, and ``analytic_in_interval`` (True when the
        analytic threshold lies within the observed interval, an open bound
        counting as the range's end and beyond).
    """
    config = experiment_config(path)
    _require_invasion(config, path)
    table = compare(path, level=level) if table is None else table
    rows = []
    for res in sweep_thresholds(config):
        sel = np.ones(len(table), dtype=bool)
        for k, v in res.at.items():
            sel &= table[k].to_numpy() == v
        sub = table[sel & (table["replicates"].to_numpy() > 0)]  # points with replicates
        obs = observed_threshold(
            res.parameter,
            sub[res.parameter],
            sub["mutant_fixed"],
            sub["replicates"],
            sub["neutral_expectation"],
            increasing=res.invades_above,
            level=level,
            seed=seed,
        )
        lo = obs.low if np.isfinite(obs.low) else -np.inf
        hi = obs.high if np.isfinite(obs.high) else np.inf
        inside = (
            bool(np.isfinite(res.value) and lo <= res.value <= hi)
            if np.isfinite(obs.value) or np.isfinite(obs.low) or np.isfinite(obs.high)
            else False
        )
        rows.append(
            {
                "parameter": res.parameter,
                "at": json.dumps(res.at),
                "analytic": res.value,
                "analytic_message": res.message,
                "observed": obs.value,
                "observed_low": obs.low,
                "observed_high": obs.high,
                "observed_message": obs.message,
                "analytic_in_interval": inside,
            }
        )
    return pd.DataFrame(
        rows,
        columns=[
            "parameter",
            "at",
            "analytic",
            "analytic_message",
            "observed",
            "observed_low",
            "observed_high",
            "observed_message",
            "analytic_in_interval",
        ],
    )
