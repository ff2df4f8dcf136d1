"""Density dependence: its form, where it acts, and what is counted.

A season's density index D is taken from the census (or from the offspring
born, for ``counted = "offspring"``). A form turns D into a factor f(D) in
(0, 1]; the placement says which vital rate it multiplies:

=================  =======  =========  ===========
acts_on            f_fec    f_adult    f_rec
=================  =======  =========  ===========
recruitment        1        1          f
fecundity          f        1          1
adult-survival     1        f          1
all-survival       1        f          f
=================  =======  =========  ===========

The ceiling is not a factor of D: after recruitment, random individuals are
removed down to the capacity K (from everyone for ``all-survival``, from the
new recruits only for ``recruitment``). In the mean-field model the removal
is a survival factor phi at the same placement, fixed so that the census is K.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .vocabulary import COUNTED, PLACEMENTS

__all__ = [
    "Factors",
    "Cull",
    "NoDensity",
    "BevertonHolt",
    "Ricker",
    "Ceiling",
    "DensityDependence",
    "FORMS",
    "PLACEMENTS",
    "COUNTED",
]


class Factors(NamedTuple):
    """Multipliers of fecundity, adult survival and recruitment in one season."""

    fecundity: float = 1.0
    adult: float = 1.0
    recruitment: float = 1.0


class Cull(Factors):
    """A ceiling's removal stated as factors: after the season, each individual at the placement
    is kept with this probability (``DensityDependence.placed`` of a ceiling).

    It acts like survival factors, except that it comes after the young's fate is set: under
    parental care a parent culled at the ceiling has already raised its young
    (``SeasonKernel.recruits_per_parent`` and ``offspring_pgf`` read it so).
    """

    __slots__ = ()


@dataclass(frozen=True)
class NoDensity:
    """f(D) = 1."""

    def factor(self, d):
        return np.ones_like(np.asarray(d, dtype=float))


@dataclass(frozen=True)
class BevertonHolt:
    """f(D) = 1 / (1 + D / K) (Beverton & Holt 1957)."""

    capacity: float

    def factor(self, d):
        return 1.0 / (1.0 + d / self.capacity)


@dataclass(frozen=True)
class Ricker:
    """f(D) = exp(-D / K) (Ricker 1954)."""

    capacity: float

    def factor(self, d):
        return np.exp(-d / self.capacity)


@dataclass(frozen=True)
class Ceiling:
    """After recruitment, random individuals are removed down to K; f(D) = 1 otherwise."""

    capacity: float

    def factor(self, d):
        return np.ones_like(np.asarray(d, dtype=float))


FORMS = {"none": NoDensity, "beverton-holt": BevertonHolt, "ricker": Ricker, "ceiling": Ceiling}

# which of (f_fec, f_adult, f_rec) each placement's factor multiplies (the table above)
_PLACED = {"recruitment": (False, False, True), "fecundity": (True, False, False),
           "adult-survival": (False, True, False), "all-survival": (False, True, True)}


@dataclass(frozen=True)
class DensityDependence:
    """A density form placed on one part of the life cycle.

    Parameters
    ----------
    form : NoDensity | BevertonHolt | Ricker | Ceiling
    acts_on : {"recruitment", "fecundity", "adult-survival", "all-survival"}
    counted : {"census", "breeders", "offspring"}
        Who makes up D: everyone at the census, individuals with m(a) > 0, or
        the offspring born this season (D then taken after breeding).
    """

    form: object
    acts_on: str = "recruitment"
    counted: str = "census"

    def __post_init__(self):
        # the schema (sim.config) checks every combination; this only guards objects built by hand
        assert self.acts_on in PLACEMENTS and self.counted in COUNTED, (self.acts_on, self.counted)

    @classmethod
    def from_names(cls, form: str, capacity: float | None = None, acts_on="recruitment", counted="census"):
        """Build from config words, e.g. ``from_names("ricker", 500, "fecundity")``."""
        kind = FORMS[form]
        return cls(kind() if kind is NoDensity else kind(float(capacity)), acts_on, counted)

    @property
    def ceiling(self) -> float | None:
        """Capacity of a ceiling, or None for the other forms."""
        return self.form.capacity if isinstance(self.form, Ceiling) else None

    @property
    def counted_after_breeding(self) -> bool:
        """True where D is the number of offspring born (taken after breeding)."""
        return self.counted == "offspring"

    def index_weights(self, M: np.ndarray) -> np.ndarray:
        """Weights w[allele, age] with D = sum(w * census) for census-based counting.

        For ``counted = "offspring"`` the weights are the mean fecundities, so
        ``sum(w * census)`` is the expected number born before f_fec (which is 1
        there, see the class notes); engines use the realised number instead.
        """
        if self.counted == "census":
            return np.ones_like(M)
        if self.counted == "breeders":
            return (M > 0).astype(float)
        return M.astype(float)

    def placed(self, f: float) -> Factors:
        """Place a factor f on the vital rates this density dependence acts on (a ``Cull`` for a
        ceiling: its removal fraction)."""
        fecundity, adult, recruitment = _PLACED[self.acts_on]
        kind = Cull if self.ceiling is not None else Factors
        return kind(f if fecundity else 1.0, f if adult else 1.0, f if recruitment else 1.0)

    def factors(self, d) -> Factors:
        """The season's factors at density index ``d``, a number or an array (all 1 for a ceiling).

        The one place a density factor is computed; engines and theory reach
        it through ``sim.kernel.SeasonKernel.factors``.
        """
        if not isinstance(d, float | np.ndarray):  # (numpy's float64 is a float)
            d = np.asarray(d, dtype=float)
        f = self.form.factor(d)
        return self.placed(f if type(f) is np.ndarray and f.ndim else float(f))
