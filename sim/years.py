"""Year types: good and bad years, how they follow one another, and what a year does to the rates.

A variable environment is a list of named year types. Each multiplies every
allele's fecundity, adult survival and juvenile survival by its own factors
(default 1) *before* density factors apply. Year types follow one another
independently (``"iid"``, each with its probability) or as a Markov chain
(``"markov"``, a row-stochastic ``transitions`` matrix, first year from the
stationary law or a named year type).

The multipliers are applied to a schedule in one place, ``scaled_schedule``;
the engines and the theory read a year's rates from there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .schedules import Schedule

__all__ = ["YearType", "YearTypes", "scaled_schedule", "constant_years"]

_SUM_TOL = 1e-9  # probabilities and transition rows must sum to 1 within this


@dataclass(frozen=True)
class YearType:
    """One kind of year and its multipliers on every allele's rates.

    Attributes
    ----------
    name : str
    fecundity, adult_survival, juvenile_survival : float
        Multipliers (>= 0, default 1) of m(a), s(a) and c in such a year.
    """

    name: str
    fecundity: float = 1.0
    adult_survival: float = 1.0
    juvenile_survival: float = 1.0

    def __post_init__(self):
        for key in ("fecundity", "adult_survival", "juvenile_survival"):
            v = getattr(self, key)
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)):
                raise TypeError(f"year {self.name!r}: {key} must be a number; got {v!r}")
            if not np.isfinite(v) or v < 0:
                raise ValueError(f"year {self.name!r}: {key} must be finite and >= 0; got {v!r}")
            object.__setattr__(self, key, float(v))


def scaled_schedule(schedule: Schedule, year: YearType) -> Schedule:
    """The schedule's rates in a year of this type: m(a), s(a) and c times the year's multipliers.

    The juvenile multiplier scales c_orphan as it does c (``SeasonKernel.multipliers`` puts it on
    f_rec, which both share); the brood effect's scale h is the allele's in every year.

    Raises
    ------
    ValueError
        Where a survival would exceed 1, naming the allele and the year type.
    """
    s = schedule.survival * year.adult_survival
    c = schedule.juvenile_survival * year.juvenile_survival
    if np.any(s > 1.0):
        raise ValueError(
            f"allele {schedule.name!r}, year {year.name!r}: adult_survival x multiplier "
            f"= {float(s.max()):.6g} > 1"
        )
    if c > 1.0:
        raise ValueError(
            f"allele {schedule.name!r}, year {year.name!r}: juvenile_survival x multiplier "
            f"= {c:.6g} > 1"
        )
    orphan = schedule.orphan_survival
    if orphan is not None:
        orphan = orphan * year.juvenile_survival
        if orphan > 1.0:
            raise ValueError(
                f"allele {schedule.name!r}, year {year.name!r}: orphan_survival x juvenile_survival "
                f"multiplier = {orphan:.6g} > 1"
            )
    return Schedule(schedule.name, schedule.fecundity * year.fecundity, s, c, orphan, schedule.brood_scale)


@dataclass(frozen=True)
class YearTypes:
    """Named year types and the law by which they follow one another.

    Parameters
    ----------
    types : tuple of YearType
        One or more year types with distinct names.
    switching : {"iid", "markov"}
    probabilities : sequence of float, optional
        iid only: the probability of each type (>= 0, summing to 1).
    transitions : 2-d sequence of float, optional
        markov only: ``transitions[i][j]`` = P(next year is j | this year is i);
        rows sum to 1.
    start : str
        markov only: ``"stationary"`` (first year from the stationary law,
        which must then be unique) or the name of the first year's type.
    """

    types: tuple
    switching: str = "iid"
    probabilities: tuple | None = None
    transitions: tuple | None = None
    start: str = "stationary"

    def __post_init__(self):
        types = tuple(self.types)
        object.__setattr__(self, "types", types)
        if not types or not all(isinstance(t, YearType) for t in types):
            raise TypeError("environment.year: needs one or more YearType entries")
        names = [t.name for t in types]
        if len(set(names)) != len(names):
            raise ValueError(f"environment.year: names must be distinct; got {names}")
        k = len(types)
        if self.switching == "iid":
            if self.probabilities is None:
                raise ValueError("environment.year: iid switching needs a probability for each year")
            p = np.asarray(self.probabilities, dtype=float)
            if p.shape != (k,) or np.any(p < 0) or abs(p.sum() - 1.0) > _SUM_TOL:
                raise ValueError(
                    f"environment.year.probability: {k} values >= 0 summing to 1; got {p.tolist()}"
                )
            object.__setattr__(self, "probabilities", tuple(p.tolist()))
        elif self.switching == "markov":
            if self.transitions is None:
                raise ValueError("environment.transitions: markov switching needs a transition matrix")
            t = np.asarray(self.transitions, dtype=float)
            if t.shape != (k, k) or np.any(t < 0) or np.any(np.abs(t.sum(axis=1) - 1.0) > _SUM_TOL):
                raise ValueError(
                    f"environment.transitions: a {k}x{k} matrix of values >= 0 whose rows sum "
                    f"to 1; got {t.tolist()}"
                )
            object.__setattr__(self, "transitions", tuple(map(tuple, t.tolist())))
            if self.start != "stationary" and self.start not in names:
                raise ValueError(
                    f"environment.start: 'stationary' or one of {names}; got {self.start!r}"
                )
            if self.start == "stationary":
                self.stationary_law()  # refuses a chain without a unique one
        else:
            raise ValueError(f"environment.switching: 'iid' or 'markov'; got {self.switching!r}")

    @property
    def names(self) -> list[str]:
        return [t.name for t in self.types]

    def __len__(self) -> int:
        return len(self.types)

    def index(self, name: str) -> int:
        """Position of the year type called ``name``."""
        return self.names.index(name)

    def stationary_law(self) -> np.ndarray:
        """Long-run frequency of each year type (the probabilities for iid switching).

        Raises
        ------
        ValueError
            For a Markov chain whose stationary law is not unique (e.g. the
            identity matrix: each year type absorbing).
        """
        if self.switching == "iid":
            return np.asarray(self.probabilities)
        t = np.asarray(self.transitions)
        k = t.shape[0]
        # pi (T - I) = 0 with sum(pi) = 1; unique iff this system has rank k
        system = np.vstack([(t - np.eye(k)).T, np.ones(k)])
        if np.linalg.matrix_rank(system) < k:
            raise ValueError(
                "environment.transitions: the chain has no unique stationary law; "
                "give start = a year name"
            )
        rhs = np.zeros(k + 1)
        rhs[-1] = 1.0
        pi = np.linalg.lstsq(system, rhs, rcond=None)[0]
        pi = np.clip(pi, 0.0, None)
        return pi / pi.sum()

    def start_law(self) -> np.ndarray:
        """Law of the first year's type."""
        if self.switching == "markov" and self.start != "stationary":
            law = np.zeros(len(self))
            law[self.index(self.start)] = 1.0
            return law
        return self.stationary_law()

    def draw(self, n_seasons: int, rng: np.random.Generator, *, n_sequences: int | None = None) -> np.ndarray:
        """Year-type indices of ``n_seasons`` consecutive seasons.

        Parameters
        ----------
        n_seasons : int
        rng : numpy.random.Generator
        n_sequences : int, optional
            Draw this many independent sequences at once (shape
            ``(n_sequences, n_seasons)``); one sequence of shape
            ``(n_seasons,)`` when omitted.

        Notes
        -----
        One uniform per season (``rng.random``), turned into year types by
        ``from_uniforms``.
        """
        shape = (1 if n_sequences is None else int(n_sequences), int(n_seasons))
        seq = self.from_uniforms(rng.random(shape))
        return seq[0] if n_sequences is None else seq

    def from_uniforms(self, u: np.ndarray) -> np.ndarray:
        """Year-type indices from uniforms ``u[sequence, season]`` by inverting cumulative laws.

        iid: every season inverts the probabilities. markov: the first season
        inverts the start law, each later one the row of the type before. The
        same uniforms under nearby laws give mostly the same years (common
        random numbers when a probability is varied).
        """
        u = np.atleast_2d(np.asarray(u, dtype=float))
        seq = np.empty(u.shape, dtype=np.int64)
        k = len(self)
        if self.switching == "iid":
            cum = np.cumsum(self.probabilities)
            cum[-1] = 1.0
            return np.minimum(np.searchsorted(cum, u, side="right"), k - 1).astype(np.int64)
        cum = np.cumsum(np.asarray(self.transitions), axis=1)
        cum[:, -1] = 1.0
        first = np.cumsum(self.start_law())
        first[-1] = 1.0
        if u.shape[1]:
            seq[:, 0] = np.minimum(np.searchsorted(first, u[:, 0], side="right"), k - 1)
        for t in range(1, u.shape[1]):
            seq[:, t] = (u[:, t, None] >= cum[seq[:, t - 1]]).sum(axis=1)
        return seq

    def multipliers(self) -> np.ndarray:
        """Array ``[type, (fecundity, adult_survival, juvenile_survival)]``."""
        return np.array([[t.fecundity, t.adult_survival, t.juvenile_survival] for t in self.types])


def constant_years(year: YearType | None = None) -> YearTypes:
    """A constant environment: one year type (multipliers 1 unless given), every season."""
    return YearTypes((year or YearType("constant"),), "iid", (1.0,))
