"""Reproductive effort on a trade-off curve: fecundity B(E) against adult survival P(E).

An allele with ``breeding = "effort"`` puts a share E in [0, 1] of its
resources into each season's breeding from ``maturity_age`` on::

    B(E) = max_fecundity * E ** fecundity_shape
    P(E) = max_adult_survival * (1 - E) ** survival_shape

(Schaffer 1974; Schaffer & Rosenzweig 1977). E = 1 leaves no survival after
breeding (semelparity); E < 1 is an iteroparous schedule. The schedule built
here is an ordinary :class:`sim.schedules.Schedule`, so the engines and the
theory read the same m(a), s(a), c as for any other allele.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .schedules import Schedule, table

__all__ = ["TradeOff", "check_effort"]


def check_effort(effort, path: str = "effort") -> np.ndarray:
    """Efforts as a float array, each in [0, 1]; ValueError naming ``path`` otherwise."""
    e = np.asarray(effort, dtype=float)
    bad = ~np.isfinite(e) | (e < 0) | (e > 1)
    if np.any(bad):
        raise ValueError(f"{path} must be in [0, 1]; got {float(e[bad].ravel()[0])!r}")
    return e


def _power_derivative(base, shape: float, order: int) -> np.ndarray:
    """d^order/dbase^order of base ** shape, with 0 * inf read as 0 (a vanishing coefficient)."""
    coef = 1.0
    for i in range(order):
        coef *= shape - i
    if coef == 0.0:
        return np.zeros_like(base)
    with np.errstate(divide="ignore", invalid="ignore"):
        return coef * base ** (shape - order)


@dataclass(frozen=True)
class TradeOff:
    """The trade-off between this season's fecundity and the breeder's survival to the next.

    Parameters
    ----------
    max_fecundity : float
        B(1), the fecundity at full effort (>= 0).
    fecundity_shape : float
        Exponent of E in B(E) (> 0): below 1 diminishing returns, above 1 accelerating.
    max_adult_survival : float
        P(0), the survival of a breeder that makes no effort (in [0, 1]).
    survival_shape : float
        Exponent of (1 - E) in P(E) (> 0).
    """

    max_fecundity: float
    fecundity_shape: float = 1.0
    max_adult_survival: float = 0.5
    survival_shape: float = 1.0

    def __post_init__(self):
        # the config schema (sim.config.schema.TradeOffSection) states the ranges and names the
        # keys; this guards a curve built by hand
        for key in ("max_fecundity", "fecundity_shape", "max_adult_survival", "survival_shape"):
            object.__setattr__(self, key, float(getattr(self, key)))
        assert np.isfinite(self.max_fecundity) and self.max_fecundity >= 0, self
        assert 0.0 <= self.max_adult_survival <= 1.0, self
        assert self.fecundity_shape > 0 and self.survival_shape > 0, self
        assert np.isfinite(self.fecundity_shape) and np.isfinite(self.survival_shape), self

    def fecundity(self, effort) -> np.ndarray:
        """B(E) = max_fecundity * E ** fecundity_shape (vectorised over E)."""
        return self.max_fecundity * check_effort(effort) ** self.fecundity_shape

    def adult_survival(self, effort) -> np.ndarray:
        """P(E) = max_adult_survival * (1 - E) ** survival_shape (vectorised over E)."""
        return self.max_adult_survival * (1.0 - check_effort(effort)) ** self.survival_shape

    def fecundity_derivative(self, effort, order: int = 1) -> np.ndarray:
        """d^order B / dE^order (``inf`` at E = 0 where the shape is below ``order``)."""
        e = check_effort(effort)
        return self.max_fecundity * _power_derivative(e, self.fecundity_shape, order)

    def adult_survival_derivative(self, effort, order: int = 1) -> np.ndarray:
        """d^order P / dE^order (infinite at E = 1 where the shape is below ``order``)."""
        e = check_effort(effort)
        sign = -1.0 if order % 2 else 1.0
        return sign * self.max_adult_survival * _power_derivative(1.0 - e, self.survival_shape, order)

    def schedule(
        self, effort: float, juvenile_survival: float, *, maturity_age: int = 1, name: str | None = None
    ) -> Schedule:
        """The breeding schedule of an allele with effort E.

        Breeds every season from ``maturity_age`` with m = B(E) and survives
        with s = P(E) (a plus-group); at E = 1 the survival is 0, so the
        schedule is semelparous. The years before maturity carry no breeding
        and no cost: they survive with ``max_adult_survival`` = P(0), as the
        pre-breeding years of ``sim.schedules.semelparous`` do.

        Parameters
        ----------
        effort : float
            E in [0, 1].
        juvenile_survival : float
            c, the survival of an offspring to its first census, in [0, 1].
        maturity_age : int, optional
            First breeding age (>= 1).
        name : str, optional
            Allele name (default ``"effort=E"``).
        """
        e = float(check_effort(effort))
        c = float(juvenile_survival)
        if not 0.0 <= c <= 1.0:
            raise ValueError(f"juvenile_survival must be in [0, 1]; got {c!r}")
        if isinstance(maturity_age, bool) or int(maturity_age) != maturity_age or maturity_age < 1:
            raise ValueError(f"maturity_age must be an integer >= 1; got {maturity_age!r}")
        m, s = float(self.fecundity(e)), float(self.adult_survival(e))
        name = name if name is not None else f"effort={e:g}"
        return _from_maturity(name, m, s, c, int(maturity_age), self.max_adult_survival)

    def schedule_derivative(
        self, effort: float, juvenile_survival: float, *, maturity_age: int = 1, order: int = 1
    ) -> Schedule:
        """The schedule's arrays differentiated ``order`` times in E (m -> B^(n), s -> P^(n)).

        The projection matrix is linear in m(a) and s(a), so
        ``projection_matrix`` of this "schedule" is d^n A / dE^n.
        """
        e = float(check_effort(effort))
        dm, ds = float(self.fecundity_derivative(e, order)), float(self.adult_survival_derivative(e, order))
        return _from_maturity(f"d{order}/dE{order}", dm, ds, juvenile_survival, int(maturity_age), 0.0)


def _from_maturity(name, fecundity, survival, juvenile_survival, maturity_age, immature_survival) -> Schedule:
    """m = ``fecundity`` and s = ``survival`` from ``maturity_age`` (a plus-group); no breeding before."""
    m = np.zeros(maturity_age)
    m[-1] = fecundity
    s = np.full(maturity_age, float(immature_survival))
    s[-1] = survival
    return table(name, m, s, juvenile_survival)
