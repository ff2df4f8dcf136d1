"""Sensitivity and elasticity of the mutant's invasion fitness to its vital rates.

The mutant's invasion fitness is the dominant eigenvalue of its projection
matrix in the resident's equilibrium environment (``analysis.invasion``);
its sensitivities to the matrix entries are the classical eigenvalue
sensitivities (Caswell 2001, Matrix Population Models, ch. 9), carried to
the vital rates m(a), s(a) and c through the matrix of ``sim.meanfield``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np
import pandas as pd

from sim.config import Config
from sim.density import Factors
from sim.kernel import SeasonKernel
from sim.schedules import Schedule

from .demography import dominant_eigen
from .environment import ResidentEnvironment, invasion_pair, resident_environment
from .stochastic import log_invasion_fitness
from .varying_years import invasion_setting, year_draws

__all__ = [
    "SENSITIVITY_COLUMNS",
    "VitalRateSensitivity",
    "sensitivities",
    "sweep_sensitivities",
    "stochastic_sensitivities",
    "vital_rates",
    "derivative",
    "vital_rate_sensitivities",
]

SENSITIVITY_COLUMNS = ["rate", "kind", "age", "value", "sensitivity", "elasticity", "selection_gradient"]


@dataclass(frozen=True)
class VitalRateSensitivity:
    """How the mutant's invasion fitness responds to one of its vital rates.

    Attributes
    ----------
    rate : str
        ``m(a)``, ``s(a)`` (census age a), ``c`` or, for an allele with
        ``orphan_survival``, ``c_o``.
    kind : str
        ``fecundity``, ``survival``, ``juvenile_survival`` or ``orphan_survival``.
    age : int or None
        Census age (None for c and c_o).
    value : float
        The rate's value in the schedule (before density factors).
    sensitivity : float
        d(invasion fitness) / d(rate).
    elasticity : float
        d ln(invasion fitness) / d ln(rate) = rate / fitness x sensitivity.
    selection_gradient : float
        d ln(invasion fitness) / d(rate) = sensitivity / fitness (Lande 1982).
    """

    rate: str
    kind: str
    age: int | None
    value: float
    sensitivity: float
    elasticity: float
    selection_gradient: float

    def as_dict(self) -> dict:
        return asdict(self)


def _rate_derivatives(schedule: Schedule, factors: Factors, offspring=None):
    """(name, kind, age, value, dA/d rate) for every vital rate (and c_o where the allele cares).

    Without parental effects A is linear in each rate and the derivatives are
    exact. With them the fertility row f_rec P'(x; m f_fec) (sigma c + (1 - sigma)
    c_o), sigma = s f_adult (``SeasonKernel.recruits_per_parent``) is not, and
    each derivative is a difference of the kernel's matrix (``derivative``, step 1e-6).
    """
    if SeasonKernel.for_schedule(schedule).parental:
        return _kernel_rate_derivatives(schedule, factors, offspring)
    n = schedule.n_ages
    nxt = np.minimum(np.arange(n) + 1, n - 1)
    birth = factors.fecundity * factors.recruitment
    out = []
    for a in range(n):
        d = np.zeros((n, n))
        d[0, a] = birth * schedule.juvenile_survival
        out.append((f"m({a + 1})", "fecundity", a + 1, float(schedule.fecundity[a]), d))
    for a in range(n):
        d = np.zeros((n, n))
        d[nxt[a], a] = factors.adult
        out.append((f"s({a + 1})", "survival", a + 1, float(schedule.survival[a]), d))
    d = np.zeros((n, n))
    d[0, :] = schedule.fecundity * birth
    out.append(("c", "juvenile_survival", None, float(schedule.juvenile_survival), d))
    return out


def vital_rates(schedule: Schedule) -> list[tuple]:
    """(name, kind, age, value, with_rate) for each vital rate of ``schedule``: m(a), s(a), c and,
    where the allele has one, c_o; ``with_rate(x)`` is the schedule with that rate set to x."""
    def at_age(field: str, a: int):
        def with_rate(x: float) -> Schedule:
            values = getattr(schedule, field).copy()
            values[a] = x
            return replace(schedule, **{field: values})
        return with_rate

    n = schedule.n_ages
    out = [(f"m({a + 1})", "fecundity", a + 1, float(schedule.fecundity[a]), at_age("fecundity", a))
           for a in range(n)]
    out += [(f"s({a + 1})", "survival", a + 1, float(schedule.survival[a]), at_age("survival", a))
            for a in range(n)]
    # c: the young's survival while the parent lives (all young's, where orphans have no rate of
    # their own); c_o: that of orphaned young
    out.append(("c", "juvenile_survival", None, float(schedule.juvenile_survival),
                lambda x: replace(schedule, juvenile_survival=x)))
    if schedule.orphan_survival is not None:
        out.append(("c_o", "orphan_survival", None, float(schedule.orphan_survival),
                    lambda x: replace(schedule, orphan_survival=x)))
    return out


def derivative(fn, x: float, h: float):
    """d fn / dx at x: a central difference, or at a rate below h (which cannot go negative) the
    second-order forward one; both with error O(h^2) (common practice)."""
    if x >= h:
        return (fn(x + h) - fn(x - h)) / (2 * h)
    return (-3 * fn(x) + 4 * fn(x + h) - fn(x + 2 * h)) / (2 * h)


def _kernel_rate_derivatives(schedule: Schedule, factors: Factors, offspring):
    from sim.meanfield import projection_matrix

    return [(name, kind, age, value,
             derivative(lambda x, w=with_rate: projection_matrix(w(x), factors, offspring=offspring), value, 1e-6))
            for name, kind, age, value, with_rate in vital_rates(schedule)]


def vital_rate_sensitivities(
    schedule: Schedule, factors: Factors, *, scale: float = 1.0, offspring=None
) -> list[VitalRateSensitivity]:
    """Sensitivity, elasticity and selection gradient of lambda to each vital rate.

    Parameters
    ----------
    schedule : Schedule
        The mutant's schedule.
    factors : Factors
        The density factors of the environment (the resident's equilibrium).
    scale : float, optional
        Invasion fitness = scale x lambda (1 at an equilibrium; 1 / lambda_resident
        without density dependence).
    offspring : optional
        The offspring law (default Poisson; it matters under a brood effect).

    Notes
    -----
    The sensitivity of lambda to entry a_ij is v_i w_j / <v, w>, with w and v
    the right and left eigenvectors of lambda (Caswell 2001, eq. 9.10). Each
    entry of A is linear in each vital rate (A[0, a] = m(a) f_fec c f_rec,
    A[a+1, a] = s(a) f_adult, the plus-group A[L, L] = s(L) f_adult), so
    d lambda / dx = sum_ij S_ij dA_ij / dx (chain rule, Caswell 2001 sec. 9.4).
    The elasticities to the matrix entries sum to 1 (Caswell 2001 sec. 9.2).
    """
    from sim.meanfield import projection_matrix

    a = projection_matrix(schedule, factors, offspring=offspring)
    lam, w, v = dominant_eigen(a)
    vw = float(v @ w)
    sens = np.outer(v, w) / vw if vw > 0 else np.zeros_like(a)
    fitness = scale * lam
    rows = []
    for name, kind, age, value, d in _rate_derivatives(schedule, factors, offspring):
        s = scale * float(np.sum(sens * d))
        rows.append(
            VitalRateSensitivity(
                rate=name,
                kind=kind,
                age=age,
                value=value,
                sensitivity=s,
                elasticity=value * s / fitness if fitness > 0 else float("nan"),
                selection_gradient=s / fitness if fitness > 0 else float("nan"),
            )
        )
    return rows


SENSITIVITY_STEP = 1e-5  # the rate step of the differences (the log fitness is smooth in rates on fixed draws)


def stochastic_sensitivities(config: Config) -> list[VitalRateSensitivity]:
    """The mutant's sensitivities (``VitalRateSensitivity``) of its stochastic
    invasion fitness: differences along each vital rate on the theory's year draws.

    The draws are the same for every trial value (common random numbers), so the estimated
    invasion fitness is a smooth function of the rates and its differences have no sampling
    noise of their own; they estimate the derivative of the large-draw limit within the
    invasion fitness's own sampling error (Caswell 2001, ch. 14, on the stochastic
    sensitivities this estimates; from memory). A rate at which a year pushes a survival
    above 1 gives nan.
    """
    s = invasion_setting(config)
    draws = year_draws(config)
    cache: dict = {}

    def fitness(mutant) -> float:
        return math.exp(log_invasion_fitness(replace(s, mutant=mutant), draws, cache))

    base = fitness(s.mutant)
    rows = []
    for name, kind, age, value, with_rate in vital_rates(s.mutant):
        try:
            sens = float(derivative(lambda x, w=with_rate: fitness(w(x)), value, SENSITIVITY_STEP))
        except ValueError:  # scaled_schedule: a survival above 1 in some year
            sens = math.nan
        rows.append(VitalRateSensitivity(name, kind, age, value, sens, value * sens / base, sens / base))
    return rows


def sensitivities(config: Config, env: ResidentEnvironment | None = None) -> pd.DataFrame:
    """The mutant's sensitivities for one (sweep point) invasion config, one row per vital rate.

    Columns ``SENSITIVITY_COLUMNS``. The environment is the resident's
    equilibrium (without density dependence, the density-free one, and the
    invasion fitness is lambda_m / lambda_r, see ``analysis.invasion_fitness``);
    with year types, those of the stochastic invasion fitness
    (``stochastic_sensitivities``).
    """
    if config.environment is not None:
        rows = stochastic_sensitivities(config)
        return pd.DataFrame([r.as_dict() for r in rows], columns=SENSITIVITY_COLUMNS)
    env = env or resident_environment(config)
    _, m = invasion_pair(config)
    scale = 1.0 if env.regulated else 1.0 / env.demography.growth_rate
    rows = vital_rate_sensitivities(config.schedules()[m], env.factors, scale=scale,
                                    offspring=config.offspring_distribution())
    return pd.DataFrame([r.as_dict() for r in rows], columns=SENSITIVITY_COLUMNS)


def sweep_sensitivities(config: Config) -> pd.DataFrame:
    """``sensitivities`` at every sweep point: ``point``, the swept values, then the rows.

    A point where the resident has no equilibrium gets one row with its reason
    in ``problem`` (and nan values).
    """
    from sim.config import sweep_points
    from sim.meanfield import NoEquilibriumError

    frames = []
    for p in sweep_points(config):
        try:
            t = sensitivities(p.config)
            t.insert(len(t.columns), "problem", "")
        except NoEquilibriumError as err:
            t = pd.DataFrame([{c: float("nan") for c in SENSITIVITY_COLUMNS} | {"problem": str(err)}])
        for k, (path, value) in enumerate({"point": p.index, **p.values}.items()):
            t.insert(k, path, [value] * len(t))
        frames.append(t)
    return pd.concat(frames, ignore_index=True)
