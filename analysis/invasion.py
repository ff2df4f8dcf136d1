"""Invasion of a rare mutant: its fitness, its establishment, and the neutral expectation.

``predict(config)`` gathers what theory says about one (sweep point) config
with an ``[invasion]`` table: the resident's equilibrium, the mutant's
invasion fitness and verdict, the probability that the introduced mutants
establish, and the fixation probability a neutral mutant would have.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from sim.config import Config
from sim.lifecycle import initial_census

from .branching import extinction_probabilities
from .demography import schedule_demography
from .environment import ResidentEnvironment, invasion_pair, resident_environment

__all__ = ["Prediction", "invasion_fitness", "verdict", "neutral_expectation", "predict"]

NEUTRAL_TOLERANCE = 1e-9  # |invasion fitness - 1| below this is called neutral (solver precision)


def invasion_fitness(config: Config, env: ResidentEnvironment | None = None) -> float:
    """The mutant's dominant eigenvalue in the resident's equilibrium environment.

    Parameters
    ----------
    config : Config
        One (sweep point) config with ``[invasion]``.
    env : ResidentEnvironment, optional
        The resident's environment, if already computed.

    Notes
    -----
    A rare mutant invades iff this exceeds 1 (Metz, Nisbet & Geritz 1992,
    TREE 7: 198). Without density dependence the resident has no equilibrium;
    the invasion fitness is then defined as the ratio of the mutant's to the
    resident's density-independent growth rates, lambda_m / lambda_r, so that
    the verdict "invades iff > 1" means the mutant's share grows (Cole 1954;
    Charnov & Schaffer 1973 compare growth rates the same way).
    """
    env = env or resident_environment(config)
    _, m = invasion_pair(config)
    lam = schedule_demography(config.schedules()[m], env.factors,
                              offspring=config.offspring_distribution()).growth_rate
    return lam if env.regulated else lam / env.demography.growth_rate


def verdict(fitness: float) -> str:
    """ "invades" (fitness > 1), "does not invade" (< 1) or "neutral" (within 1e-9 of 1)."""
    if not np.isfinite(fitness):
        return "undefined"
    if abs(fitness - 1.0) <= NEUTRAL_TOLERANCE:
        return "neutral"
    return "invades" if fitness > 1.0 else "does not invade"


def neutral_expectation(config: Config, env: ResidentEnvironment | None = None) -> float:
    """The introduced mutants' share of total reproductive value at the start.

    Notes
    -----
    A neutral allele's fixation probability is its initial share of
    reproductive value (for age-structured populations, reproductive values
    weight individuals by their expected contribution to the future
    population; Fisher 1930; Caswell 2001, sec. 4.5). The resident starts from
    ``sim.lifecycle.initial_census`` (its equilibrium age structure, rounded,
    or ``resident_count`` individuals); the values v are the left eigenvector
    of the resident's equilibrium matrix, and the mutants, valued as if they
    were residents, are ``mutant_count`` individuals of age 1.
    """
    env = env or resident_environment(config)
    r, _ = invasion_pair(config)
    census = initial_census(config)
    v = env.demography.reproductive_values
    resident_value = float(census[r, : v.size] @ v + census[r, v.size :].sum() * v[-1])
    mutant_value = config.invasion.mutant_count * float(v[0])
    total = resident_value + mutant_value
    return mutant_value / total if total > 0 else float("nan")


@dataclass(frozen=True)
class Prediction:
    """What theory says about one invasion config.

    Attributes
    ----------
    resident, mutant : str
        Allele names.
    regulated : bool
        True when the resident sits at a density-regulated equilibrium.
    density_index : float
        D* at the resident's equilibrium (nan without density dependence).
    census_size : float
        The resident's equilibrium census size (nan without density dependence).
    resident_growth_rate : float
        1 at an equilibrium; the density-free growth rate otherwise.
    mutant_growth_rate : float
        The mutant's dominant eigenvalue in the resident's environment.
    invasion_fitness : float
        ``mutant_growth_rate`` (at an equilibrium) or the ratio of growth rates.
    verdict : str
        "invades" (invasion fitness above 1), "does not invade" (below 1) or
        "neutral" (within 1e-9 of 1, the precision of the equilibrium solver).
    establishment_probability : float
        Probability that the ``mutant_count`` introduced mutants (age 1) escape
        early loss (branching process in the resident's environment).
    establishment_converged : bool
        False if the branching-process iteration hit its cap.
    neutral_expectation : float
        Fixation probability of the introduced mutants were they neutral.
    """

    resident: str
    mutant: str
    regulated: bool
    density_index: float
    census_size: float
    resident_growth_rate: float
    mutant_growth_rate: float
    invasion_fitness: float
    verdict: str
    establishment_probability: float
    establishment_converged: bool
    neutral_expectation: float

    def as_dict(self) -> dict:
        """Plain-Python values (for JSON and DataFrame rows)."""
        return {k: (v.item() if isinstance(v, np.generic) else v) for k, v in asdict(self).items()}

    @property
    def invades(self) -> bool:
        """True when the verdict is "invades"."""
        return self.verdict == "invades"


def predict(config: Config) -> Prediction:
    """Resident equilibrium, invasion fitness and verdict, establishment and neutral expectation.

    Parameters
    ----------
    config : Config
        One (sweep point) config with ``[invasion]``; a config with a sweep is
        read without it (use ``analysis.predict_points`` for every point).

    Raises
    ------
    ValueError
        Without ``[invasion]``.
    sim.meanfield.NoEquilibriumError
        When density dependence is present but the resident has no equilibrium.
    """
    env = resident_environment(config)
    r, m = invasion_pair(config)
    mutant = config.schedules()[m]
    mutant_lambda = schedule_demography(mutant, env.factors,
                                        offspring=config.offspring_distribution()).growth_rate
    fitness = invasion_fitness(config, env)
    ext = extinction_probabilities(mutant, env.factors, config.offspring_distribution())
    return Prediction(
        resident=config.allele_names[r],
        mutant=config.allele_names[m],
        regulated=env.regulated,
        density_index=float(env.density_index),
        census_size=float(env.census_size),
        resident_growth_rate=float(env.demography.growth_rate),
        mutant_growth_rate=float(mutant_lambda),
        invasion_fitness=float(fitness),
        verdict=verdict(fitness),
        establishment_probability=ext.establishment(config.invasion.mutant_count, 1),
        establishment_converged=ext.converged,
        neutral_expectation=neutral_expectation(config, env),
    )
