"""The config schema: the TOML vocabulary and every constraint on it, declared once.

Constraints are checked when a config is loaded: engines and domain objects
never see an invalid config. Every refusal names the key's path, the rule and
the value received, e.g. ``allele[1].adult_survival must be in [0, 1]; got
1.3`` (``sim.config.messages`` words pydantic's errors that way).
"""

from __future__ import annotations

import difflib
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

__all__ = [
    "MAX_COUNT",
    "LINKED",
    "ConfigError",
    "Config",
    "ExperimentSection",
    "DensitySection",
    "OffspringSection",
    "AlleleSection",
    "InvasionSection",
    "MutationSection",
    "TradeOffSection",
    "TraitSection",
    "SECTIONS",
    "check_sweep_path",
]

MAX_COUNT = 2**32 - 1  # census counts are stored as uint32


class ConfigError(ValueError):
    """A config was refused; ``problems`` lists one message per offending key."""

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


def _probability(x: float) -> float:
    if not 0.0 <= x <= 1.0:
        raise ValueError("must be in [0, 1]")
    return x


def _non_negative(x: float) -> float:
    if x < 0:
        raise ValueError("must be >= 0")
    return x


def _resident_count(x):
    if x == "equilibrium" or (isinstance(x, int) and not isinstance(x, bool) and 1 <= x <= MAX_COUNT):
        return x
    raise ValueError(f"must be 'equilibrium' or a whole number in [1, {MAX_COUNT}]")


Probability = Annotated[float, AfterValidator(_probability)]
NonNegative = Annotated[float, AfterValidator(_non_negative)]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    # Optional keys added after 0.2.0 are left out of a dump while unset, so an older config's
    # resolved form (its config_hash, the results file's /points/config) stays as it was.
    _omit_unset: ClassVar[tuple[str, ...]] = ()

    @model_serializer(mode="wrap")
    def _without_unset_additions(self, handler):
        data = handler(self)
        for key in self._omit_unset:
            if key in data and data[key] is None:
                del data[key]
        return data


class ExperimentSection(_Section):
    """``[experiment]``: what to run and when to stop."""

    name: str = "experiment"
    seed: int = Field(0, ge=0)
    replicates: int = Field(100, ge=1)
    max_steps: int = Field(1000, ge=1)
    stop: Literal[words.STOP_RULES] = "fixation"
    record_every: int = Field(1, ge=1)
    engine: Literal[words.ENGINES] = "individual"
    max_population: int = Field(1_000_000, ge=1, le=MAX_COUNT)
    trajectory: Literal[words.TRAJECTORY_MODES] = "by-age"


class DensitySection(_Section):
    """``[density]``: the form of density dependence, where it acts, who is counted."""

    form: Literal[words.DENSITY_FORMS] = "none"
    acts_on: Literal[words.PLACEMENTS] | None = None
    counted: Literal[words.COUNTED] = "census"
    capacity: float | None = Field(None, gt=0)

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
    dispersion: float | None = Field(None, gt=0)

    @model_validator(mode="after")
    def _dispersion(self):
        if self.distribution == "negative-binomial" and self.dispersion is None:
            raise ValueError("dispersion: required for distribution 'negative-binomial'")
        if self.distribution != "negative-binomial" and self.dispersion is not None:
            raise ValueError(f"dispersion: only used by 'negative-binomial', not {self.distribution!r}")
        return self


class AlleleSection(_Section):
    """``[[allele]]``: one heritable breeding schedule."""

    name: str = Field(min_length=1)
    breeding: Literal[words.BREEDING]
    fecundity: NonNegative | list[NonNegative] | None = None
    adult_survival: Probability | list[Probability] | None = None
    juvenile_survival: Probability
    maturity_age: int = Field(1, ge=1, le=200)
    initial_count: int = Field(0, ge=0, le=MAX_COUNT)
    effort: Probability | None = None  # breeding = "effort": E, the share put into breeding

    _omit_unset: ClassVar[tuple[str, ...]] = ("effort",)

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
        """The breeding schedule this allele fixes (an effort allele reads ``tradeoff``)."""
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
    mutant: str
    mutant_count: int = Field(1, ge=1, le=MAX_COUNT)
    resident_count: Annotated[Any, AfterValidator(_resident_count)] = "equilibrium"


class MutationSection(_Section):
    """``[mutation]``: per-offspring mutation, uniform to the other alleles or by matrix."""

    rate: Probability = 0.0
    matrix: list[list[Probability]] | None = None

    @model_validator(mode="after")
    def _one_way(self):
        if self.matrix is not None and self.rate != 0.0:
            raise ValueError("matrix: give either rate or matrix, not both")
        return self


class TradeOffSection(_Section):
    """``[tradeoff]``: fecundity B(E) against adult survival P(E), shared by every effort allele."""

    max_fecundity: NonNegative = Field(allow_inf_nan=False)
    fecundity_shape: float = Field(1.0, gt=0, allow_inf_nan=False)
    max_adult_survival: Probability
    survival_shape: float = Field(1.0, gt=0, allow_inf_nan=False)

    def tradeoff(self) -> TradeOff:
        return TradeOff(self.max_fecundity, self.fecundity_shape, self.max_adult_survival, self.survival_shape)


GRID_TOLERANCE = 1e-9  # two efforts closer than this are one grid value


class TraitSection(_Section):
    """``[trait]``: effort alleles on a grid, copied from a template, mutating to grid neighbours."""

    allele: str
    values: list[Probability] | None = None
    start: Probability | None = None
    stop: Probability | None = None
    step: float | None = Field(None, gt=0, allow_inf_nan=False)
    initial: Probability

    @model_validator(mode="after")
    def _one_grid(self):
        ranged = [k for k in ("start", "stop", "step") if getattr(self, k) is not None]
        if self.values is not None:
            if ranged:
                raise ValueError(f"{ranged[0]}: give either values or start / stop / step, not both")
            if len(self.values) < 2:
                raise ValueError(f"values: a grid needs at least 2 efforts; got {self.values}")
            if any(b - a <= GRID_TOLERANCE for a, b in zip(self.values, self.values[1:])):
                raise ValueError(f"values: must be strictly increasing; got {self.values}")
        else:
            if len(ranged) < 3:
                missing = [k for k in ("start", "stop", "step") if k not in ranged]
                raise ValueError(f"{missing[0]}: required (give values, or start, stop and step)")
            if self.stop <= self.start:
                raise ValueError(f"stop: must be > start ({self.start}); got {self.stop}")
            n = (self.stop - self.start) / self.step
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
    density: DensitySection = DensitySection()
    offspring: OffspringSection = OffspringSection()
    allele: list[AlleleSection] = Field(min_length=1)
    invasion: InvasionSection | None = None
    mutation: MutationSection = MutationSection()
    tradeoff: TradeOffSection | None = None
    trait: TraitSection | None = None
    sweep: dict[str, list[Any]] | None = None

    _omit_unset: ClassVar[tuple[str, ...]] = ("tradeoff", "trait")

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


# -- the [sweep] table --------------------------------------------------------------
SECTIONS = {
    "experiment": ExperimentSection,
    "density": DensitySection,
    "offspring": OffspringSection,
    "invasion": InvasionSection,
    "mutation": MutationSection,
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
        if parts[2] == "name" or parts[2] not in AlleleSection.model_fields:
            return f"allele has no sweepable key {parts[2]!r}{suggest(parts[2], AlleleSection)}"
        return None
    if parts[0] not in SECTIONS or len(parts) != 2:
        return ("a path reads SECTION.KEY or allele.NAME.KEY "
                f"(sections: {', '.join(SECTIONS)})")
    section = SECTIONS[parts[0]]
    if parts[1] not in section.model_fields:
        return f"[{parts[0]}] has no key {parts[1]!r}{suggest(parts[1], section)}"
    if parts[0] in ("invasion", "tradeoff", "trait") and getattr(config, parts[0]) is None:
        return f"the config has no [{parts[0]}] table"
    if path in _FIXED_PER_EXPERIMENT:
        return "is set once per experiment and cannot be swept"
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
