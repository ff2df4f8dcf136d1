"""Predictions and thresholds of a config with ``[environment]``: the stochastic theory wired in.

``analysis.sweep`` asks this module for a sweep point's prediction and a
parameter's threshold when the config has year types. The numbers come from
``analysis.stochastic`` (stochastic growth rates, invasion fitness in the
resident's fluctuating environment) and ``analysis.random_branching``
(establishment over random year sequences). Every estimate uses the same
year draws: the uniforms of ``year_draws(config)``, fixed by the experiment
seed, re-read under each point's year law, so points of a sweep and trial
values of a threshold see common random numbers.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd

from sim.config import Config, SweepFactor, sweep_points
from sim.density import Ceiling
from sim.describe import describe_environment
from sim.lifecycle import initial_census
from sim.meanfield import NoEquilibriumError
from sim.year_draws import year_sequence

from .environment import invasion_pair
from .random_branching import establishment_in_years
from .stochastic import (
    InvasionSetting,
    NeutralShare,
    StochasticThreshold,
    YearSequences,
    draw_year_sequences,
    neutral_share_in_years,
    regulated,
    stochastic_invasion,
    stochastic_threshold,
)
from .thresholds import ThresholdResult, _default_bracket, _setting, with_values

__all__ = ["STOCHASTIC_COLUMNS", "YEAR_DRAWS", "THEORY_STREAM", "NEUTRAL_DRAWS", "NEUTRAL_STREAM", "year_draws",
           "neutral_in_years", "invasion_setting", "stochastic_prediction", "stochastic_threshold_result", "year_spans"]

# what a prediction adds to analysis.sweep.PREDICTION_COLUMNS in a variable environment
STOCHASTIC_COLUMNS = (
    "invasion_fitness_se", "log_invasion_fitness_se", "stochastic_growth_rate",
    "stochastic_growth_rate_se", "small_noise_approximation", "resident_stochastic_growth_rate",
    "resident_stochastic_growth_rate_se", "resident_small_noise_approximation",
    "establishment_probability_se", "neutral_expectation_se", "resident_invades_back",
    "resident_return_fitness", "resident_return_census", "prediction", "environment",
)
YEAR_DRAWS = {"n_batches": 20, "batch_length": 1000, "burn_in": 200}
THEORY_STREAM = 3  # SeedSequence(seed, spawn_key=(3,)): the theory's years, apart from any run's
# a neutral mutant's share of reproductive value depends on the first seasons' years: many short
# futures (the backward product forgets its end within a few tens of seasons)
NEUTRAL_DRAWS = {"n_batches": 1000, "batch_length": 100, "burn_in": 0}
# a ceiling's path is stepped one future at a time (analysis.stochastic._ceiling_path): fewer
CEILING_NEUTRAL_DRAWS = {"n_batches": 100, "batch_length": 50, "burn_in": 0}
NEUTRAL_STREAM = 4  # SeedSequence(seed, spawn_key=(4,)): those futures


def year_draws(config: Config) -> YearSequences:
    """The theory's year sequences for ``config`` (the same uniforms for every point)."""
    rng = np.random.default_rng(np.random.SeedSequence(config.experiment.seed, spawn_key=(THEORY_STREAM,)))
    return draw_year_sequences(config.year_types(), rng, **YEAR_DRAWS)


def neutral_in_years(config: Config, *, point: int | None = None) -> NeutralShare:
    """The introduced mutants' fixation probability were they neutral, in the config's random years.

    The mean over ``NEUTRAL_DRAWS`` futures of the mutants' share of the
    random environment's reproductive values at the start
    (``analysis.stochastic.neutral_share_in_years``). With ``shared_years``
    and a ``point`` index, the replicates of that point all live through one
    known sequence (``sim.year_draws.year_sequence``), so the share is read
    under that sequence alone (standard error 0): the conditional
    probability that the point's fixation fraction estimates.
    """
    r, _ = invasion_pair(config)
    years = config.year_types()
    density = config.density_dependence()
    census = initial_census(config)[r]
    count = config.invasion.mutant_count
    if config.environment.shared_years and point is not None:
        seasons = NEUTRAL_DRAWS["batch_length"]
        one = year_sequence(years, config.experiment.seed, point, 0, seasons, shared=True)
        futures = YearSequences(np.vstack([one, one]), 0)
    else:
        rng = np.random.default_rng(np.random.SeedSequence(config.experiment.seed, spawn_key=(NEUTRAL_STREAM,)))
        futures = draw_year_sequences(years, rng, **(CEILING_NEUTRAL_DRAWS if isinstance(density.form, Ceiling)
                                                    else NEUTRAL_DRAWS))
    return neutral_share_in_years(config.schedules()[r], years, density if regulated(density) else None,
                                  futures, census, count, offspring=config.offspring_distribution())


def invasion_setting(config: Config) -> InvasionSetting:
    """The resident, mutant, year types, density and offspring law the stochastic theory reads."""
    r, m = invasion_pair(config)
    schedules = config.schedules()
    density = config.density_dependence()
    return InvasionSetting(schedules[r], schedules[m], config.year_types(),
                           density if regulated(density) else None, config.offspring_distribution())


def stochastic_prediction(config: Config, *, point: int | None = None) -> dict:
    """A sweep point's prediction in a variable environment, keyed like ``analysis.predict``.

    ``point`` (the sweep point's index) lets a ``shared_years`` point's neutral
    expectation be read under its own years (``neutral_in_years``).

    Returns
    -------
    dict
        ``analysis.sweep.PREDICTION_COLUMNS`` read from the stochastic
        theory (invasion fitness exp of the mutant's long-run growth rate in
        the resident's fluctuating environment, or the ratio of stochastic
        growth rates without density dependence; establishment by Monte Carlo
        over year sequences), plus ``invasion_fitness_se``,
        ``stochastic_growth_rate`` (the mutant's log lambda_s),
        ``stochastic_growth_rate_se``, ``small_noise_approximation`` (and the
        resident's), ``establishment_probability_se``, ``prediction``
        ("stochastic") and ``environment`` (in words); ``neutral_expectation``
        is a neutral mutant's fixation probability in random years
        (``neutral_in_years``), with ``neutral_expectation_se``;
        ``resident_invades_back`` is true where the mutant invades and the
        resident, rare, would invade the mutant back (each invades the other:
        between the invasion and the replacement thresholds), from
        ``resident_return_fitness`` (the resident's invasion fitness in the
        mutant's fluctuating environment, where the mutant invades; else nan)
        and ``resident_return_census``, the mutant's mean census as resident
        (with it, ``analysis.comparison.drift_note`` tells when that return is
        within drift).
    """
    s = invasion_setting(config)
    draws = year_draws(config)
    inv = stochastic_invasion(s.resident, s.mutant, s.years, s.density, draws, offspring=s.offspring)
    est = establishment_in_years(s.resident, s.mutant, s.years, s.density, s.offspring, draws,
                                 count=config.invasion.mutant_count)
    try:
        neutral = neutral_in_years(config, point=point)
        neutral, neutral_se = neutral.value, neutral.standard_error
    except NoEquilibriumError:
        neutral = neutral_se = float("nan")
    growth = inv.as_dict()
    fitness = inv.invasion_fitness
    back, back_census = _return_of(s, draws) if fitness > 1 else (math.nan, math.nan)
    return {
        "density_index": float("nan"),
        "census_size": inv.mean_census_size,
        # regulated: the resident's long-run growth is 0 (rate 1) and the mutant's is the
        # invasion fitness; density-free: each allele's exp(log lambda_s)
        "resident_growth_rate": 1.0 if inv.regulated else math.exp(growth["resident_stochastic_growth_rate"]),
        "mutant_growth_rate": fitness if inv.regulated else math.exp(growth["stochastic_growth_rate"]),
        "invasion_fitness": fitness,
        "verdict": "invades" if fitness > 1 else "does not invade" if fitness < 1 else "neutral",
        "establishment_probability": est.establishment_probability,
        "neutral_expectation": neutral,
        **{k: v for k, v in growth.items() if k not in ("resident", "mutant", "regulated",
                                                        "invasion_fitness", "mean_census_size")},
        "establishment_probability_se": est.standard_error,
        "neutral_expectation_se": neutral_se,
        "resident_invades_back": bool(back > 1),
        "resident_return_fitness": back,
        "resident_return_census": back_census,
        "prediction": "stochastic",
        "environment": describe_environment(config),
    }


def _return_of(s: InvasionSetting, draws: YearSequences) -> tuple[float, float]:
    """The resident's invasion fitness when rare in the mutant's fluctuating environment (the
    same years), and the mutant's mean census there; nan for both where there is none (no
    density dependence: the reverse fitness is then the inverse). Above 1 each invades the
    other, and fixation of the mutant is not what its invasion fitness predicts."""
    if s.density is None:
        return math.nan, math.nan
    try:
        back = stochastic_invasion(s.mutant, s.resident, s.years, s.density, draws, offspring=s.offspring)
    except (NoEquilibriumError, ValueError, ArithmeticError):
        return math.nan, math.nan
    return float(back.invasion_fitness), float(back.mean_census_size)


def stochastic_threshold_result(config: Config, parameter: str, *, bracket=None,
                                group: SweepFactor | None = None) -> ThresholdResult:
    """Where the stochastic invasion fitness crosses 1 along ``parameter`` (common random numbers).

    The bracket defaults as in ``analysis.threshold`` (the swept range, [0, 1]
    for a probability, else [0, 2 x the current value]). The result's
    ``standard_error`` is the threshold's, from the year sampling (delta
    method, ``analysis.stochastic.stochastic_threshold``).
    """
    setting = _setting(parameter, group)
    lo, hi = (float(b) for b in bracket) if bracket is not None else _default_bracket(config, parameter)[:2]
    base = config.model_copy(update={"sweep": None})
    try:
        with_values(config, setting(lo))
    except Exception:  # a key that must be > 0 (e.g. density.capacity)
        lo = lo + 1e-3 * (hi - lo)
    draws = year_draws(config)

    def at(value: float) -> InvasionSetting:
        sweep = {path: [v] for path, v in setting(value).items()}
        return invasion_setting(sweep_points(base.model_copy(update={"sweep": sweep}))[0].config)

    t = stochastic_threshold(at, draws, bracket=(lo, hi))
    g_lo, g_hi = t.log_fitness_at_bracket
    back = _replacement(at, draws, t, lo, hi) if t.converged else None
    env = describe_environment(config)
    message = (f"{parameter}: stochastic invasion fitness is 1 at {t.value:.6g} (SE {t.standard_error:.2g}); "
               if t.converged else f"{parameter}: no stochastic threshold in [{lo:g}, {hi:g}] ({t.message}); ")
    message += (f"mutant invades {'above' if g_hi > 0 else 'below'} it. " if t.converged else "")
    if back is not None and back.value != t.value:
        message += (f"The resident invades back {'below' if g_hi > 0 else 'above'} {back.value:.6g} "
                    f"(SE {back.standard_error:.2g}): in between each invades the other, and a large "
                    "population fixes the mutant only past it. ")
    message += \
        (f"Prediction: stochastic theory ({draws.n_batches} batches of {draws.batch_length} seasons, "
         f"the same years for every trial value); environment: {env}")
    linked = {p: v for p, v in group.along(t.value).items() if p != parameter} \
        if group is not None and t.converged else {}
    return ThresholdResult(parameter=parameter, value=t.value, converged=t.converged, bracket=(lo, hi),
                           fitness_at_bracket=(math.exp(g_lo), math.exp(g_hi)),
                           invades_above=(g_hi > 0) if t.converged else None,
                           crossings=int(t.converged), message=message, linked=linked,
                           standard_error=t.standard_error,
                           replacement=back.value if back is not None else float("nan"),
                           replacement_standard_error=back.standard_error if back is not None else float("nan"))


def _replacement(at, draws: YearSequences, t, lo: float, hi: float):
    """Where the resident stops invading the mutant-as-resident, on the mutant's side of ``t``.

    The roles swapped at every trial value, the same years (common random
    numbers). None without density dependence (there the reverse fitness is
    the inverse, so the two thresholds coincide) or where the mutant cannot
    be a resident; ``t`` itself where the resident does not invade back at
    ``t`` (no region where each invades the other).
    """
    if not regulated(at(t.value).density):
        return None
    above = t.log_fitness_at_bracket[1] > 0

    def swapped(value: float) -> InvasionSetting:
        s = at(value)
        return replace(s, resident=s.mutant, mutant=s.resident)

    try:
        back = stochastic_threshold(swapped, draws, bracket=(t.value, hi) if above else (lo, t.value))
    except (NoEquilibriumError, ValueError, ArithmeticError):
        return None
    if not back.converged:  # the resident never invades back on the mutant's side: replacement at once
        return StochasticThreshold(t.value, t.standard_error, True, back.bracket, back.log_fitness_at_bracket,
                                   t.slope, "no region where each invades the other")
    return back


def year_spans(path, *, point: int = 0, replicate: int = 0) -> pd.DataFrame:
    """Runs of seasons of one year type in one replicate, for shading a trajectory figure.

    Returns
    -------
    DataFrame
        Columns ``start``, ``stop`` (census steps: the run covers the seasons
        from census ``start`` to census ``stop``) and ``year`` (its type), in
        order; empty for a file without ``[environment]``.
    """
    from sim.store import read_years

    years = read_years(path, points=[point], replicates=[replicate])
    if years.empty:
        return pd.DataFrame(columns=["start", "stop", "year"])
    names = years["year"].to_numpy()
    steps = years["step"].to_numpy()
    breaks = np.flatnonzero(names[1:] != names[:-1]) + 1
    first, last = np.r_[0, breaks], np.r_[breaks, names.size] - 1
    return pd.DataFrame({"start": steps[first] - 1, "stop": steps[last], "year": names[first]})
