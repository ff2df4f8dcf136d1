"""Breeding schedules: age-specific fecundity m(a), survival s(a) and juvenile survival c.

A schedule is the one place where an allele's life history is stated. The
engines and the analysis layer read the same arrays, so the model is written
down once.

Ages are census ages: index ``i`` of the arrays is age ``i + 1`` (the census is
taken just before breeding and counts individuals of age >= 1). The last age
class is a plus-group that keeps its own survival.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

__all__ = ["Schedule", "semelparous", "iteroparous", "table", "stack_schedules"]


@dataclass(frozen=True)
class Schedule:
    """An allele's life history by census age.

    Attributes
    ----------
    name : str
        Allele name.
    fecundity : ndarray, shape (n_ages,)
        Mean offspring per individual of each age, m(a) (>= 0).
    survival : ndarray, shape (n_ages,)
        Probability of surviving from age a to a + 1, s(a) (in [0, 1]); the
        last entry is the plus-group's own survival.
    juvenile_survival : float
        Probability c that an offspring survives to its first census (age 1)
        (with parental care: while its parent lives, c_care).
    orphan_survival : float or None
        c_orphan: the juvenile survival of young whose parent dies in the
        season of their birth; None means ``juvenile_survival`` (no care).
    brood_scale : float or None
        h of the exponential brood effect (each young of a brood of b
        survives x exp(-(b - 1) / h)); None: no brood effect.
    """

    name: str
    fecundity: np.ndarray
    survival: np.ndarray
    juvenile_survival: float
    orphan_survival: float | None = None
    brood_scale: float | None = None

    def __post_init__(self):
        m = np.asarray(self.fecundity, dtype=float)
        s = np.asarray(self.survival, dtype=float)
        # the schema (sim.config) checks configured schedules; this guards one built by hand
        assert m.ndim == 1 and m.shape == s.shape and m.size > 0, (self.name, m.shape, s.shape)
        object.__setattr__(self, "fecundity", m)
        object.__setattr__(self, "survival", s)
        object.__setattr__(self, "juvenile_survival", float(self.juvenile_survival))

    @property
    def n_ages(self) -> int:
        """Number of age classes (the last is a plus-group)."""
        return self.fecundity.size

    def padded(self, n_ages: int) -> Schedule:
        """The same life history over ``n_ages`` classes.

        Extra classes repeat the plus-group (same m and s). They are
        demographically identical to it, so a census summed over them matches
        the unpadded schedule.
        """
        assert n_ages >= self.n_ages, (n_ages, self.n_ages)
        extra = n_ages - self.n_ages
        return replace(
            self,
            fecundity=np.concatenate([self.fecundity, np.repeat(self.fecundity[-1], extra)]),
            survival=np.concatenate([self.survival, np.repeat(self.survival[-1], extra)]),
        )


def semelparous(
    name: str,
    fecundity: float,
    juvenile_survival: float,
    *,
    maturity_age: int = 1,
    adult_survival: float = 1.0,
) -> Schedule:
    """Breed once at ``maturity_age``, then die.

    ``adult_survival`` is the survival of the pre-breeding years (ages below
    maturity); it plays no role when ``maturity_age == 1``.
    """
    m = np.zeros(maturity_age)
    m[-1] = fecundity
    s = np.full(maturity_age, float(adult_survival))
    s[-1] = 0.0
    return Schedule(name, m, s, juvenile_survival)


def iteroparous(
    name: str,
    fecundity: float,
    adult_survival: float,
    juvenile_survival: float,
    *,
    maturity_age: int = 1,
) -> Schedule:
    """Breed every season from ``maturity_age`` on, surviving each year with ``adult_survival``.

    The mature class is a plus-group, so the projection matrix for maturity 1
    is the scalar P + B c (Charnov & Schaffer 1973).
    """
    m = np.zeros(maturity_age)
    m[-1] = fecundity
    s = np.full(maturity_age, float(adult_survival))
    return Schedule(name, m, s, juvenile_survival)


def table(name: str, fecundity, survival, juvenile_survival: float) -> Schedule:
    """Fecundity and survival given age by age; the last age is a plus-group."""
    return Schedule(name, np.asarray(fecundity, float), np.asarray(survival, float), juvenile_survival)


def stack_schedules(schedules) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stack schedules into arrays ``M[allele, age]``, ``S[allele, age]``, ``C[allele]``.

    Shorter schedules are padded with copies of their plus-group, so every
    allele shares one age axis.
    """
    n_ages = max(s.n_ages for s in schedules)
    padded = [s.padded(n_ages) for s in schedules]
    M = np.array([p.fecundity for p in padded])
    S = np.array([p.survival for p in padded])
    C = np.array([p.juvenile_survival for p in padded])
    return M, S, C
