"""Sensitivity and elasticity of the mutant's invasion fitness to its vital rates.

The mutant's invasion fitness is the dominant eigenvalue of its projection
matrix in the resident's equilibrium environment (``analysis.invasion``);
its sensitivities to the matrix entries are the classical eigenvalue
sensitivities (Caswell 2001, Matrix Population Models, ch. 9), carried to
the vital rates m(a), s(a) and c through the matrix of ``sim.meanfield``.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from sim.config import Config
from sim.density import Factors
from sim.schedules import Schedule

from .demography import dominant_eigen
from .environment import ResidentEnvironment, invasion_pair, resident_environment

__all__ = [
    "SENSITIVITY_COLUMNS",
    "VitalRateSensitivity",
    "sensitivities",
    "sweep_sensitivities",
    "vital_rate_sensitivities",
]

SENSITIVITY_COLUMNS = ["rate", "kind", "age", "value", "sensitivity", "elasticity", "selection_gradient"]


@dataclass(frozen=True)
class VitalRateSensitivity:
    """How the mutant's invasion fitness responds to one of its vital rates.

    Attributes
    ----------
    rate : str
        ``m(a)``, ``s(a)`` (census age a) or ``c``.
    kind : str
        ``fecundity``, ``survival`` or ``juvenile_survival``.
    age : int or None
        Census age (None for c).
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


def _rate_derivatives(schedule: Schedule, factors: Factors):
    """(name, kind, age, value, dA/d rate) for every vital rate; A is linear in each one."""
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


def vital_rate_sensitivities(
    schedule: Schedule, factors: Factors, *, scale: float = 1.0
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

    a = projection_matrix(schedule, factors)
    lam, w, v = dominant_eigen(a)
    vw = float(v @ w)
    sens = np.outer(v, w) / vw if vw > 0 else np.zeros_like(a)
    fitness = scale * lam
    rows = []
    for name, kind, age, value, d in _rate_derivatives(schedule, factors):
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


def sensitivities(config: Config, env: ResidentEnvironment | None = None) -> pd.DataFrame:
    """The mutant's sensitivities for one (sweep point) invasion config, one row per vital rate.

    Columns ``SENSITIVITY_COLUMNS``. The environment is the resident's
    equilibrium (without density dependence, the density-free one, and the
    invasion fitness is lambda_m / lambda_r, see ``analysis.invasion_fitness``).
    """
    env = env or resident_environment(config)
    _, m = invasion_pair(config)
    scale = 1.0 if env.regulated else 1.0 / env.demography.growth_rate
    rows = vital_rate_sensitivities(config.schedules()[m], env.factors, scale=scale)
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
