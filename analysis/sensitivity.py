"""Sensitivity and elasticity of the mutant's invasion fitness to its vital rates.

The mutant's invasion fitness is the dominant eigenvalue of its projection
matrix in the resident's equilibrium environment (``analysis.invasion``);
its sensitivities to the matrix entries are the classical eigenvalue
sensitivities (Caswell 2001, Matrix Population Models, ch. 9), carried to
the vital rates m(a), s(a) and c through the matrix of ``sim.meanfield``.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace

import numpy as np
import pandas as pd

from sim.config import Config
from sim.density import Factors
from sim.kernel import SeasonKernel
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
    each derivative is a central difference of the kernel's matrix (step 1e-6).
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


def _kernel_rate_derivatives(schedule: Schedule, factors: Factors, offspring):
    from sim.meanfield import projection_matrix

    h = 1e-6

    def derivative(change) -> np.ndarray:
        up, down = (projection_matrix(change(d), factors, offspring=offspring) for d in (h, -h))
        return (up - down) / (2 * h)

    def at_age(field: str, a: int, d: float) -> Schedule:
        values = getattr(schedule, field).copy()
        values[a] += d
        return replace(schedule, **{field: values})

    n = schedule.n_ages
    out = [(f"m({a + 1})", "fecundity", a + 1, float(schedule.fecundity[a]),
            derivative(lambda d, a=a: at_age("fecundity", a, d))) for a in range(n)]
    out += [(f"s({a + 1})", "survival", a + 1, float(schedule.survival[a]),
             derivative(lambda d, a=a: at_age("survival", a, d))) for a in range(n)]
    c, c_o = schedule.juvenile_survival, schedule.orphan_survival
    # c: the young's survival while the parent lives (all young's, where orphans have no rate
    # of their own); c_o: that of orphaned young
    out.append(("c", "juvenile_survival", None, float(c),
                derivative(lambda d: replace(schedule, juvenile_survival=c + d))))
    if c_o is not None:
        out.append(("c_o", "orphan_survival", None, float(c_o),
                    derivative(lambda d: replace(schedule, orphan_survival=c_o + d))))
    return out


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


def sensitivities(config: Config, env: ResidentEnvironment | None = None) -> pd.DataFrame:
    """The mutant's sensitivities for one (sweep point) invasion config, one row per vital rate.

    Columns ``SENSITIVITY_COLUMNS``. The environment is the resident's
    equilibrium (without density dependence, the density-free one, and the
    invasion fitness is lambda_m / lambda_r, see ``analysis.invasion_fitness``).
    """
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
