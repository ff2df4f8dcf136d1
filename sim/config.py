"""Experiment configuration: the TOML vocabulary, its constraints, and sweep points.

Constraints are declared once, here, and checked when a config is loaded:
engines never see an invalid config. Every refusal names the key's path, the
rule and the value received, e.g. ``allele[1].adult_survival must be in
[0, 1]; got 1.3``.
"""

from __future__ import annotations

import copy
import difflib
import hashlib
import itertools
import json
import tomllib
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, ValidationError, model_validator

from .aggregation import counts_obstacles
from .density import DensityDependence
from .mutation import Mutation, uniform_mutation
from .offspring import make_offspring
from .schedules import Schedule, iteroparous, semelparous, table

__all__ = [
    "ConfigError",
    "Config",
    "ExperimentSection",
    "DensitySection",
    "OffspringSection",
    "AlleleSection",
    "InvasionSection",
    "MutationSection",
    "SweepPoint",
    "load_config",
    "parse_config",
    "sweep_points",
    "sweep_factors",
    "swept_paths",
    "config_hash",
    "config_differences",
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


# strict: a number written as text ("4.5") is refused, not quietly converted
Probability = Annotated[float, Field(strict=True), AfterValidator(_probability)]
NonNegative = Annotated[float, Field(strict=True), AfterValidator(_non_negative)]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class ExperimentSection(_Section):
    """``[experiment]``: what to run and when to stop."""

    name: str = "experiment"
    seed: int = Field(0, ge=0, strict=True)
    replicates: int = Field(100, ge=1, strict=True)
    max_steps: int = Field(1000, ge=1, strict=True)
    stop: Literal["fixation", "max-steps"] = "fixation"
    record_every: int = Field(1, ge=1, strict=True)
    engine: Literal["individual", "agents", "counts"] = "individual"
    max_population: int = Field(1_000_000, ge=1, le=MAX_COUNT, strict=True)
    trajectory: Literal["by-age", "by-allele", "none"] = "by-age"


class DensitySection(_Section):
    """``[density]``: the form of density dependence, where it acts, who is counted."""

    form: Literal["none", "beverton-holt", "ricker", "ceiling"] = "none"
    acts_on: Literal["recruitment", "fecundity", "adult-survival", "all-survival"] | None = None
    counted: Literal["census", "breeders", "offspring"] = "census"
    capacity: float | None = Field(None, gt=0, strict=True)

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

    distribution: Literal["poisson", "fixed", "negative-binomial"] = "poisson"
    dispersion: float | None = Field(None, gt=0, strict=True)

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
    breeding: Literal["semelparous", "iteroparous", "table"]
    fecundity: NonNegative | list[NonNegative]
    adult_survival: Probability | list[Probability] | None = None
    juvenile_survival: Probability
    maturity_age: int = Field(1, ge=1, le=200, strict=True)
    initial_count: int = Field(0, ge=0, le=MAX_COUNT, strict=True)

    @model_validator(mode="after")
    def _shape(self):
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

    def schedule(self) -> Schedule:
        """The breeding schedule this allele fixes."""
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
    mutant_count: int = Field(1, ge=1, le=MAX_COUNT, strict=True)
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


class Config(_Section):
    """A whole experiment as written in TOML (the ``[sweep]`` table kept unexpanded)."""

    experiment: ExperimentSection = ExperimentSection()
    density: DensitySection = DensitySection()
    offspring: OffspringSection = OffspringSection()
    allele: list[AlleleSection] = Field(min_length=1)
    invasion: InvasionSection | None = None
    mutation: MutationSection = MutationSection()
    sweep: dict[str, list[Any]] | None = None

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
        if self.mutation.matrix is not None:
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

    # -- the model objects this config describes ---------------------------------
    @property
    def allele_names(self) -> list[str]:
        return [a.name for a in self.allele]

    def schedules(self) -> list[Schedule]:
        """One breeding schedule per allele, in config order."""
        return [a.schedule() for a in self.allele]

    def density_dependence(self) -> DensityDependence:
        d = self.density
        return DensityDependence.from_names(d.form, d.capacity, d.placement, d.counted)

    def offspring_distribution(self):
        return make_offspring(self.offspring.distribution, self.offspring.dispersion)

    def mutation_model(self) -> Mutation:
        if self.mutation.matrix is not None:
            return Mutation(self.mutation.matrix)
        return uniform_mutation(len(self.allele), self.mutation.rate)

    def allele_index(self, name: str) -> int:
        return self.allele_names.index(name)


# -- sweep paths ------------------------------------------------------------------
_SECTIONS = {
    "experiment": ExperimentSection,
    "density": DensitySection,
    "offspring": OffspringSection,
    "invasion": InvasionSection,
    "mutation": MutationSection,
}


def _check_sweep_path(config: Config, path: str) -> str | None:
    """Why ``path`` names nothing in ``config``, or None if it names a key."""
    parts = path.split(".")
    if parts[0] == "allele":
        if len(parts) != 3:
            return "an allele path reads allele.NAME.KEY"
        if parts[1] not in config.allele_names:
            return f"no allele is named {parts[1]!r} (alleles: {config.allele_names})"
        if parts[2] == "name" or parts[2] not in AlleleSection.model_fields:
            return f"allele has no sweepable key {parts[2]!r}{_suggest(parts[2], AlleleSection)}"
        return None
    if parts[0] not in _SECTIONS or len(parts) != 2:
        return ("a path reads SECTION.KEY or allele.NAME.KEY "
                "(sections: experiment, density, offspring, invasion, mutation)")
    section = _SECTIONS[parts[0]]
    if parts[1] not in section.model_fields:
        return f"[{parts[0]}] has no key {parts[1]!r}{_suggest(parts[1], section)}"
    if parts[0] == "invasion" and config.invasion is None:
        return "the config has no [invasion] table"
    if path in ("experiment.seed", "experiment.replicates", "experiment.engine", "experiment.name",
                "experiment.trajectory"):
        return "is set once per experiment and cannot be swept"
    return None


LINKED = "linked"  # [[sweep.linked]]: groups of paths whose lists advance together


def _check_sweep(config: Config) -> list[str]:
    """Problems of the ``[sweep]`` table: paths naming nothing, empty or unequal lists."""
    problems, seen = [], set()

    def check_path(where: str, path: str, values) -> None:
        problem = _check_sweep_path(config, path)
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


def _suggest(key: str, model) -> str:
    close = difflib.get_close_matches(key, list(model.model_fields), n=1)
    return f"; did you mean {close[0]!r}?" if close else ""


def _set_path(raw: dict, path: str, value) -> None:
    parts = path.split(".")
    if parts[0] == "allele":
        for allele in raw["allele"]:
            if allele.get("name") == parts[1]:
                allele[parts[2]] = value
                return
        raise KeyError(path)
    raw.setdefault(parts[0], {})[parts[1]] = value


class SweepPoint(BaseModel):
    """One point of an experiment: its index, the swept values and the full config there."""

    model_config = ConfigDict(frozen=True)

    index: int
    values: dict[str, Any]
    config: Config


def sweep_factors(config: Config) -> list[dict[str, list]]:
    """The factors of the sweep, each a dict of path -> values that vary together.

    A plain ``[sweep]`` key is a factor of one path; a ``[[sweep.linked]]``
    group is one factor whose equal-length lists are read in step. Plain
    keys come first (in file order), then the linked groups (in file order).
    """
    if not config.sweep:
        return []
    factors = [{path: values} for path, values in config.sweep.items() if path != LINKED]
    return factors + [dict(group) for group in config.sweep.get(LINKED, [])]


def swept_paths(config: Config) -> list[str]:
    """Every swept path, in the order of the points table's columns."""
    return [path for factor in sweep_factors(config) for path in factor]


def sweep_points(config: Config) -> list[SweepPoint]:
    """Expand ``[sweep]`` into points: the cartesian product of its factors.

    Each plain key is a factor; each ``[[sweep.linked]]`` group is one factor
    whose lists advance together (a zip). The last factor varies fastest.
    Each point's config is validated on its own, so a swept value out of
    range is refused with the point and the key named. Without a sweep there
    is one point, the config itself.
    """
    base = config.model_dump(exclude={"sweep"}, exclude_none=True)
    factors = sweep_factors(config)
    if not factors:
        return [SweepPoint(index=0, values={}, config=Config.model_validate(base))]
    points, problems = [], []
    levels = [range(len(next(iter(factor.values())))) for factor in factors]
    for i, combo in enumerate(itertools.product(*levels)):
        raw = copy.deepcopy(base)
        values = {path: factor[path][k] for factor, k in zip(factors, combo) for path in factor}
        for path, value in values.items():
            _set_path(raw, path, value)
        try:
            points.append(SweepPoint(index=i, values=values, config=Config.model_validate(raw)))
        except ValidationError as err:
            where = ", ".join(f"{p} = {v!r}" for p, v in values.items())
            problems += [f"sweep point {i} ({where}): {m}" for m in _messages(err)]
    if problems:
        raise ConfigError(problems)
    return points


# -- loading and messages ---------------------------------------------------------
def _loc(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in ("float", "list[float]", "int", "list[constrained-float]", "constrained-float") \
                or part.startswith(("list[", "function-after", "literal[", "constrained-int")):
            continue  # pydantic's union-branch labels, not keys
        else:
            out += f".{part}" if out else str(part)
    return out


def _wrong_union_branch(e) -> bool:
    """True for the error of a scalar-or-list union's branch the input plainly was not meant for."""
    labels = [p for p in e["loc"] if isinstance(p, str) and ("[" in p or p in ("float", "int"))]
    if not labels:
        return False
    list_branch = labels[0].startswith("list[")
    return list_branch != isinstance(e.get("input"), list) and e["type"] in (
        "list_type", "float_type", "float_parsing", "int_type", "int_parsing", "literal_error")


def _messages(err: ValidationError) -> list[str]:
    seen, out = set(), []
    for e in err.errors(include_url=False):
        if _wrong_union_branch(e):
            continue
        path = _loc(e["loc"])
        kind = e["type"]
        got = e.get("input")
        if kind == "extra_forbidden":
            msg = f"unknown key {path}"
            parent, _, key = path.rpartition(".")
            model = _model_at(parent)
            if model is not None:
                msg += _suggest(key, model) or f" (known keys: {', '.join(model.model_fields)})"
        elif kind == "value_error":
            text = e["msg"].removeprefix("Value error, ")
            if text.startswith("must"):
                msg = f"{path} {text}; got {got!r}"
            else:  # a model-level check: lines of 'key: reason', keys relative to its path
                for line in text.splitlines():
                    line = f"{path}.{line}" if path else line
                    if line not in seen:
                        seen.add(line)
                        out.append(line)
                continue
        elif kind == "missing":
            msg = f"{path} is required"
        elif kind == "literal_error":
            msg = f"{path} must be {e['msg'].removeprefix('Input should be ')}; got {got!r}"
        elif kind in ("greater_than_equal", "greater_than", "less_than_equal", "less_than"):
            op = {"greater_than_equal": ">=", "greater_than": ">", "less_than_equal": "<=", "less_than": "<"}[kind]
            bound = next(iter(e["ctx"].values()))
            msg = f"{path} must be {op} {bound}; got {got!r}"
        else:
            msg = f"{path}: {e['msg'].lower()}; got {got!r}"
        if msg not in seen:
            seen.add(msg)
            out.append(msg)
    return out


def _model_at(path: str):
    head = path.split("[")[0].split(".")[0]
    if path == "":
        return Config
    if head == "allele":
        return AlleleSection
    return _SECTIONS.get(head)


def parse_config(raw: dict) -> Config:
    """Validate a config given as a dict (as TOML would load it)."""
    try:
        config = Config.model_validate(raw)
    except ValidationError as err:
        raise ConfigError(_messages(err)) from None
    sweep_points(config)  # a swept value out of range is refused now, not mid-run
    return config


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file; raise ConfigError naming each problem."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"config file {str(path)!r} not found")
    try:
        raw = tomllib.loads(path.read_text())
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: not valid TOML: {err}") from None
    return parse_config(raw)


def config_hash(config: Config) -> str:
    """SHA-256 of the resolved config (canonical JSON); equal configs give equal hashes."""
    text = json.dumps(config.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def _flatten(value, path: str = "") -> dict[str, Any]:
    """Leaves of a JSON-like value by path (``allele[1].fecundity``); lists of scalars are leaves."""
    if isinstance(value, dict):
        out = {}
        for key, item in value.items():
            out.update(_flatten(item, f"{path}.{key}" if path else str(key)))
        return out
    if isinstance(value, list) and any(isinstance(v, (dict, list)) for v in value):
        out = {}
        for i, item in enumerate(value):
            out.update(_flatten(item, f"{path}[{i}]"))
        return out
    return {path: value}


def config_differences(old: Config | dict, new: Config | dict) -> list[str]:
    """Lines ``path: OLD -> NEW`` for every key where two resolved configs differ."""
    a, b = (_flatten(c.model_dump(mode="json") if isinstance(c, Config) else c) for c in (old, new))
    missing = object()
    lines = []
    for path in sorted(set(a) | set(b)):
        x, y = a.get(path, missing), b.get(path, missing)
        if x != y:
            show = [("(absent)" if v is missing else json.dumps(v)) for v in (x, y)]
            lines.append(f"{path}: {show[0]} -> {show[1]}")
    return lines
