"""Establishment of rare mutants: the multitype (age-structured) branching process.

While mutants are rare they do not change the density index, so each one
lives in the resident's equilibrium environment independently of the
others: their numbers by census age form a multitype Galton-Watson process
whose types are the census ages (Harris 1963; Athreya & Ney 1972). The
probability that the mutant lineage escapes early loss is one minus the
extinction probability of that process.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.density import Factors
from sim.kernel import SeasonKernel
from sim.schedules import Schedule

from .demography import dominant_eigen

__all__ = ["Extinction", "offspring_pgf", "extinction_probabilities", "establishment_probability"]

_CRITICAL = 1e-9  # |lambda - 1| below this is treated as exactly critical


@dataclass(frozen=True)
class Extinction:
    """Extinction probabilities of a multitype branching process.

    Attributes
    ----------
    probabilities : ndarray, shape (n_ages,)
        q[a]: probability that the lineage of one individual of census age
        a + 1 dies out.
    growth_rate : float
        Dominant eigenvalue of the mean matrix (the projection matrix).
    iterations : int
        Fixed-point iterations used (0 where a theorem gave q = 1).
    converged : bool
        False when the iteration stopped at ``max_iter`` before its error bound
        fell below ``tol``; ``probabilities`` are then lower bounds.
    error_bound : float
        Estimated distance of ``probabilities`` from the limit.
    """

    probabilities: np.ndarray
    growth_rate: float
    iterations: int
    converged: bool
    error_bound: float

    def establishment(self, count: int = 1, age: int = 1) -> float:
        """Probability that some of ``count`` founders of age ``age`` leave a lasting lineage."""
        q = self.probabilities[min(age, self.probabilities.size) - 1]
        return float(1.0 - q**count)


def offspring_pgf(s: np.ndarray, schedule: Schedule, factors: Factors, offspring) -> np.ndarray:
    """G(s): the generating function of next season's mutants by age, one entry per parent age.

    The season kernel's (``sim.kernel.SeasonKernel.offspring_pgf``): an
    individual of census age a draws N offspring (pgf P, mean m(a) f_fec);
    each recruits to age 1 independently with probability p = c f_rec
    (thinning: P(1 - p + p s_1)); independently, it survives to age a + 1 (or
    stays in the plus-group) with probability sigma = s(a) f_adult::

        G_a(s) = (1 - sigma + sigma s_next(a)) P(1 - p + p s_1; m(a) f_fec)

    With parental care or a brood effect (``schedule.orphan_survival`` /
    ``brood_scale``) the survival and the recruits are not independent: the
    kernel's joint form, G_a(s) = sigma s_next H_care(s_1) + (1 - sigma)
    H_orphan(s_1) (derived in ``SeasonKernel.offspring_pgf``).
    """
    return SeasonKernel.for_schedule(schedule, offspring=offspring).offspring_pgf(s, factors)


def _irreducible(a: np.ndarray) -> bool:
    reach = (a > 0).astype(float) + np.eye(a.shape[0])
    return bool(np.all(np.linalg.matrix_power(reach, max(a.shape[0] - 1, 1)) > 0))


def extinction_probabilities(
    schedule: Schedule, factors: Factors, offspring, *, tol: float = 1e-12, max_iter: int = 200_000
) -> Extinction:
    """Extinction probability of a mutant lineage started by one individual of each census age.

    Parameters
    ----------
    schedule : Schedule
        The mutant's schedule.
    factors : Factors
        The density factors of the resident's environment.
    offspring : Poisson | Fixed | NegativeBinomial
        The offspring-number distribution (anything with ``pgf(s, mean)``).
    tol : float, optional
        Stop when the estimated error of the iterate is below ``tol``.
    max_iter : int, optional
        Iteration cap (reached only very close to criticality).

    Notes
    -----
    q is the smallest fixed point of q = G(q) in [0, 1]^n, the limit of the
    iteration q_0 = 0, q_{k+1} = G(q_k), which increases monotonically
    (Athreya & Ney 1972, ch. V). The error is bounded from the last step and
    the observed contraction ratio r as step / (1 - r). Two cases are settled
    without iterating: a subcritical process (lambda < 1) dies out surely,
    since the expected population tends to 0; a critical, irreducible,
    non-singular process (lambda = 1) also dies out surely (Harris 1963,
    Theorem II.7.1, from memory).
    """
    kernel = SeasonKernel.for_schedule(schedule, offspring=offspring)
    a = kernel.projection_matrix(factors)
    lam = dominant_eigen(a)[0]
    n = schedule.n_ages
    g0 = kernel.offspring_pgf(np.zeros(n), factors)
    singular = bool(np.all(g0 == 0) and np.allclose(a.sum(axis=0), 1.0))
    if lam < 1.0 - _CRITICAL or (abs(lam - 1.0) <= _CRITICAL and not singular and _irreducible(a)):
        return Extinction(np.ones(n), lam, 0, True, 0.0)
    q = np.zeros(n)
    step_prev = np.inf
    for k in range(1, max_iter + 1):
        new = kernel.offspring_pgf(q, factors)
        step = float(np.max(np.abs(new - q)))
        q = new
        if step == 0.0:
            return Extinction(q, lam, k, True, 0.0)
        ratio = step / step_prev if step_prev > 0 else 1.0
        step_prev = step
        bound = step / (1.0 - ratio) if ratio < 1.0 else np.inf
        if bound < tol:
            return Extinction(np.minimum(q, 1.0), lam, k, True, bound)
    return Extinction(np.minimum(q, 1.0), lam, max_iter, False, bound)


def establishment_probability(
    schedule: Schedule,
    factors: Factors,
    offspring,
    *,
    count: int = 1,
    age: int = 1,
    tol: float = 1e-12,
) -> float:
    """Probability that ``count`` mutants of census age ``age`` escape early loss: 1 - q_age^count.

    The founders' lineages are independent while mutants are rare, so all of
    them die out with probability q^count.
    """
    return extinction_probabilities(schedule, factors, offspring, tol=tol).establishment(count, age)
