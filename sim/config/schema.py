"""The config schema: the TOML vocabulary and every constraint on it, declared once.

Constraints are checked when a config is loaded: engines and domain objects
never see an invalid config. Every refusal names the key's path, the rule and
the value received, e.g. ``allele[1].adult_survival must be in [0, 1]; got
1.3`` (``sim.config.messages`` words pydantic's errors that way).
"""

from __future__ import annotations

import ast
import difflib
import functools
import inspect
import math
import sys
from dataclasses import replace
from pathlib import Path
from typing import Annotated, Any, ClassVar, Literal

import numpy as np
from pydantic import AfterValidator, BaseModel, ConfigDict, Field, model_serializer, model_validator

from .. import vocabulary as words
from ..aggregation import counts_obstacles
from ..density import DensityDependence
from ..mutation import Mutation, neighbour_mutation, uniform_mutation
from ..offspring import make_offspring
from ..schedules import Schedule, iteroparous, semelparous, table
from ..tradeoff import TradeOff
from ..vocabulary import MAX_COUNT
from ..years import YearType, YearTypes, scaled_schedule

__all__ = [
    "MAX_COUNT",
    "MAX_SEED",
    "MAX_REPLICATES",
    "MAX_SWEEP_POINTS",
    "MAX_TRAIT_VALUES",
    "LINKED",
    "ConfigError",
    "Config",
    "ExperimentSection",
    "DensitySection",
    "OffspringSection",
    "AlleleSection",
    "InvasionSection",
    "MutationSection",
    "YearSection",
    "EnvironmentSection",
    "TradeOffSection",
    "TraitSection",
    "SECTIONS",
    "check_sweep_path",
    "field_descriptions",
]

MAX_SEED = 2**64 - 1  # stored as uint64, and SeedSequence's entropy
MAX_REPLICATES = 2**31 - 1  # replicate indices are stored as int32
MAX_SWEEP_POINTS = 100_000  # points of a [sweep]: each is a config held in memory while running
# values of a [trait] grid: each is an allele, and the season's matrices are (values x ages)
# square, so `check` alone grows as the square of the grid (0.45 s for 951 values, 6 s for
# 9,501, measured); the finest grid allowed is [0, 1] in steps of 0.001; the example trait runs
# use 10 to 20 values
MAX_TRAIT_VALUES = 1_001


class ConfigError(ValueError):
    """A config was refused; ``problems`` lists one message per offending key."""

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


def _probability(x: float) -> float:
    """in [0, 1]"""
    if not 0.0 <= x <= 1.0:
        raise ValueError("must be in [0, 1]")
    return x


def _non_negative(x: float) -> float:
    """>= 0"""
    if x < 0:
        raise ValueError("must be >= 0")
    return x


def _resident_count(x):
    """"equilibrium" or a whole number in [1, 2^32 - 1]"""
    if x == "equilibrium" or (isinstance(x, int) and not isinstance(x, bool) and 1 <= x <= MAX_COUNT):
        return x
    raise ValueError(f"must be 'equilibrium' or a whole number in [1, {MAX_COUNT}]")


# strict: a number written as text ("4.5") is refused, not quietly converted
Probability = Annotated[float, Field(strict=True), AfterValidator(_probability)]
NonNegative = Annotated[float, Field(strict=True), AfterValidator(_non_negative)]


class _Section(BaseModel):
    """The base of every config table: unknown keys refused, values frozen, and strict types.

    ``strict``: a string or a boolean where a number belongs (``replicates =
    "20"``, ``seed = true``) is refused, not converted; ``allow_inf_nan``: nan
    and inf are refused wherever a number belongs (lists by age included).
    Every section inherits both, so a new key needs no rule of its own.
    """

    # Each field's meaning is the docstring under it (``field_descriptions`` reads them for the
    # config reference); pydantic is not asked to read them (use_attribute_docstrings), which
    # would parse this file's source at every import, in every worker process.
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False,
                              defer_build=True)

    # Keys added after 0.2.0 are left out of a dump while they hold their default (given
    # here), so an older config's resolved form (its config_hash, the results file's
    # /points/config, what --resume compares) stays as it was.
    _omit_defaults: ClassVar[dict[str, Any]] = {}

    @model_serializer(mode="wrap")
    def _without_unused_additions(self, handler):
        data = handler(self)
        if isinstance(data, dict):
            for key, default in self._omit_defaults.items():
                if key in data and data[key] == default:
                    del data[key]
        return data


class ExperimentSection(_Section):
    """``[experiment]``: what to run and when to stop."""

    name: str = "experiment"
    """Label used in outputs."""
    seed: int = Field(0, ge=0, le=MAX_SEED)
    """Root of every replicate's random stream: replicate r of point p draws from SeedSequence(seed,
    spawn_key=(p, r))."""
    replicates: int = Field(100, ge=1, le=MAX_REPLICATES)
    """Replicates per sweep point."""
    max_steps: int = Field(1000, ge=1, le=MAX_REPLICATES)  # seasons are stored as int32
    """Seasons a replicate runs at most."""
    stop: Literal[words.STOP_RULES] = "fixation"
    """fixation: a replicate stops as soon as its outcome is decided; max-steps: every replicate
    runs to max_steps (or extinction, or the cap)."""
    record_every: int = Field(1, ge=1, le=MAX_REPLICATES)
    """The census is recorded every n seasons; season 0 and the last season are always recorded."""
    engine: Literal[words.ENGINES] = "individual"
    """individual: numpy arrays of individuals, replicates batched; counts: counts by allele and
    age, exact in distribution, cost flat in N (broodline check says whether it is exact for the
    config); agents: one mesa.Agent per individual, slow, the readable reference."""
    max_population: int = Field(1_000_000, ge=1, le=MAX_COUNT)
    """A replicate whose census passes it stops and is marked capped; the experiment goes on."""
    trajectory: Literal[words.TRAJECTORY_MODES] = "by-age"
    """What is stored of each recorded census: by-age (counts by allele and age), by-allele (summed
    over ages), none (outcomes only)."""


class DensitySection(_Section):
    """``[density]``: the form of density dependence, where it acts, who is counted."""

    form: Literal[words.DENSITY_FORMS] = "none"
    """none; beverton-holt, f = 1 / (1 + D/K); ricker, f = exp(-D/K); ceiling: after recruitment,
    random individuals are removed down to K."""
    acts_on: Literal[words.PLACEMENTS] | None = None
    """The rate f multiplies: recruitment (c), fecundity (m), adult-survival (s), all-survival (s
    and c). Default: recruitment, or all-survival for a ceiling. A ceiling takes all-survival
    (anyone may be removed) or recruitment (only new recruits are removed, down to K minus the
    survivors)."""
    counted: Literal[words.COUNTED] = "census"
    """Who makes up D: census (everyone of age 1 and older), breeders (individuals with m(a) > 0),
    offspring (born this season; D taken after breeding, so not with acts_on = fecundity). A ceiling
    caps the census."""
    capacity: float | None = Field(None, gt=0)
    """K; required unless form = none."""

    @model_validator(mode="after")
    def _consistent(self):
        if self.form != "none" and self.capacity is None:
            raise ValueError(f"capacity: required for form {self.form!r}")
        if self.counted == "offspring" and self.placement == "fecundity":
            raise ValueError(
                "counted: 'offspring' is counted after breeding, so it cannot act on fecundity"
            )
        if self.form == "ceiling" and self.placement not in ("recruitment", "all-survival"):
            raise ValueError(
                "acts_on: a ceiling removes individuals after recruitment; use 'recruitment' "
                f"(recruits only) or 'all-survival' (everyone); got {self.acts_on!r}"
            )
        if self.form == "ceiling" and self.counted != "census":
            raise ValueError(f"counted: a ceiling caps the census; got {self.counted!r}")
        return self

    @property
    def placement(self) -> str:
        """acts_on, defaulting to all-survival for a ceiling and recruitment otherwise."""
        if self.acts_on is not None:
            return self.acts_on
        return "all-survival" if self.form == "ceiling" else "recruitment"


class OffspringSection(_Section):
    """``[offspring]``: the offspring-number distribution."""

    distribution: Literal[words.DISTRIBUTIONS] = "poisson"
    """poisson; fixed: floor(m), plus one more with probability m - floor(m), so the mean is exact;
    negative-binomial, with dispersion."""
    # below 1e-6 numpy's negative-binomial draw fails (its gamma-Poisson mixture overflows)
    dispersion: float | None = Field(None, ge=1e-6)
    """negative-binomial only: k, with variance = m + m^2 / k."""

    @model_validator(mode="after")
    def _dispersion(self):
        if self.distribution == "negative-binomial" and self.dispersion is None:
            raise ValueError("dispersion: required for distribution 'negative-binomial'")
        if self.distribution != "negative-binomial" and self.dispersion is not None:
            raise ValueError(f"dispersion: only used by 'negative-binomial', not {self.distribution!r}")
        return self


_CARE_DEFAULTS = {"orphan_survival": None, "brood_effect": "none", "brood_scale": None}


class AlleleSection(_Section):
    """``[[allele]]``: one heritable breeding schedule."""

    name: str = Field(min_length=1)
    """Unique name of the allele, used by [invasion] and in sweep paths (allele.NAME.KEY)."""
    breeding: Literal[words.BREEDING]
    """semelparous: breeds once at maturity_age, then dies (adult_survival is then the survival of
    the years before breeding, required if maturity_age > 1); iteroparous: breeds every season from
    maturity_age with survival adult_survival; table: fecundity and adult_survival are lists by age
    1, 2, ... of equal length, the last age a plus-group that keeps its own survival; effort:
    fecundity and adult_survival come from the [tradeoff] curve at this allele's effort."""
    fecundity: NonNegative | list[NonNegative] | None = None
    """Mean offspring m per breeding season (a list by age for table; not for effort)."""
    adult_survival: Probability | list[Probability] | None = None
    """Survival s per season (a list by age for table); see breeding for when it is required."""
    juvenile_survival: Probability
    """c: survival from offspring to age 1."""
    maturity_age: int = Field(1, ge=1, le=200)
    """First breeding age (not for table)."""
    initial_count: int = Field(0, ge=0, le=MAX_COUNT)
    """Without [invasion]: individuals of this allele at the start, all of age 1."""
    orphan_survival: Probability | None = None
    """Juvenile survival of young whose parent dies in the season of their birth (default:
    juvenile_survival, i.e. no parental care; a semelparous parent always dies)."""
    brood_effect: Literal[words.BROOD_EFFECTS] = "none"
    """none; exponential: each young of a brood of b survives x exp(-(b - 1) / brood_scale)."""
    brood_scale: float | None = Field(None, gt=0)
    """h of the exponential brood effect; required with brood_effect = "exponential"."""
    effort: Probability | None = None
    """breeding = "effort" only: E, the share of resources put into each season's breeding."""

    _omit_defaults: ClassVar[dict[str, Any]] = {**_CARE_DEFAULTS, "effort": None}

    @model_validator(mode="after")
    def _brood(self):
        if self.brood_effect == "exponential" and self.brood_scale is None:
            raise ValueError("brood_scale: required for brood_effect 'exponential'")
        if self.brood_effect != "exponential" and self.brood_scale is not None:
            raise ValueError(f"brood_scale: only used by brood_effect 'exponential', not {self.brood_effect!r}")
        return self

    @model_validator(mode="after")
    def _shape(self):
        if self.breeding == "effort":
            if self.effort is None:
                raise ValueError("effort: required for breeding = 'effort' (a share in [0, 1])")
            for key in ("fecundity", "adult_survival"):
                if getattr(self, key) is not None:
                    raise ValueError(f"{key}: an effort allele takes it from the [tradeoff] curve; remove it")
            return self
        if self.effort is not None:
            raise ValueError(f"effort: only used by breeding = 'effort', not {self.breeding!r}")
        if self.fecundity is None:
            raise ValueError(f"fecundity: required for breeding = {self.breeding!r}")
        if self.breeding == "table":
            if not isinstance(self.fecundity, list) or not isinstance(self.adult_survival, list):
                raise ValueError("fecundity: a table schedule takes lists by age for fecundity and adult_survival")
            if len(self.fecundity) != len(self.adult_survival):
                raise ValueError(
                    f"adult_survival: table lists must be of equal length; fecundity has "
                    f"{len(self.fecundity)} ages, adult_survival {len(self.adult_survival)}"
                )
            if len(self.fecundity) == 0:
                raise ValueError("fecundity: a table schedule needs at least one age")
            if self.maturity_age != 1:
                raise ValueError("maturity_age: not used by a table schedule (give zeros in fecundity)")
            return self
        for key in ("fecundity", "adult_survival"):
            if isinstance(getattr(self, key), list):
                raise ValueError(f"{key}: a list by age needs breeding = 'table'")
        if self.breeding == "iteroparous" and self.adult_survival is None:
            raise ValueError("adult_survival: required for an iteroparous schedule")
        if self.breeding == "semelparous" and self.maturity_age > 1 and self.adult_survival is None:
            raise ValueError(
                "adult_survival: required for a semelparous schedule with maturity_age > 1 "
                "(survival of the years before breeding)"
            )
        return self

    def schedule(self, tradeoff: TradeOff | None = None) -> Schedule:
        """The breeding schedule this allele fixes, with its parental effects (an effort allele
        reads ``tradeoff``)."""
        schedule = self._life_history(tradeoff)
        if self.orphan_survival is None and self.brood_scale is None:
            return schedule
        return replace(schedule, orphan_survival=self.orphan_survival, brood_scale=self.brood_scale)

    def _life_history(self, tradeoff: TradeOff | None = None) -> Schedule:
        if self.breeding == "effort":
            assert tradeoff is not None, "an effort allele needs the config's [tradeoff]"
            return tradeoff.schedule(self.effort, self.juvenile_survival,
                                     maturity_age=self.maturity_age, name=self.name)
        if self.breeding == "table":
            return table(self.name, self.fecundity, self.adult_survival, self.juvenile_survival)
        if self.breeding == "iteroparous":
            return iteroparous(self.name, self.fecundity, self.adult_survival, self.juvenile_survival,
                               maturity_age=self.maturity_age)
        return semelparous(self.name, self.fecundity, self.juvenile_survival,
                           maturity_age=self.maturity_age,
                           adult_survival=1.0 if self.adult_survival is None else self.adult_survival)


class InvasionSection(_Section):
    """``[invasion]``: a resident at equilibrium, a few mutants added at age 1."""

    resident: str
    """Name of the resident allele."""
    mutant: str
    """Name of the mutant allele (not the resident)."""
    mutant_count: int = Field(1, ge=1, le=MAX_COUNT)
    """Mutants added at age 1."""
    resident_count: Annotated[Any, AfterValidator(_resident_count)] = "equilibrium"
    """equilibrium: the resident starts at its mean-field equilibrium in its stable age distribution
    (rounded, total kept); or a number (needed without density dependence), then in the stable age
    distribution of its density-free matrix."""


class MutationSection(_Section):
    """``[mutation]``: per-offspring mutation, uniform to the other alleles or by matrix."""

    rate: Probability = 0.0
    """Per offspring, to another allele chosen uniformly."""
    matrix: list[list[Probability]] | None = None
    """n x n: row i gives the allele probabilities of an offspring of an allele-i parent; rows sum
    to 1; not with rate."""

    @model_validator(mode="after")
    def _one_way(self):
        if self.matrix is not None and self.rate != 0.0:
            raise ValueError("matrix: give either rate or matrix, not both")
        return self


class YearSection(_Section):
    """``[[environment.year]]``: one year type and its multipliers on every allele's rates."""

    name: str = Field(min_length=1)
    """Unique name of the year type (sweep paths environment.year.NAME.KEY)."""
    probability: Probability | None = None
    """switching = "iid" only: the chance of this year type each season (the probabilities sum to 1)."""
    fecundity: NonNegative = 1.0
    """Multiplier on every allele's fecundity in such a year (before density factors)."""
    adult_survival: NonNegative = 1.0
    """Multiplier on every allele's survival in such a year; a product above 1 is refused."""
    juvenile_survival: NonNegative = 1.0
    """Multiplier on every allele's juvenile survival (and orphan survival) in such a year."""

    def year_type(self) -> YearType:
        return YearType(self.name, **{key: getattr(self, key) for key in words.YEAR_MULTIPLIERS})


class EnvironmentSection(_Section):
    """``[environment]``: named year types and how they follow one another."""

    switching: Literal[words.SWITCHING] = "iid"
    """iid: each season's year type drawn afresh; markov: drawn from the last one by transitions."""
    start: str = words.STATIONARY
    """switching = "markov" only: the first year type, from the stationary law or a year name."""
    shared_years: bool = False
    """true: all replicates of a sweep point live through one year sequence."""
    transitions: list[list[Probability]] | None = None
    """switching = "markov" only: row = this year type, column = next; rows sum to 1."""
    year: list[YearSection] = Field(min_length=2)
    """The year types, two or more ([[environment.year]])."""

    @model_validator(mode="after")
    def _consistent(self):
        names = [y.name for y in self.year]
        for i, name in enumerate(names):
            if name in names[:i]:
                raise ValueError(f"year[{i}].name: {name!r} is used twice")
        given = [y.probability is not None for y in self.year]
        if self.switching == "iid":
            if not all(given):
                raise ValueError(f"year[{given.index(False)}].probability: required for "
                                 "switching = 'iid'")
            total = sum(y.probability for y in self.year)
            if abs(total - 1.0) > 1e-9:
                raise ValueError(f"year.probability: the probabilities must sum to 1; got {total:.12g}")
            if self.transitions is not None:
                raise ValueError("transitions: only used by switching = 'markov'")
            if self.start != words.STATIONARY:
                raise ValueError("start: only used by switching = 'markov'")
            return self
        if any(given):
            raise ValueError(f"year[{given.index(True)}].probability: not used by switching = "
                             "'markov' (the transitions give the law)")
        k, t = len(self.year), self.transitions
        if t is None:
            raise ValueError("transitions: required for switching = 'markov'")
        if len(t) != k or any(len(row) != k for row in t):
            raise ValueError(f"transitions: must be {k} x {k} (one row and column per year type)")
        for i, row in enumerate(t):
            if abs(sum(row) - 1.0) > 1e-9:
                raise ValueError(f"transitions[{i}]: row must sum to 1; got {sum(row):.12g}")
        if self.start != words.STATIONARY and self.start not in names:
            raise ValueError(f"start: {words.STATIONARY!r} or a year name {names}; got {self.start!r}")
        try:
            self.year_types()  # a chain without a unique stationary law is refused here
        except ValueError as err:  # YearTypes names keys from the config's top; here they are relative
            raise ValueError(str(err).removeprefix("environment.")) from None
        return self

    def year_types(self) -> YearTypes:
        """The ``YearTypes`` this section describes (the one place they are built from a config)."""
        types = tuple(y.year_type() for y in self.year)
        if self.switching == "iid":
            return YearTypes(types, "iid", probabilities=tuple(y.probability for y in self.year))
        return YearTypes(types, "markov", transitions=tuple(map(tuple, self.transitions)),
                         start=self.start)


class TradeOffSection(_Section):
    """``[tradeoff]``: fecundity B(E) against adult survival P(E), shared by every effort allele."""

    max_fecundity: NonNegative = Field(allow_inf_nan=False)
    """B(E) = max_fecundity * E ** fecundity_shape: the mean offspring at full effort."""
    fecundity_shape: float = Field(1.0, gt=0, allow_inf_nan=False)
    """< 1: diminishing returns of effort in offspring; > 1: accelerating."""
    max_adult_survival: Probability
    """P(E) = max_adult_survival * (1 - E) ** survival_shape: survival at no effort."""
    survival_shape: float = Field(1.0, gt=0, allow_inf_nan=False)
    """Curvature of the survival cost of effort."""

    def tradeoff(self) -> TradeOff:
        return TradeOff(self.max_fecundity, self.fecundity_shape, self.max_adult_survival, self.survival_shape)


GRID_TOLERANCE = 1e-9  # two efforts closer than this are one grid value


class TraitSection(_Section):
    """``[trait]``: effort alleles on a grid, copied from a template, mutating to grid neighbours."""

    allele: str
    """The template effort allele, copied once per grid value with its effort replaced."""
    values: list[Probability] | None = None
    """The grid of efforts (or give start, stop and step)."""
    start: Probability | None = None
    """First grid value (with stop and step)."""
    stop: Probability | None = None
    """Last grid value (with start and step)."""
    step: float | None = Field(None, gt=0, allow_inf_nan=False)
    """Grid spacing (with start and stop); a grid has at most 1,001 values ([0, 1] in steps of
    0.001), each an allele of the run."""
    initial: Probability
    """The effort every individual starts with (a grid value): a monomorphic start."""

    @model_validator(mode="after")
    def _one_grid(self):
        ranged = [k for k in ("start", "stop", "step") if getattr(self, k) is not None]
        if self.values is not None:
            if ranged:
                raise ValueError(f"{ranged[0]}: give either values or start / stop / step, not both")
            if len(self.values) < 2:
                raise ValueError(f"values: a grid needs at least 2 efforts; got {self.values}")
            if len(self.values) > MAX_TRAIT_VALUES:
                raise ValueError(f"values: {len(self.values):,} efforts; at most {MAX_TRAIT_VALUES:,} "
                                 "(each is an allele of the run)")
            if any(b - a <= GRID_TOLERANCE for a, b in zip(self.values, self.values[1:])):
                raise ValueError(f"values: must be strictly increasing; got {self.values}")
        else:
            if len(ranged) < 3:
                missing = [k for k in ("start", "stop", "step") if k not in ranged]
                raise ValueError(f"{missing[0]}: required (give values, or start, stop and step)")
            if self.stop <= self.start:
                raise ValueError(f"stop: must be > start ({self.start}); got {self.stop}")
            n = (self.stop - self.start) / self.step
            if n + 1 > MAX_TRAIT_VALUES + 0.5:  # before the grid is built
                raise ValueError(f"step: a grid from {self.start:g} to {self.stop:g} in steps of "
                                 f"{self.step:g} would make {math.floor(n + 1e-6) + 1:,} values; at most "
                                 f"{MAX_TRAIT_VALUES:,} (each is an allele of the run): use a larger step")
            if abs(n - round(n)) > 1e-6:
                raise ValueError(f"step: must divide stop - start ({self.stop - self.start:g}) into "
                                 f"whole steps; got {self.step}")
        grid = self.grid()
        if not np.any(np.abs(grid - self.initial) <= GRID_TOLERANCE):
            raise ValueError(f"initial: must be one of the grid values {grid.tolist()}; got {self.initial}")
        return self

    def grid(self) -> np.ndarray:
        """The efforts of the grid, increasing."""
        if self.values is not None:
            return np.array(self.values, dtype=float)
        n = int(round((self.stop - self.start) / self.step)) + 1
        return np.round(self.start + self.step * np.arange(n), 12)

    def names(self) -> list[str]:
        """Allele names by value, e.g. ``e0.30``: two decimals, or as many as tell them apart."""
        grid = self.grid()
        for decimals in range(2, 13):
            if np.all(np.abs(np.round(grid, decimals) - grid) <= GRID_TOLERANCE):
                break
        return [f"e{v:.{decimals}f}" for v in grid]

    def initial_index(self) -> int:
        return int(np.argmin(np.abs(self.grid() - self.initial)))


class Config(_Section):
    """A whole experiment as written in TOML (the ``[sweep]`` table kept unexpanded)."""

    experiment: ExperimentSection = ExperimentSection()
    """[experiment]: what to run and when to stop."""
    density: DensitySection = DensitySection()
    """[density]: density dependence."""
    offspring: OffspringSection = OffspringSection()
    """[offspring]: the offspring-number distribution."""
    allele: list[AlleleSection] = Field(min_length=1)
    """[[allele]]: one table per allele (heritable breeding schedule), at least one."""
    invasion: InvasionSection | None = None
    """[invasion]: optional; a resident at equilibrium and a few mutants."""
    mutation: MutationSection = MutationSection()
    """[mutation]: per-offspring mutation between alleles."""
    environment: EnvironmentSection | None = None
    """[environment]: year types that differ (optional; without it every season is alike)."""
    tradeoff: TradeOffSection | None = None
    """[tradeoff]: the curve B(E), P(E) shared by every effort allele (required with one)."""
    trait: TraitSection | None = None
    """[trait]: effort alleles generated on a grid from a template allele (optional)."""
    sweep: dict[str, list[Any]] | None = None
    """[sweep]: optional; "PATH" = [values] (the cartesian product of the lists), and
    [[sweep.linked]] groups of lists read in step. PATH is allele.NAME.KEY or SECTION.KEY;
    experiment.seed, replicates, engine, name and trajectory cannot be swept."""

    _omit_defaults: ClassVar[dict[str, Any]] = {"tradeoff": None, "trait": None, "environment": None}

    @model_validator(mode="after")
    def _cross_checks(self):
        problems = []
        names = [a.name for a in self.allele]
        for i, name in enumerate(names):
            if name in names[:i]:
                problems.append(f"allele[{i}].name: {name!r} is used twice")
        if self.invasion is not None:
            for key in ("resident", "mutant"):
                value = getattr(self.invasion, key)
                if value not in names:
                    problems.append(f"invasion.{key}: no allele is named {value!r} (alleles: {names})")
            if self.invasion.resident == self.invasion.mutant:
                problems.append("invasion.mutant: must differ from invasion.resident")
            if self.invasion.resident_count == "equilibrium" and self.density.form == "none":
                problems.append(
                    "invasion.resident_count: 'equilibrium' needs density dependence "
                    "(form = 'none' has no equilibrium); give a number"
                )
        elif sum(a.initial_count for a in self.allele) == 0:
            problems.append("allele: without [invasion], give some allele an initial_count > 0")
        problems += self._effort_checks()
        if self.mutation.matrix is not None and self.trait is None:
            n = len(self.allele)
            q = self.mutation.matrix
            if len(q) != n or any(len(row) != n for row in q):
                problems.append(f"mutation.matrix: must be {n} x {n} (one row and column per allele)")
            else:
                for i, row in enumerate(q):
                    if abs(sum(row) - 1.0) > 1e-9:
                        problems.append(f"mutation.matrix[{i}]: row must sum to 1; got {sum(row):.12g}")
        if self.environment is not None and self.sweep is None:
            problems += _survival_in_years(self)  # (with a sweep: at each point, sweep_points)
        if self.environment is not None and self.experiment.replicates > MAX_COUNT:
            problems.append(f"experiment.replicates: at most {MAX_COUNT} with an [environment] "
                            "(replicate indices key the year streams as one 32-bit word)")
        if self.sweep is not None:
            problems += _check_sweep(self)
        if self.experiment.engine == "counts":
            problems += [f"experiment.engine: 'counts' is not exact for this config ({why}); "
                         "use engine = 'individual'" for why in counts_obstacles(self)]
        if problems:
            raise ValueError("\n".join(problems))
        return self

    def _effort_checks(self) -> list[str]:
        """[tradeoff] exactly when some allele has breeding = "effort"; [trait]'s cross-checks."""
        problems = []
        effort = [a.name for a in self.allele if a.breeding == "effort"]
        if effort and self.tradeoff is None:
            problems.append(f"tradeoff: required: allele {effort[0]!r} has breeding = 'effort' "
                            "(give max_fecundity and max_adult_survival)")
        if not effort and self.tradeoff is not None:
            problems.append("tradeoff: no allele has breeding = 'effort'; remove [tradeoff]")
        t = self.trait
        if t is None:
            return problems
        written = [a.name for a in self.allele]
        if t.allele not in written:
            problems.append(f"trait.allele: no allele is named {t.allele!r} (alleles: {written})")
        elif t.allele not in effort:
            problems.append(f"trait.allele: {t.allele!r} must have breeding = 'effort'")
        if len(self.allele) != 1:
            problems.append(f"allele: with [trait] the template {t.allele!r} is the only [[allele]] "
                            f"(the grid makes the others); got {written}")
        if self.invasion is not None:
            problems.append("invasion: a [trait] run starts monomorphic at trait.initial; remove [invasion]")
        if self.experiment.stop != "max-steps":
            problems.append("experiment.stop: a [trait] run mutates for ever, so it stops at max_steps; "
                            f"set stop = 'max-steps'; got {self.experiment.stop!r}")
        if self.mutation.matrix is not None:
            problems.append("mutation.matrix: a [trait] run mutates to neighbouring grid values at "
                            "mutation.rate; give rate instead")
        return problems

    # -- the model objects this config describes ---------------------------------
    @property
    def alleles(self) -> list[AlleleSection]:
        """The alleles a run holds: as written, or with [trait] one copy of the template per grid
        value (named by value, ``effort`` replaced, the template's ``initial_count`` at ``initial``)."""
        if self.trait is None:
            return list(self.allele)
        template = self.allele[0]
        start = self.trait.initial_index()
        return [template.model_copy(update={"name": name, "effort": float(e),
                                            "initial_count": template.initial_count if i == start else 0})
                for i, (name, e) in enumerate(zip(self.trait.names(), self.trait.grid()))]

    @property
    def allele_names(self) -> list[str]:
        return [a.name for a in self.alleles]

    def efforts(self) -> list[float | None]:
        """Each allele's effort E (None for an allele that is not an effort allele)."""
        return [a.effort for a in self.alleles]

    def schedules(self) -> list[Schedule]:
        """One breeding schedule per allele, in config order."""
        tradeoff = self.tradeoff.tradeoff() if self.tradeoff is not None else None
        return [a.schedule(tradeoff) for a in self.alleles]

    def density_dependence(self) -> DensityDependence:
        d = self.density
        return DensityDependence.from_names(d.form, d.capacity, d.placement, d.counted)

    def offspring_distribution(self):
        return make_offspring(self.offspring.distribution, self.offspring.dispersion)

    def mutation_model(self) -> Mutation:
        if self.trait is not None:
            return neighbour_mutation(len(self.alleles), self.mutation.rate)
        if self.mutation.matrix is not None:
            return Mutation(self.mutation.matrix)
        return uniform_mutation(len(self.allele), self.mutation.rate)

    def allele_index(self, name: str) -> int:
        return self.allele_names.index(name)

    def year_types(self) -> YearTypes | None:
        """The environment's year types, or None for a constant environment."""
        return None if self.environment is None else self.environment.year_types()


def _survival_in_years(config: Config) -> list[str]:
    """An allele whose survival a year type pushes above 1 (``sim.years.scaled_schedule``)."""
    problems = []
    for schedule in config.schedules():
        for year in config.environment.year:
            try:
                scaled_schedule(schedule, year.year_type())
            except ValueError as err:
                problems.append(f"environment.year.{year.name}: {err}; a survival must stay <= 1")
    return problems


# -- the [sweep] table --------------------------------------------------------------
SECTIONS = {
    "experiment": ExperimentSection,
    "density": DensitySection,
    "offspring": OffspringSection,
    "invasion": InvasionSection,
    "mutation": MutationSection,
    "environment": EnvironmentSection,
    "tradeoff": TradeOffSection,
    "trait": TraitSection,
}
_FIXED_PER_EXPERIMENT = ("experiment.seed", "experiment.replicates", "experiment.engine", "experiment.name",
                         "experiment.trajectory", "trait.allele", "trait.values", "trait.start", "trait.stop",
                         "trait.step")


def check_sweep_path(config: Config, path: str) -> str | None:
    """Why ``path`` names nothing in ``config``, or None if it names a key."""
    parts = path.split(".")
    if parts[0] == "allele":
        if len(parts) != 3:
            return "an allele path reads allele.NAME.KEY"
        written = [a.name for a in config.allele]  # as written: a [trait] template is swept by its name
        if parts[1] not in written:
            return f"no allele is named {parts[1]!r} (alleles: {written})"
        if parts[2] == "name":
            return "an allele's name cannot be swept (sweep paths and [invasion] refer to alleles by name)"
        if parts[2] not in AlleleSection.model_fields:
            return f"allele has no sweepable key {parts[2]!r}{suggest(parts[2], AlleleSection)}"
        return None
    if parts[:2] == ["environment", "year"]:
        return _check_year_path(config, parts)
    if parts[0] not in SECTIONS or len(parts) != 2:
        return ("a path reads SECTION.KEY, allele.NAME.KEY or environment.year.NAME.KEY "
                f"(sections: {', '.join(SECTIONS)})")
    section = SECTIONS[parts[0]]
    if parts[1] not in section.model_fields:
        return f"[{parts[0]}] has no key {parts[1]!r}{suggest(parts[1], section)}"
    if parts[0] in ("invasion", "environment", "tradeoff", "trait") and getattr(config, parts[0]) is None:
        return f"the config has no [{parts[0]}] table"
    if path in _FIXED_PER_EXPERIMENT:
        return "is set once per experiment and cannot be swept"
    return None


def _check_year_path(config: Config, parts: list[str]) -> str | None:
    if config.environment is None:
        return "the config has no [environment] table"
    if len(parts) != 4:
        return "a year path reads environment.year.NAME.KEY"
    names = [y.name for y in config.environment.year]
    if parts[2] not in names:
        return f"no year type is named {parts[2]!r} (year types: {names})"
    if parts[3] == "name":
        return "a year type's name cannot be swept (sweep paths refer to year types by name)"
    if parts[3] not in YearSection.model_fields:
        return f"a year type has no sweepable key {parts[3]!r}{suggest(parts[3], YearSection)}"
    return None


LINKED = "linked"  # [[sweep.linked]]: groups of paths whose lists advance together


def _check_sweep(config: Config) -> list[str]:
    """Problems of the ``[sweep]`` table: paths naming nothing, empty or unequal lists."""
    problems, seen = [], set()

    def check_path(where: str, path: str, values) -> None:
        problem = check_sweep_path(config, path)
        if problem:
            problems.append(f"{where}: {problem}")
        elif not isinstance(values, list) or len(values) == 0:
            problems.append(f"{where}: needs a list of at least one value; got {values!r}")
        elif path in seen:
            problems.append(f"{where}: {path!r} is swept twice (a path belongs to one factor)")
        seen.add(path)

    for path, values in config.sweep.items():
        if path != LINKED:
            check_path(f"sweep.{path!r}", path, values)
    groups = config.sweep.get(LINKED, [])
    if not problems:
        n_points = 1
        for path, values in config.sweep.items():
            if path != LINKED:
                n_points *= len(values)
        for group in groups:
            if isinstance(group, dict) and group:
                n_points *= max(len(v) if isinstance(v, list) else 1 for v in group.values())
        if n_points > MAX_SWEEP_POINTS:
            problems.append(f"sweep: {n_points:,} points; at most {MAX_SWEEP_POINTS:,} can be run "
                            "(each is a config held in memory): split the sweep into several experiments")
    for g, group in enumerate(groups):
        where = f"sweep.linked[{g}]"
        if not isinstance(group, dict) or not group:
            problems.append(f"{where}: write each linked group as a [[sweep.linked]] table of "
                            f"path = [values]; got {group!r}")
            continue
        for path, values in group.items():
            check_path(f"{where}.{path!r}", path, values)
        lengths = {path: len(v) for path, v in group.items() if isinstance(v, list)}
        if len(set(lengths.values())) > 1:
            problems.append(f"{where}: linked lists must have equal length; got "
                            + ", ".join(f"{p} has {n}" for p, n in lengths.items()))
    return problems


def suggest(key: str, model) -> str:
    close = difflib.get_close_matches(key, list(model.model_fields), n=1)
    return f"; did you mean {close[0]!r}?" if close else ""


@functools.cache
def _attribute_docstrings(module: str) -> dict[str, dict[str, str]]:
    """Per class of ``module``: each annotated attribute's docstring (the string just under it)."""
    tree = ast.parse(Path(sys.modules[module].__file__).read_text(encoding="utf-8"))
    found = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ClassDef):
            docs = found.setdefault(node.name, {})
            for field, doc in zip(node.body, node.body[1:]):
                if (isinstance(field, ast.AnnAssign) and isinstance(field.target, ast.Name)
                        and isinstance(doc, ast.Expr) and isinstance(doc.value, ast.Constant)
                        and isinstance(doc.value.value, str)):
                    docs[field.target.id] = inspect.cleandoc(doc.value.value)
    return found


def field_descriptions(model: type[BaseModel]) -> dict[str, str]:
    """What each field of a config section means: the docstring under it in the class that
    declares it ("" where there is none); the config reference is generated from these."""
    docs: dict[str, str] = {}
    for cls in reversed(model.__mro__):
        if issubclass(cls, BaseModel) and cls.__module__.startswith("sim."):
            docs.update(_attribute_docstrings(cls.__module__).get(cls.__name__, {}))
    return {name: docs.get(name) or field.description or "" for name, field in model.model_fields.items()}
