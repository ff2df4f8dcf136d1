"""The mean-field (deterministic) version of the life cycle.

The simulator needs it to start a resident at its equilibrium; the analysis
layer builds its invasion theory on the same functions. Both the projection
matrix and the deterministic season are the season kernel's
(``sim.kernel.SeasonKernel``), so the model is written down once.

Projection matrix of one allele at factors (f_fec, f_adult, f_rec)::

    A[0, a]       = m(a) f_fec c f_rec        (births that recruit at age 1)
    A[a + 1, a]   = s(a) f_adult              (survival and ageing)
    A[L-1, L-1]   = s(L-1) f_adult            (plus-group)

(Caswell 2001, Matrix Population Models, ch. 2: a pre-breeding census
Leslie matrix.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .density import DensityDependence, Factors, NoDensity
from .kernel import SeasonKernel
from .roots import brentq
from .schedules import Schedule

__all__ = [
    "NoEquilibriumError",
    "Equilibrium",
    "projection_matrix",
    "growth_rate",
    "stable_age_distribution",
    "solve_equilibrium",
    "mean_field_step",
]


class NoEquilibriumError(ValueError):
    """The resident has no positive, stable-size equilibrium under this density dependence."""


def projection_matrix(schedule: Schedule, factors: Factors = Factors(), *,
                      offspring=None) -> np.ndarray:
    """Pre-breeding-census projection matrix of ``schedule`` at the given density factors.

    ``offspring`` (the offspring law, default Poisson) matters only under a
    brood effect, whose expected recruits depend on the whole law.
    """
    return SeasonKernel.for_schedule(schedule, offspring=offspring).projection_matrix(factors)


def growth_rate(schedule: Schedule, factors: Factors = Factors(), *, offspring=None) -> float:
    """Dominant eigenvalue lambda of the projection matrix (the per-season growth ratio)."""
    a = projection_matrix(schedule, factors, offspring=offspring)
    if a.shape == (1, 1):
        return float(a[0, 0])
    return float(np.max(np.abs(np.linalg.eigvals(a))))


def stable_age_distribution(schedule: Schedule, factors: Factors = Factors(), *,
                            offspring=None) -> np.ndarray:
    """Right eigenvector of the dominant eigenvalue, normalised to sum 1."""
    a = projection_matrix(schedule, factors, offspring=offspring)
    vals, vecs = np.linalg.eig(a)
    # The Perron root is real and has the largest real part; taking the largest
    # modulus instead can pick a complex root of equal modulus when the matrix
    # is imprimitive (e.g. semelparous with maturity_age > 1).
    v = np.abs(np.real(vecs[:, np.argmax(np.real(vals))]))
    return v / v.sum()


@dataclass(frozen=True)
class Equilibrium:
    """A resident's deterministic equilibrium.

    Attributes
    ----------
    density_index : float
        D* (for a ceiling: the census, K).
    factors : Factors
        The density factors the resident experiences at equilibrium (for a
        ceiling, the removal fraction phi as a survival factor).
    census : ndarray
        Equilibrium numbers by census age (not rounded).
    """

    density_index: float
    factors: Factors
    census: np.ndarray

    @property
    def census_size(self) -> float:
        return float(self.census.sum())


def _root(fn, lo, hi, what):
    """Root of a decreasing fn on [lo, hi], extending hi geometrically if needed."""
    f_lo = fn(lo)
    if f_lo <= 0:
        raise NoEquilibriumError(f"{what}: growth rate at low density is {f_lo + 1:.6g} <= 1")
    for _ in range(200):
        if fn(hi) < 0:
            return brentq(fn, lo, hi, xtol=1e-12, rtol=1e-12, maxiter=500)
        hi *= 2.0
    raise NoEquilibriumError(f"{what}: growth rate stays above 1 at any density (no regulation)")


def solve_equilibrium(schedule: Schedule, density: DensityDependence, *,
                      offspring=None) -> Equilibrium:
    """The resident's equilibrium: the density at which its growth rate is 1.

    ``offspring``: the offspring law (default Poisson; it matters under a brood effect).

    Raises
    ------
    NoEquilibriumError
        Without density dependence, when the resident cannot grow from low
        density (lambda(0) <= 1), or when density dependence cannot bring
        lambda down to 1 (e.g. on adult survival when m(1) c > 1).
    """
    what = f"resident {schedule.name!r}"
    kernel = SeasonKernel.for_schedule(schedule, density, offspring)
    if isinstance(density.form, NoDensity):
        raise NoEquilibriumError(f"{what}: no density dependence, so no equilibrium")
    if kernel.ceiling is not None:
        # the removal as a survival factor phi at the ceiling's placement, census K
        def excess_phi(p):
            return growth_rate(schedule, density.placed(p), offspring=offspring) - 1.0

        if excess_phi(1.0) <= 0:
            raise NoEquilibriumError(f"{what}: growth rate without removal is {excess_phi(1.0) + 1:.6g} <= 1")
        if excess_phi(0.0) >= 0:
            raise NoEquilibriumError(f"{what}: growth rate stays >= 1 however many are removed")
        phi = brentq(excess_phi, 0.0, 1.0, xtol=1e-14, rtol=1e-12, maxiter=500)
        factors = density.placed(phi)
        u = stable_age_distribution(schedule, factors, offspring=offspring)
        return Equilibrium(density.form.capacity, factors, density.form.capacity * u)

    def excess(d):
        return growth_rate(schedule, kernel.factors(d), offspring=offspring) - 1.0

    d_star = _root(excess, 0.0, density.form.capacity, what)
    factors = kernel.factors(d_star)
    u = stable_age_distribution(schedule, factors, offspring=offspring)
    weight = float(kernel.weights @ u)
    if weight <= 0:
        raise NoEquilibriumError(f"{what}: no individual is counted in the density index")
    return Equilibrium(d_star, factors, d_star / weight * u)


def mean_field_step(census: np.ndarray, M, S, C, density: DensityDependence) -> np.ndarray:
    """One deterministic season for all alleles: census[allele, age] -> next census
    (``SeasonKernel.mean_step``)."""
    return SeasonKernel(M, S, C, density).mean_step(census)
