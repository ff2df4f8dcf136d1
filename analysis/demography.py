"""Demographic quantities of one schedule's projection matrix (Caswell 2001).

The matrix itself is the season kernel's (``sim.kernel.SeasonKernel.projection_matrix``,
a pre-breeding census Leslie matrix with a plus-group); this module only reads it. Split it
as A = T + F, with T the survival-and-ageing part (sub-diagonal and
plus-group) and F the fertility part (first row: recruits at age 1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.density import Factors
from sim.kernel import SeasonKernel
from sim.schedules import Schedule

__all__ = ["Demography", "dominant_eigen", "schedule_demography"]


@dataclass(frozen=True)
class Demography:
    """The asymptotic demography of one schedule in one environment.

    Attributes
    ----------
    matrix : ndarray, shape (n_ages, n_ages)
        The projection matrix A.
    growth_rate : float
        Dominant eigenvalue lambda of A (per-season growth ratio).
    net_reproductive_number : float
        R0, expected recruits (at age 1) per recruit over its life; ``inf`` when
        the plus-group survives with probability 1.
    generation_time : float
        Mean age of the parents of the recruits of one season in the stable
        population (``nan`` when lambda is 0).
    stable_age_distribution : ndarray
        Right eigenvector w of lambda, summing to 1.
    reproductive_values : ndarray
        Left eigenvector v of lambda, scaled so that age 1 has value 1 (all
        zeros when lambda is 0).
    """

    matrix: np.ndarray
    growth_rate: float
    net_reproductive_number: float
    generation_time: float
    stable_age_distribution: np.ndarray
    reproductive_values: np.ndarray


def dominant_eigen(a: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Dominant eigenvalue of a non-negative matrix with its right and left eigenvectors.

    Returns lambda, w (summing to 1) and v (scaled so that ``v[0] == 1`` where
    possible, else summing to 1). The Perron root is taken as the eigenvalue
    with the largest real part: for an imprimitive matrix other roots share its
    modulus but have smaller real parts.
    """
    vals, right = np.linalg.eig(a)
    i = int(np.argmax(vals.real))
    lam = float(max(vals[i].real, 0.0))
    w = np.abs(right[:, i].real)
    w = w / w.sum() if w.sum() > 0 else w
    vals_t, left = np.linalg.eig(a.T)
    v = np.abs(left[:, int(np.argmax(vals_t.real))].real)
    if v[0] > 1e-300:
        v = v / v[0]
    elif v.sum() > 0:
        v = v / v.sum()
    return lam, w, v


def schedule_demography(schedule: Schedule, factors: Factors = Factors(), *,
                        offspring=None) -> Demography:
    """Growth rate, R0, generation time, stable ages and reproductive values.

    Parameters
    ----------
    schedule : Schedule
        The breeding schedule (m(a), s(a), c).
    factors : Factors, optional
        Density factors on fecundity, adult survival and recruitment (all 1
        by default: the density-independent demography).
    offspring : offspring law, optional
        Default Poisson; it matters only under a brood effect (the expected
        recruits per parent depend on the whole law).

    Notes
    -----
    With A = T + F (survival and fertility parts; Caswell 2001, sec. 5.3.4):

    - R0 = dominant eigenvalue of F N, N = (I - T)^-1 the fundamental matrix;
      for one recruit class this is sum_a l(a) F(a), l(a) = s(1)...s(a-1).
    - generation time = lambda (v . w) / (v F w), the mean age of parents of
      the offspring produced by a population at its stable age distribution
      (Bienvenu & Legendre 2015, Am. Nat. 185: 834; Caswell 2001 sec. 5.3.5,
      equal to sum_a a lambda^-a l(a) F(a) for a Leslie matrix).
    - w and v are the right and left eigenvectors of lambda (Caswell 2001,
      sec. 4.5).
    """
    kernel = SeasonKernel.for_schedule(schedule, offspring=offspring)
    a = kernel.projection_matrix(factors)
    n = a.shape[0]
    # survival part: the same matrix with births switched off (for one age class the
    # plus-group's survival shares the cell A[0, 0] with fertility)
    t = kernel.projection_matrix(factors._replace(fecundity=0.0))
    f = a - t
    lam, w, v = dominant_eigen(a)
    try:
        fundamental = np.linalg.inv(np.eye(n) - t)
        r0 = float(np.max(np.abs(np.linalg.eigvals(f @ fundamental))))
    except np.linalg.LinAlgError:  # a plus-group that never dies: I - T is singular
        r0 = float("inf") if np.any(f > 0) else 0.0
    vfw = float(v @ f @ w)
    generation = lam * float(v @ w) / vfw if vfw > 0 and lam > 0 else float("nan")
    return Demography(a, lam, r0, generation, w, v)
