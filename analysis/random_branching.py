"""Establishment of rare mutants in a random environment: a branching process in random years.

The mutants' lineage meets, season by season, the year's scaled rates
(``sim.years.scaled_schedule``) and the density factors of the resident's
path through the same years (``analysis.stochastic.resident_path``). Given
those, its extinction probability is a composition of the seasons' offspring
generating functions, the season kernel's G (``SeasonKernel.offspring_pgf``,
parental care and brood size included) evaluated for many environments at once.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from sim.density import DensityDependence, Factors
from sim.kernel import SeasonKernel
from sim.schedules import Schedule
from sim.years import YearTypes, scaled_schedule

from .stochastic import YearSequences, _plain, regulated, resident_path

__all__ = ["StochasticEstablishment", "establishment_in_years"]



@dataclass(frozen=True)
class StochasticEstablishment:
    """Probability that introduced mutants escape early loss in a random environment.

    Attributes
    ----------
    establishment_probability : float
        1 - E[q(env)^count], averaged over environments at introduction.
    standard_error : float
        Monte Carlo standard error over the sampled environments.
    horizon_gap : float
        Mean increase of the extinction probability from half the horizon to
        the full one (a guide to the truncation error, which it exceeds when
        convergence is geometric with ratio below 1/2 per half-horizon).
    n_samples, horizon : int
    """

    establishment_probability: float
    standard_error: float
    horizon_gap: float
    n_samples: int
    horizon: int

    def as_dict(self) -> dict:
        return _plain(asdict(self))


def _quenched_extinction(mutant, years, seq, factors, offspring, start, stop):
    """P(lineage of one mutant of each age, born at season ``start``, is gone by ``stop`` | years).

    ``factors``: each season's density factors (arrays of the shape of ``seq``; a ``Cull`` for a
    ceiling's removal)."""
    kind, (f_fec, f_adult, f_rec) = type(factors), factors
    kernels = [SeasonKernel.for_schedule(scaled_schedule(mutant, y), offspring=offspring) for y in years.types]
    q = np.zeros((seq.shape[0], mutant.n_ages))
    for t in range(stop - 1, start - 1, -1):
        y = seq[:, t]
        for k in np.unique(y):
            at = y == k
            q[at] = kernels[k].offspring_pgf(q[at], kind(f_fec[at, t], f_adult[at, t], f_rec[at, t]))
    return q


def establishment_in_years(
    resident: Schedule | None, mutant: Schedule, years: YearTypes, density: DensityDependence | None,
    offspring, sequences: YearSequences, *, count: int = 1, age: int = 1,
) -> StochasticEstablishment:
    """Establishment probability of ``count`` mutants of census age ``age`` in a random environment.

    Parameters
    ----------
    resident : Schedule or None
        Sets the density factors along its path (unused, may be None,
        without density dependence).
    mutant : Schedule
    years : YearTypes
    density : DensityDependence or None
    offspring : Poisson | Fixed | NegativeBinomial
        Anything with ``pgf(s, mean)``.
    sequences : YearSequences
        Each batch gives one environment: the years and the resident's
        density factors from the end of its burn-in on; the mutants arrive
        then, and the recorded seasons are the horizon H.
    count, age : int, optional
        Founders and their census age.

    Notes
    -----
    Given the environment, the mutants form a branching process in a varying
    environment whose extinction probability by season t0 + H is the
    composition q = G_t0(G_t0+1(... G_t0+H-1(0))) of the seasons' offspring
    generating functions (Smith & Wilkinson 1969, Ann. Math. Stat. 40: 814;
    Athreya & Karlin 1971, Ann. Math. Stat. 42: 1499; from memory). It increases to the extinction probability as H
    grows. Averaging 1 - q^count over independent environments is a Monte
    Carlo estimate whose standard error is the spread over sqrt(n); computing
    q exactly given each environment (rather than simulating lineages) removes
    the demographic part of the sampling error (a conditional expectation has
    the smaller variance: Rao-Blackwell).
    """
    if age < 1 or count < 1:
        raise ValueError(f"age and count must be >= 1; got age {age}, count {count}")
    sequences = sequences.for_years(years)
    seq = sequences.indices
    if regulated(density):
        factors = resident_path(resident, years, density, sequences, offspring=offspring).factors
    else:
        factors = Factors(*(np.ones(seq.shape),) * 3)
    start, stop = sequences.burn_in, seq.shape[1]
    half = start + (stop - start) // 2
    args = (mutant, years, seq, factors, offspring)
    q = _quenched_extinction(*args, start, stop)
    q_half = _quenched_extinction(*args, start, half)
    col = min(age, mutant.n_ages) - 1
    est = 1.0 - q[:, col] ** count
    gap = float(np.mean(q[:, col] - q_half[:, col]))
    return StochasticEstablishment(
        float(est.mean()), float(est.std(ddof=1) / np.sqrt(est.size)), gap, est.size, stop - start
    )

